"""Body-fitted re-analysis of exported outlines, checked against outside references.

References (named again beside each check):
- Hole in a plate under tension: Kirsch (1898); the infinite-plate factor is exactly 3.
  Finite width by Heywood's formula K_tn = 2 + (1 - d/W)^3 on the net section, as quoted
  in Pilkey and Pilkey, Peterson's Stress Concentration Factors, 3rd ed. (2008), sec. 4.3.1
  (from memory).
- Cantilever: Timoshenko and Goodier, Theory of Elasticity, 3rd ed. (1970), sec. 21, tip
  deflection P L^3/(3 E I) + (4 + 5 nu) P D^2 L/(24 E I) in plane stress (from memory; the
  same closed form is derived and checked in tests/test_fem.py).
- Grid model: levelform's own fixed-grid analysis (build_model + PlateSystem), which
  tests/test_fem.py checks against scikit-fem and the closed forms above.
- File round trip: files written by levelform.outputs, re-read here; ezdxf writes the
  foreign DXF.
"""
from __future__ import annotations

import dataclasses as dc
import json
import math

import ezdxf
import numpy as np
import pytest
from conftest import ONE_CASE, plate_problem, rectangle
from reference import parabolic_end_forces
from shapely.geometry import MultiPolygon, Point, Polygon, box

import levelform
from levelform.bodyfitted.check import verify_outline
from levelform.comparison import evaluate_crisp
from levelform.fem.analysis import PlateSystem
from levelform.physics import PlaneStress
from levelform.fem.model import build_model
from levelform.io.outline_read import read_outline
from levelform.io.verification import write_verification
from levelform.spec import (
    CAUTION,
    Load,
    LoadCase,
    ProblemError,
    Support,
)


def make_problem(outline, cell, supports, loads, *, pads=False, E=1.0, nu=0.3, t=1.0, cases=ONE_CASE):
    return plate_problem(outline, cell, supports, loads, cases=cases, E=E, nu=nu, t=t,
                         method={"pads": pads, "iterations": 20}, name="verify-test")


def grid_compliance(problem):
    model = build_model(problem)
    m = problem.material
    return PlateSystem(model, PlaneStress(m.E, m.nu, m.thickness)).analyse(np.ones(model.n_cells)).compliance


# ---------------------------------------------------------------------------------------
def test_plate_with_small_hole_peak_stress_is_three_times_remote():
    W, r, sigma = 200.0, 5.0, 1.0  # d/W = 0.05, plate length = width
    problem = make_problem(
        rectangle(0, 0, W, W), 10.0,
        [Support("segment", ((0, 0), (0, W)), "x", key="support[0]"),
         Support("point", (0, W / 2), "y", key="support[1]")],
        [Load("segment", ((W, 0), (W, W)), (sigma, 0.0), key="load[0]")])  # t = 1: traction = sigma
    outline = box(0, 0, W, W).difference(Point(W / 2, W / 2).buffer(r, quad_segs=32))
    v = verify_outline(problem, outline, mesh_size=10.0)
    assert v.ok and not v.problems
    kt = v.max_von_mises / sigma
    # Kirsch: exactly 3 for an infinite plate. Heywood (Peterson's, sec. 4.3.1, from memory):
    # K_tn = 2 + (1 - d/W)^3 = 2.857 on the net section, 2.857 / (1 - d/W) = 3.008 on the gross.
    heywood = (2 + (1 - 2 * r / W) ** 3) / (1 - 2 * r / W)
    assert abs(kt - 3.0) < 0.03 * 3.0  # measured 3.005
    assert abs(kt - heywood) < 0.01 * heywood
    # The peak sits where the hoop stress is largest: the hole edge across the load axis.
    x, y = v.max_von_mises_at
    assert abs(x - W / 2) < 0.05 * r and abs(abs(y - W / 2) - r) < 0.01 * r
    # Far from the hole the stress is the remote one (St Venant).
    far = np.hypot(v.points[:, 0] - W / 2, v.points[:, 1] - W / 2) > 0.35 * W
    assert np.allclose(v.von_mises[far], sigma, rtol=0.02)


