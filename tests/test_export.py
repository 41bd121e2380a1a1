"""Export files re-read with independent parsers (ezdxf, json + shapely, xml.etree, csv)."""
import csv
import dataclasses
import importlib
import json
import math
import os
import xml.etree.ElementTree as ET
from pathlib import Path

import ezdxf
import numpy as np
import pytest
from conftest import plate_problem
from shapely.geometry import MultiPolygon, Point, Polygon, box, shape
from shapely.geometry.polygon import orient

from levelform.spec import (
    CAUTION,
    GridInfo,
    IterationRecord,
    Load,
    LoadCase,
    Region,
    Result,
    Support,
)

# levelform/__init__.py defines a function named ``export``; fetch the module itself.
ex = importlib.import_module("levelform.io")

SVG_NS = "{http://www.w3.org/2000/svg}"


def make_result(length="mm", compliance=12.5, name="bracket <demo> & co"):
    """A hand-made Result: a plate with a bolt hole and two design holes."""
    outline = ((0.0, 0.0), (40.0, 0.0), (40.0, 20.0), (0.0, 20.0))
    bolt = ((4.0, 8.0), (8.0, 8.0), (8.0, 12.0), (4.0, 12.0))
    problem = plate_problem(
        outline, 0.5,
        supports=(Support("point", (0.0, 0.0), "xy", key="support[0]"),
                  Support("point", (40.0, 0.0), "y", key="support[1]"),
                  Support("segment", ((0.0, 14.0), (0.0, 20.0)), "x", key="support[2]"),
                  Support("box", (2.0, 6.0, 10.0, 14.0), "xy", key="support[3]")),
        loads=(Load("point", (30.0, 20.0), (0.0, -100.0), key="load[0]"),
               Load("segment", ((36.0, 20.0), (40.0, 20.0)), (5.0, -5.0), key="load[1]")),
        holes=(bolt,),
        regions=(Region("solid", "circle", (6.0, 10.0, 4.0), key="region[0]"),
                 Region("empty", "box", (18.0, 0.0, 22.0, 3.0), key="region[1]")),
        E=70e3, nu=0.33, t=2.0, length=length, name=name, source="demo.toml")
    dom = Polygon(outline, [bolt])
    design = dom.difference(Point(16, 10).buffer(3.0, quad_segs=16)).difference(box(26, 6, 32, 14))
    material = MultiPolygon([orient(design, 1.0)])
    hist = tuple(IterationRecord(iteration=k, compliance=100.0 / (k + 1) + 12.0,
                                 material_fraction=1.0 - 0.05 * min(k, 10),
                                 target_fraction=max(0.5, 1.0 - 0.05 * k),
                                 boundary_change=0.1 / (k + 1), step=0.5)
                 for k in range(20))
    return Result(problem=problem, method="levelset", outline=material,
                  compliance=compliance, material_fraction=material.area / dom.area,
                  iterations=20, converged=True, status="converged", seconds=1.25,
                  history=hist, settings={"smoothing": 1.0, "step": 0.5},
                  grid=GridInfo(nx=80, ny=40, x0=0.0, y0=0.0, h=0.5),
                  case_compliance={"main": compliance})


@pytest.fixture(scope="module")
def exported(tmp_path_factory):
    result = make_result()
    out = tmp_path_factory.mktemp("out")
    return result, ex.export(result, out), out


def test_export_writes_every_file(exported):
    _, paths, out = exported
    assert set(paths) == set(ex.FILES)
    for name, path in paths.items():
        assert path == out / name and path.stat().st_size > 0
    for png in ("design.png", "history.png"):
        assert (out / png).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG spec)
    leftovers = [p.name for p in out.iterdir() if p.name not in ex.FILES]
    assert leftovers == []