def test_end_loaded_cantilever_tip_deflection():
    L, D, E, nu, P, t = 48.0, 12.0, 3.0e7, 0.3, 1000.0, 1.0
    I, c = t * D**3 / 12.0, D / 2
    # Timoshenko and Goodier sec. 21, plane stress (from memory): 8.9000e-3 for these data.
    delta = P * L**3 / (3 * E * I) + (4 + 5 * nu) * P * D**2 * L / (24 * E * I)
    ys = -c + (D / 24) * np.arange(25)
    fy = parabolic_end_forces(ys, P, D, t)
    assert fy.sum() == pytest.approx(P, rel=1e-12)  # resultant of the parabola is P
    loads = [Load("point", (L, float(y)), (0.0, float(f)), key=f"load[{k}]") for k, (y, f) in enumerate(zip(ys, fy))]
    problem = make_problem(rectangle(0, -c, L, c), 1.0, [Support("segment", ((0, -c), (0, c)), "xy", key="support[0]")],
                           loads, E=E, nu=nu, t=t)
    v = verify_outline(problem, box(0, -c, L, c), mesh_size=1.0)
    assert v.ok
    tip = int(np.argmin(np.hypot(v.points[:, 0] - L, v.points[:, 1])))
    assert tuple(v.points[tip]) == (L, 0.0)  # on-edge load points become mesh nodes
    # Clamped root instead of the exact root warping: measured +0.054 % (tests/test_fem.py
    # finds +0.047 % on the grid for the same clamp).
    assert abs(v.displacement[tip, 1, 0] - delta) / delta < 0.01
    # Compliance is the work of the end forces, F . u (its definition).
    work = sum(f * v.displacement[int(np.argmin(np.hypot(v.points[:, 0] - L, v.points[:, 1] - y))), 1, 0]
               for y, f in zip(ys, fy))
    assert v.compliance == pytest.approx(work, rel=1e-9)
    assert v.max_displacement_at[0] == pytest.approx(L)


def test_compliance_converges_under_mesh_refinement():
    # A bracket with two holes, held at two padded bolts, loaded through a padded point.
    outline = box(0, 0, 120, 60).difference(Point(40, 30).buffer(12)).difference(Point(85, 30).buffer(8))
    problem = make_problem(rectangle(0, 0, 120, 60), 2.0,
                           [Support("point", (6, 6), "xy", key="support[0]"),
                            Support("point", (6, 54), "xy", key="support[1]")],
                           [Load("point", (116, 30), (0.0, -100.0), key="load[0]")], pads=True, E=70e3, t=2.0)
    c = [verify_outline(problem, outline, mesh_size=h).compliance for h in (8.0, 4.0, 2.0)]
    # Convergence of the finite-element solution (common practice, no source): the two
    # finest meshes agree within 1 %. Measured changes: 1.1e-4, 6.8e-5.
    assert abs(c[2] - c[1]) / c[2] < 0.01
    assert abs(c[1] - c[0]) / c[1] < 0.01


def test_full_domain_outline_matches_the_grid_model():
    # The outline is the whole rectangular domain: the body-fitted figure must agree with
    # the fixed-grid model of the same problem (checked in tests/test_fem.py).
    for support in (Support("segment", ((0, 0), (0, 30)), "xy", key="support[0]"),
                    Support("box", (0, 0, 2, 30), "xy", key="support[0]")):
        problem = make_problem(rectangle(0, 0, 60, 30), 1.0, [support],
                               [Load("point", (60, 15), (0.0, -1.0), key="load[0]")], pads=True)
        grid = grid_compliance(problem)
        v = verify_outline(problem, box(0, 0, 60, 30), grid_compliance=grid)
        assert v.ok and v.grid_compliance == grid
        assert abs(v.relative_difference) < 0.02  # measured about +0.19 % for both
        assert v.relative_difference == pytest.approx((v.compliance - grid) / grid)
        assert not any("differs from the grid" in w for w in v.warnings)