def test_dxf_rereads_with_layers_units_and_exact_rings(exported):
    result, paths, _ = exported
    doc = ezdxf.readfile(paths["outline.dxf"])
    assert doc.dxfversion == "AC1024"  # R2010 (DXF reference)
    for layer in ("OUTLINE", "HOLES", "KEEP_SOLID", "KEEP_EMPTY", "SUPPORTS", "LOADS", "DOMAIN"):
        assert layer in doc.layers
    assert doc.header["$INSUNITS"] == 4  # 4 = millimetres (DXF reference, $INSUNITS)
    msp = doc.modelspace()
    outer = [e for e in msp.query("LWPOLYLINE") if e.dxf.layer == "OUTLINE"]
    holes = [e for e in msp.query("LWPOLYLINE") if e.dxf.layer == "HOLES"]
    assert all(e.closed for e in outer + holes)
    polys = list(result.outline.geoms)
    assert len(outer) == len(polys)
    assert len(holes) == sum(len(p.interiors) for p in polys)
    area = sum(Polygon([p[:2] for p in e.get_points()]).area for e in outer) - sum(
        Polygon([p[:2] for p in e.get_points()]).area for e in holes)
    assert area == pytest.approx(result.outline.area, rel=1e-9)
    assert len([e for e in msp if e.dxf.layer == "SUPPORTS"]) > 0
    assert len([e for e in msp if e.dxf.layer == "LOADS"]) > 0


@pytest.mark.parametrize("unit,code", [("cm", 5), ("m", 6), ("in", 1), ("ft", 2)])
def test_dxf_units_follow_problem(tmp_path, unit, code):
    # $INSUNITS codes: 1 inches, 2 feet, 5 centimetres, 6 metres (DXF reference).
    path = tmp_path / "o.dxf"
    ex.atomic_write_bytes(path, ex.outline_dxf(make_result(length=unit)))
    assert ezdxf.readfile(path).header["$INSUNITS"] == code


def test_dxf_unknown_unit_is_unitless_and_named(tmp_path):
    path = tmp_path / "o.dxf"
    ex.atomic_write_bytes(path, ex.outline_dxf(make_result(length="furlong")))
    doc = ezdxf.readfile(path)
    assert doc.header["$INSUNITS"] == 0  # 0 = unitless (DXF reference)
    assert doc.header.custom_vars.get("LENGTH_UNIT") == "furlong"


def test_geojson_area_and_orientation(exported):
    result, paths, _ = exported
    data = json.loads(paths["outline.geojson"].read_text())
    assert data["type"] == "FeatureCollection"
    roles = [f["properties"]["role"] for f in data["features"]]
    assert roles[:2] == ["material", "domain"] and "keep_solid" in roles and "keep_empty" in roles
    mat = data["features"][0]
    assert mat["properties"]["units"] == "mm" and "not WGS84" in mat["properties"]["crs"]
    geom = shape(mat["geometry"])  # shapely as the independent GeoJSON reader
    assert geom.is_valid
    assert geom.area == pytest.approx(result.outline.area, rel=1e-8)
    for poly in geom.geoms:  # RFC 7946 section 3.1.6: exterior CCW, holes CW
        assert poly.exterior.is_ccw and all(not r.is_ccw for r in poly.interiors)
    dom = shape(data["features"][1]["geometry"])
    assert dom.area == pytest.approx(40 * 20 - 16)


def test_svg_parses_with_title_flip_and_evenodd(exported):
    result, paths, _ = exported
    root = ET.parse(paths["outline.svg"]).getroot()
    assert root.tag == SVG_NS + "svg"
    assert root.find(SVG_NS + "title").text == result.problem.name  # escaped & restored
    vx, vy, vw, vh = (float(v) for v in root.get("viewBox").split())
    assert vy == pytest.approx(-20.0 - 0.02 * 40.0)  # y flipped: top of model at -maxy
    assert vw == pytest.approx(40.0 * 1.04) and root.get("width").endswith("mm")
    paths_ = {p.get("id"): p for p in root.iter(SVG_NS + "path")}
    assert paths_["material"].get("fill-rule") == "evenodd"
    assert paths_["domain"].get("fill") == "none"
    # Re-read the material path and compare its even-odd area with the outline.
    rings = []
    for chunk in paths_["material"].get("d").split("Z"):
        chunk = chunk.strip().lstrip("M")
        if chunk:
            pts = [tuple(float(v) for v in xy.split(",")) for xy in chunk.split()]
            rings.append(Polygon([(x, -y) for x, y in pts]))
    even_odd = rings[0]
    for r in rings[1:]:
        even_odd = even_odd.symmetric_difference(r)
    assert even_odd.area == pytest.approx(result.outline.area, rel=1e-8)