def test_weighted_load_cases_and_an_embedded_line_load():
    # Compliance over cases is sum_c w_c F_c . u_c, as levelform defines it; the grid model
    # gives the per-case figures to compare with.
    problem = dc.replace(
        make_problem(rectangle(0, 0, 60, 30), 1.0, [Support("segment", ((0, 0), (0, 30)), "xy", key="support[0]")],
                     [Load("segment", ((30, 5), (30, 25)), (0.0, -0.05), key="load[0]", case="a"),
                      Load("point", (60, 15), (1.0, 0.0), key="load[1]", case="b")], pads=True),
        cases=(LoadCase("a", 2.0), LoadCase("b", 0.5)))
    model = build_model(problem)
    state = PlateSystem(model, PlaneStress(1.0, 0.3, 1.0)).analyse(np.ones(model.n_cells))
    v = verify_outline(problem, box(0, 0, 60, 30))
    assert v.compliance == pytest.approx(2.0 * v.case_compliance["a"] + 0.5 * v.case_compliance["b"], rel=1e-12)
    # Measured +0.16 % and +1.95 % (case b: the grid resolves the pad at the loaded edge by few nodes).
    for k, name in enumerate(("a", "b")):
        assert v.case_compliance[name] == pytest.approx(state.case_compliance[k], rel=0.03)
    # The interior line load gets mesh nodes along it (an embedded edge).
    on = (np.abs(v.points[:, 0] - 30) < 1e-9) & (v.points[:, 1] > 5 - 1e-9) & (v.points[:, 1] < 25 + 1e-9)
    assert on.sum() >= 20


def test_loads_and_supports_off_the_outline_are_reported_not_dropped():
    outline = box(0, 0, 120, 60).difference(Point(85, 30).buffer(8))
    problem = make_problem(
        rectangle(0, 0, 120, 60), 2.0,
        [Support("segment", ((0, 0), (0, 60)), "xy", key="support[0]"),
         Support("point", (85, 30), "x", key="support[1]")],
        [Load("point", (116, 30), (0.0, -1.0), key="load[0]"),
         Load("point", (85, 31), (0.0, -1.0), key="load[1]"),
         Load("segment", ((100, 60), (130, 60)), (0.0, -0.1), key="load[2]")])
    v = verify_outline(problem, outline)
    assert not v.ok
    text = "\n".join(v.problems)
    # Distance to the hole's edge (a 64-gon of radius 8, so just under 7) by shapely.
    gap = outline.distance(Point(85, 31))
    assert 6.9 < gap < 7.0
    assert (f"load[1]: the point (85, 31) lies outside the exported outline (nearest material {gap:.3g} mm away)"
            in text)
    assert "support[1]: the point (85, 30)" in text
    assert "load[2]: 10 of the segment's 30 mm lie off" in text
    assert "load[0]" not in text  # on the outline edge
    assert v.compliance is not None and v.compliance > 0  # what is on the outline is solved

    only_off = dc.replace(problem, loads=(Load("point", (200, 30), (0.0, -1.0), key="load[0]"),))
    w = verify_outline(only_off, outline)
    assert not w.ok and w.compliance is None
    assert any(p.startswith("load[0]: the point (200, 30) lies outside") for p in w.problems)


def test_bad_arguments_name_the_argument():
    problem = make_problem(rectangle(0, 0, 10, 5), 1.0, [Support("segment", ((0, 0), (0, 5)), "xy")],
                           [Load("point", (10, 2.5), (0.0, -1.0))])
    for kwargs, key in (({"order": 3}, "order"), ({"mesh_size": -1.0}, "mesh_size"),
                        ({"mesh_size": "fine"}, "mesh_size"), ({"mesh_size": 1e-4}, "mesh_size")):
        with pytest.raises(ProblemError, match=key):
            verify_outline(problem, box(0, 0, 10, 5), **kwargs)
    with pytest.raises(ProblemError, match="outline"):
        verify_outline(problem, Polygon())


# ---------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def exported(tmp_path_factory):
    # A small bridge: padded bearings near the lower corners, a padded load at mid-top.
    problem = make_problem(rectangle(0, 0, 30, 15), 1.0,
                           [Support("point", (1.5, 1.5), "xy", key="support[0]"),
                            Support("point", (28.5, 1.5), "y", key="support[1]")],
                           [Load("point", (15, 15), (0.0, -1.0), key="load[0]")], pads=True)
    # 30 x 15 cells; 30 iterations reach the goal volume with a hole in the outline
    problem = dc.replace(problem, method=dc.replace(problem.method, iterations=30))
    result = levelform.optimize(problem)
    out = tmp_path_factory.mktemp("exported")
    levelform.export(result, out)
    return result, out


def test_read_outline_round_trip_and_write_verification(exported, tmp_path):
    result, out = exported
    for name in ("outline.geojson", "outline.dxf"):
        g = read_outline(out / name)
        assert isinstance(g, MultiPolygon) and g.is_valid
        # Coordinates are written with 10 significant digits.
        assert g.symmetric_difference(result.outline).area < 1e-6 * result.outline.area
        assert len(g.geoms) == len(result.outline.geoms)
        assert sum(len(p.interiors) for p in g.geoms) == sum(len(p.interiors) for p in result.outline.geoms) >= 1
    v = verify_outline(result.problem, read_outline(out / "outline.dxf"), grid_compliance=result.compliance)
    assert v.ok and v.compliance > 0
    warned = any("differs from the grid result" in w for w in v.warnings)
    assert warned == (abs(v.relative_difference) > 0.05)

    paths = write_verification(v, tmp_path / "check", result.problem)
    assert sorted(paths) == ["stress.png", "verify.json", "verify.vtu"]
    data = json.loads(paths["verify.json"].read_text())
    assert data["compliance"] == pytest.approx(v.compliance)
    assert data["max_von_mises"] == pytest.approx(v.max_von_mises)
    assert data["elements"] == v.elements and data["caution"] == CAUTION
    assert data["units"]["stress"] == "N/mm^2"
    assert paths["stress.png"].read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    import meshio

    m = meshio.read(paths["verify.vtu"])
    tri = m.cells_dict["triangle6"]
    # VTK triangle6: corners, then the midpoints of edges 0-1, 1-2, 2-0 (VTK file format spec).
    p = m.points[:, :2]
    for k, (a, b) in zip((3, 4, 5), ((0, 1), (1, 2), (2, 0))):
        assert np.allclose(p[tri[:, k]], 0.5 * (p[tri[:, a]] + p[tri[:, b]]))
    assert np.allclose(m.point_data["displacement"][:, :2], v.displacement[:, :, 0])
    assert m.cell_data["von_mises"][0].shape == (v.elements,)


def test_read_outline_foreign_dxf_nests_rings_by_containment(tmp_path):
    # A plate with a hole holding an island, drawn by ezdxf on an arbitrary layer.
    doc = ezdxf.new("R2010")
    msp = doc.modelspace()
    for ring in (rectangle(0, 0, 40, 20), rectangle(5, 5, 35, 15), rectangle(10, 8, 20, 12)):
        msp.add_lwpolyline(ring, close=True, dxfattribs={"layer": "CUT"})
    msp.add_circle((30, 10), 2.0, dxfattribs={"layer": "CUT"})  # a second island, inside the hole
    doc.saveas(tmp_path / "plate.dxf")
    g = read_outline(tmp_path / "plate.dxf")
    # Plate (depth 0) minus the hole (depth 1), plus the two islands in it (depth 2).
    expected = 40 * 20 - 30 * 10 + 10 * 4 + math.pi * 4
    assert g.area == pytest.approx(expected, rel=2e-3)


@pytest.mark.parametrize("name, content, message", [
    ("missing.geojson", None, "no such file"),
    ("bad.geojson", "{not json", "not a readable GeoJSON"),
    ("lines.geojson", json.dumps({"type": "LineString", "coordinates": [[0, 0], [1, 1]]}), "no Polygon"),
    ("bow.geojson", json.dumps({"type": "Polygon", "coordinates": [[[0, 0], [2, 2], [2, 0], [0, 2], [0, 0]]]}),
     "not a valid polygon"),
    ("outline.txt", "x", "unknown outline format"),
    ("bad.dxf", "this is not a dxf", "DXF"),
])
def test_read_outline_bad_files_raise_problem_error(tmp_path, name, content, message):
    path = tmp_path / name
    if content is not None:
        path.write_text(content)
    with pytest.raises(ProblemError, match=message) as info:
        read_outline(path)
    assert name in str(info.value)