def test_summary_keys_and_values(exported):
    result, paths, _ = exported
    data = json.loads(paths["summary.json"].read_text())
    keys = {"compliance", "material_fraction", "iterations", "converged", "status", "seconds",
            "outline_area", "outline_length", "holes", "pieces", "smallest_member_width",
            "units", "settings", "grid", "case_compliance", "method", "problem", "software",
            "caution"}
    assert keys <= set(data)
    assert data["outline_area"] == pytest.approx(result.outline.area)
    assert data["holes"] == 2  # the bolt hole belongs to the domain and is not counted
    assert data["pieces"] == 1
    assert data["units"] == {"length": "mm", "force": "N", "stress": "N/mm^2",
                             "compliance": "N*mm"}
    assert data["grid"] == {"nx": 80, "ny": 40, "h": 0.5, "x0": 0.0, "y0": 0.0}
    assert data["software"]["name"] == "levelform" and data["software"]["version"]
    assert data["caution"] == CAUTION
    assert data["problem"] == {"name": result.problem.name, "source": "demo.toml"}
    # The summary must carry the metric of the outline itself (definition checked
    # against closed forms in test_geometry.py); the narrowest bar here, left of the bolt
    # hole, is 4 wide, so the reported width cannot exceed that by more than tolerance.
    from levelform.geometry.measure import smallest_member_width
    assert data["smallest_member_width"] == pytest.approx(
        smallest_member_width(result.outline), rel=1e-9)
    assert 0.0 < data["smallest_member_width"] <= 4.0 + 0.05
    text = paths["summary.json"].read_text()
    assert text == json.dumps(data, sort_keys=True, indent=2, ensure_ascii=False) + "\n"


def test_history_csv_columns_and_rows(exported):
    result, paths, _ = exported
    with open(paths["history.csv"], newline="") as f:
        rows = list(csv.reader(f))
    assert rows[0] == [f.name for f in dataclasses.fields(IterationRecord)]
    assert len(rows) == 1 + len(result.history)
    assert float(rows[5][1]) == result.history[4].compliance  # repr round-trips exactly


def test_same_result_twice_gives_identical_bytes(tmp_path):
    a = ex.export(make_result(), tmp_path / "a")
    b = ex.export(make_result(), tmp_path / "b")
    for name in ("outline.svg", "outline.dxf", "outline.geojson", "history.csv", "summary.json"):
        assert a[name].read_bytes() == b[name].read_bytes(), name
    # ezdxf's own option must be restored after writing.
    assert ezdxf.options.write_fixed_meta_data_for_testing is False


def test_nan_values_become_null(tmp_path):
    res = make_result(compliance=float("nan"))
    data = json.loads(ex.json_text(ex.summary(res)))
    assert data["compliance"] is None and data["case_compliance"]["main"] is None
    path = ex.write_json(tmp_path / "x.json", {"b": np.float64(np.inf), "a": (1, np.int64(2))})
    assert path.read_text() == '{\n  "a": [\n    1,\n    2\n  ],\n  "b": null\n}\n'


def test_failed_replace_keeps_old_file_and_leaves_no_temp(tmp_path, monkeypatch):
    target = tmp_path / "summary.json"
    target.write_text("old")

    def broken_replace(src, dst):
        raise OSError("disk full (simulated)")

    monkeypatch.setattr(importlib.import_module("levelform.io.atomic").os, "replace", broken_replace)
    with pytest.raises(OSError, match="simulated"):
        ex.atomic_write_text(target, "new")
    assert target.read_text() == "old"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["summary.json"]