# --------------------------------------------------------------------------------------- DXF drawn in CAD
def _square_of_lines_with_a_circle(path, a=40.0, r=6.0, centre=(20.0, 20.0), extra=None):
    """A square plate drawn with four LINEs (out of order, two of them reversed) and a CIRCLE
    inside it, as a CAD user would draw it; ezdxf writes the file."""
    doc = ezdxf.new("R2010")
    msp = doc.modelspace()
    msp.add_line((a, 0), (a, a), dxfattribs={"layer": "PLATE"})
    msp.add_line((0, 0), (a, 0), dxfattribs={"layer": "PLATE"})
    msp.add_line((0, a), (a, a), dxfattribs={"layer": "PLATE"})  # reversed
    msp.add_line((0, 0), (0, a), dxfattribs={"layer": "PLATE"})  # reversed
    msp.add_circle(centre, r, dxfattribs={"layer": "BORE"})
    if extra:
        extra(msp)
    doc.saveas(path)
    return path


def test_dxf_of_lines_and_a_circle_reads_as_a_plate_with_a_hole(tmp_path):
    from levelform.io.outline_read import FLATTEN, read_outline_report

    a, r = 40.0, 6.0
    rep = read_outline_report(_square_of_lines_with_a_circle(tmp_path / "plate.dxf", a, r))
    assert (rep.pieces, rep.holes) == (1, 1) and rep.warnings == ()
    assert "2 closed rings from 1 CIRCLE, 4 LINE" in rep.read and "1 solid piece with 1 hole" in rep.read
    # Closed form a^2 - pi r^2. The circle becomes chords with their ends on it and a sagitta
    # of at most d = FLATTEN * a (the drawing's size is a); each chord cuts off a circular
    # segment of area at most chord * d, so the hole shrinks by at most 2 pi r d (elementary
    # geometry) and the plate read is larger than the exact one by no more than that.
    exact = a * a - math.pi * r * r
    d = FLATTEN * a
    assert 0.0 <= rep.outline.area - exact <= 2 * math.pi * r * d
    poly = rep.outline.geoms[0]
    assert Polygon(poly.exterior).area == pytest.approx(a * a, rel=1e-12)  # the LINEs meet exactly
    hole = Polygon(poly.interiors[0])
    assert hole.centroid.distance(Point(20, 20)) < 1e-9 and r - d <= math.sqrt(hole.area / math.pi) <= r


def test_dxf_arcs_bulges_and_gaps_are_joined_or_reported(tmp_path):
    from levelform.io.outline_read import FLATTEN, JOIN, read_outline_report

    doc = ezdxf.new("R2010")
    msp = doc.modelspace()
    # A slot: two LINEs and two half-circle ARCs (ARCs run counter-clockwise by the DXF
    # reference), with a gap far below the joining tolerance at one joint.
    gap = 1e-3 * JOIN * 40.0
    msp.add_line((0, 0), (20, 0))
    msp.add_arc((20, 5), 5, 270, 90)
    msp.add_line((20 + gap, 10), (0, 10))
    msp.add_arc((0, 5), 5, 90, 270)
    # A disk drawn as one closed LWPOLYLINE of two bulge-1 (half circle) segments, radius 3.
    msp.add_lwpolyline([(30, 5, 1.0), (36, 5, 1.0)], format="xyb", close=True)
    # Not outline geometry: a note, and a triangle of LINEs whose last one stops 0.01 short.
    msp.add_text("drill 2x", dxfattribs={"insert": (50, 50), "layer": "NOTES"})
    msp.add_line((60, 0), (70, 0))
    msp.add_line((70, 0), (65, 8))
    msp.add_line((65, 8), (60.01, 0))
    path = tmp_path / "drawing.dxf"
    doc.saveas(path)
    rep = read_outline_report(path)
    assert (rep.pieces, rep.holes) == (2, 0)
    slot, disk = sorted(rep.outline.geoms, key=lambda p: p.centroid.x)
    # Closed forms: a 20 x 10 rectangle plus a disk of radius 5; a disk of radius 3.
    # Chords lie inside arcs: areas a little under, by at most perimeter * sagitta.
    d = FLATTEN * 75.0  # the sagitta: FLATTEN times the drawing's size (x from -5 to 70)
    assert 0.0 <= 200 + math.pi * 25 - slot.area <= 2 * math.pi * 5 * d
    assert 0.0 <= math.pi * 9 - disk.area <= 2 * math.pi * 3 * d
    text = "\n".join(rep.warnings)
    assert "ignored 1 TEXT entity" in text and "layer NOTES" in text and "near (" in text
    assert ("a chain of 3 pieces (3 LINE, layer 0) from (60, 0) to (60.01, 0) was left open: its ends lie "
            "0.01 apart") in text
    assert "2 ARC, 2 LINE, 1 LWPOLYLINE" in rep.read and text.count("left open") == 1
    assert all(w.startswith("drawing.dxf: ") for w in rep.warnings)