def test_failed_write_midway_leaves_no_temp(tmp_path):
    with pytest.raises(TypeError):
        ex.atomic_write_bytes(tmp_path / "f.bin", object())  # not bytes: fails in write
    assert list(tmp_path.iterdir()) == []


@pytest.mark.skipif(os.name != "posix" or os.geteuid() == 0,
                    reason="root ignores directory permissions")
def test_read_only_folder_raises_and_leaves_nothing(tmp_path):
    ro = tmp_path / "ro"
    ro.mkdir()
    ro.chmod(0o555)
    try:
        with pytest.raises(PermissionError):
            ex.atomic_write_text(ro / "a.txt", "x")
        assert list(ro.iterdir()) == []
    finally:
        ro.chmod(0o755)


def test_export_writes_nothing_if_a_renderer_fails(tmp_path, monkeypatch):
    def broken(result):
        raise RuntimeError("renderer failed (simulated)")

    monkeypatch.setattr(importlib.import_module("levelform.io.export"), "history_png", broken)
    out = tmp_path / "out"
    with pytest.raises(RuntimeError, match="simulated"):
        ex.export(make_result(), out)
    assert not out.exists() or list(out.iterdir()) == []


def test_empty_outline_still_exports(tmp_path):
    res = dataclasses.replace(make_result(), outline=MultiPolygon(), material_fraction=0.0,
                              history=())
    paths = ex.export(res, tmp_path)
    data = json.loads(paths["summary.json"].read_text())
    assert data["outline_area"] == 0.0 and data["pieces"] == 0
    assert data["smallest_member_width"] == 0.0
    gj = json.loads(paths["outline.geojson"].read_text())
    assert shape(gj["features"][0]["geometry"]).is_empty
    ET.parse(paths["outline.svg"])
    assert math.isfinite(data["domain_area"])


def test_dxf_identical_across_processes_with_different_hash_seeds(tmp_path):
    # Python randomizes string hashing per process (PYTHONHASHSEED); nothing in the files may
    # depend on set iteration order.
    import subprocess
    import sys

    code = ("import sys; sys.path.insert(0, {tests!r}); from test_export import make_result, ex; "
            "sys.stdout.buffer.write(ex.outline_dxf(make_result()) + ex.outline_svg(make_result()).encode() "
            "+ ex.outline_geojson(make_result()).encode())").format(tests=str(Path(__file__).parent))
    outs = []
    for seed in ("1", "2", "3"):
        env = {**os.environ, "PYTHONHASHSEED": seed}
        outs.append(subprocess.run([sys.executable, "-c", code], capture_output=True, env=env, check=True).stdout)
    assert outs[0] == outs[1] == outs[2]


# --------------------------------------------------------------------------- refusing a full folder

def test_export_refuses_a_non_empty_folder_unless_overwrite(tmp_path):
    # The contract of export(): a folder holding anything is not written into without
    # overwrite=True, and the refusal writes nothing (checked by listing the folder).
    import levelform
    from levelform.spec import ProblemError

    out = tmp_path / "out"
    out.mkdir()
    (out / "notes.txt").write_text("mine")
    for call in (ex.export, levelform.export):
        with pytest.raises(ProblemError, match="overwrite=True") as info:
            call(make_result(), out)
        assert str(out) in str(info.value)
        assert sorted(p.name for p in out.iterdir()) == ["notes.txt"]
    paths = levelform.export(make_result(), out, overwrite=True)
    assert set(paths) == set(ex.FILES)
    assert (out / "notes.txt").read_text() == "mine"  # other files are left alone
    again = ex.export(make_result(compliance=7.0), out, overwrite=True)
    assert json.loads(again["summary.json"].read_text())["compliance"] == 7.0
    # An empty folder, or one not there yet, needs no flag.
    (tmp_path / "empty").mkdir()
    assert set(ex.export(make_result(), tmp_path / "empty")) == set(ex.FILES)
    # A file where the folder should be is refused, whatever the flag.
    (tmp_path / "file").write_text("x")
    for flag in (False, True):
        with pytest.raises(ProblemError, match="not a folder"):
            ex.export(make_result(), tmp_path / "file", overwrite=flag)
    assert (tmp_path / "file").read_text() == "x"


# --------------------------------------------------------------------------- figures

def _history(scale, n=20):
    return tuple(IterationRecord(iteration=k, compliance=scale * (1.0 + 0.2 / (k + 1)),
                                 material_fraction=1.0 - 0.02 * min(k, 10), target_fraction=0.8,
                                 boundary_change=0.1 / (k + 1), step=0.5) for k in range(n))


@pytest.mark.parametrize("scale", [1e-4, 1e6, 1e-3])
def test_history_figure_keeps_its_labels_inside_the_figure(scale):
    # Bounding boxes as matplotlib renders them (the reference library): the compliance
    # label, the material-fraction label, every tick label and the offset text must lie
    # inside the figure. Compliance near 1e-4 gets tick labels like 0.0001025, which pushed
    # the y label off the left edge before the layout was measured.
    from levelform.io.figures import history_figure

    res = dataclasses.replace(make_result(), history=_history(scale))
    fig = history_figure(res)
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    inside = fig.bbox
    ax, ax2 = fig.axes[:2]
    texts = [ax.yaxis.label, ax2.yaxis.label, ax.xaxis.label, ax.title, ax.yaxis.get_offset_text()]
    for axis in (ax.yaxis, ax2.yaxis, ax.xaxis):  # the tick labels drawn: those within the view
        lo, hi = sorted(axis.get_view_interval())
        texts += [lab for loc, lab in zip(axis.get_ticklocs(), axis.get_ticklabels()) if lo <= loc <= hi]
    assert ax.yaxis.label.get_text().startswith("compliance")
    for t in texts:
        if not t.get_visible() or not t.get_text():
            continue
        bb = t.get_window_extent(renderer)
        assert inside.x0 <= bb.x0 and bb.x1 <= inside.x1 and inside.y0 <= bb.y0 and bb.y1 <= inside.y1, (
            t.get_text(), bb, inside)
    # The PNG is the same figure.
    assert ex.history_png(res)[:8] == b"\x89PNG\r\n\x1a\n"


def _texts(fig):
    out = []
    for ax in fig.axes:
        out += [t.get_text() for t in ax.texts]
        if ax.get_legend() is not None:
            out += [t.get_text() for t in ax.get_legend().get_texts()]
    return out


def test_design_figure_names_the_load_case_of_each_arrow():
    # Reference: the problem's own load cases. Two cases: every load is labelled with its
    # case name at the tail of its arrow, each case has its colour and a legend entry.
    from matplotlib.colors import to_hex
    from matplotlib.quiver import Quiver

    from levelform.io.figures import load_arrows, design_figure

    res = make_result()
    p = res.problem
    p2 = dataclasses.replace(p, cases=(LoadCase("gust"), LoadCase("snow", 0.5)),
                             loads=(dataclasses.replace(p.loads[0], case="gust"),
                                    dataclasses.replace(p.loads[1], case="snow")))
    fig = design_figure(dataclasses.replace(res, problem=p2))
    ax = fig.axes[0]
    labels = {t.get_text(): t for t in ax.texts if t.get_text() in ("gust", "snow")}
    assert set(labels) == {"gust", "snow"}
    s = 0.03 * math.hypot(40.0, 20.0)  # the glyph size of design_png: 3 % of the domain's diagonal
    for load in p2.loads:
        tails, _ = load_arrows(load, 3.5 * s)
        assert labels[load.case].xy == pytest.approx(tuple(tails[len(tails) // 2]))
    legend = [t.get_text() for t in ax.get_legend().get_texts()]
    assert "load, case gust" in legend and "load, case snow" in legend
    colors = {to_hex(q.get_facecolor()[0]) for q in ax.collections if isinstance(q, Quiver)}
    assert len(colors) == 2
    # One case: the arrows stay unlabelled and the legend says "load (direction)".
    one = design_figure(res)
    assert "load (direction)" in _texts(one)
    assert not any(t in ("main", "gust", "snow") for t in _texts(one))