def test_dxf_with_nothing_closed_is_a_clear_error(tmp_path):
    from levelform.io.outline_read import read_outline_report

    doc = ezdxf.new("R2010")
    msp = doc.modelspace()
    msp.add_line((0, 0), (10, 0))
    msp.add_line((10, 0), (10, 10))
    msp.add_text("plate")
    doc.saveas(tmp_path / "open.dxf")
    with pytest.raises(ProblemError) as info:
        read_outline_report(tmp_path / "open.dxf")
    msgs = info.value.problems
    assert "open.dxf: no closed outline found (read 2 LINE entities, 1 TEXT entity)" in msgs[0]
    assert any("a chain of 2 pieces (2 LINE, layer 0) from (0, 0) to (10, 10) was left open" in m for m in msgs)
    assert any("ignored 1 TEXT entity" in m for m in msgs)


# --------------------------------------------------------------------------------------- stress map
def test_stress_figure_names_the_envelope_and_marks_support_pads():
    # Reference: the problem itself (its case names, its padded point supports and the pad
    # radius levelform resolves for it); the figure must say what it shows.
    from levelform.fem.model import resolve_settings
    from levelform.io.verification import stress_figure

    problem = dc.replace(
        make_problem(rectangle(0, 0, 60, 30), 2.0,
                     [Support("point", (3, 3), "xy", key="support[0]"),
                      Support("point", (57, 3), "y", key="support[1]")],
                     [Load("point", (30, 30), (0.0, -1.0), key="load[0]", case="wind"),
                      Load("point", (60, 15), (1.0, 0.0), key="load[1]", case="snow")], pads=True),
        cases=(LoadCase("wind"), LoadCase("snow")))
    v = verify_outline(problem, box(0, 0, 60, 30).difference(Point(30, 15).buffer(6)), mesh_size=2.0)
    assert v.ok
    fig = stress_figure(v, problem)
    ax = fig.axes[0]
    assert "von Mises, envelope over load cases wind, snow" in ax.get_title()
    legend = [t.get_text() for lg in fig.legends for t in lg.get_texts()]
    assert "support pad (held)" in legend
    # One dashed ring per padded support, every vertex at the pad radius from its centre.
    r = resolve_settings(problem).pad_radius
    rings = [ln for ln in ax.get_lines() if ln.get_linestyle() == "--"]
    assert len(rings) == 2
    for ln, sup in zip(rings, problem.supports):
        xy = ln.get_xydata()
        assert np.allclose(np.hypot(xy[:, 0] - sup.where[0], xy[:, 1] - sup.where[1]), r, rtol=1e-9)
    assert any(f"(case {v.max_von_mises_case})" in t.get_text() for t in ax.texts)
    # One case, no pads: no envelope wording, no pad legend.
    one = dc.replace(problem, loads=problem.loads[:1], cases=(LoadCase("wind"),),
                     method=dc.replace(problem.method, pads=False))
    w = verify_outline(one, box(0, 0, 60, 30), mesh_size=2.0)
    fig1 = stress_figure(w, one)
    assert "envelope" not in fig1.axes[0].get_title() and not fig1.legends


def test_levelset_crisp_figure_is_the_exported_outline_on_its_grid(exported):
    # The level set reports the exported outline re-analysed on its own grid with void
    # stiffness 1e-6 (what the body-fitted check is compared with): the same figure as
    # compare's common analysis at refine = 1, which intersects the outline polygon with
    # every cell (shapely) instead of using the level set's marching-squares areas.
    result, _ = exported
    ev = evaluate_crisp(result.problem, result.outline, refine=1)
    assert result.crisp_compliance == pytest.approx(ev["compliance"], rel=2e-3)
    assert result.crisp_compliance != pytest.approx(result.compliance, rel=1e-9)
