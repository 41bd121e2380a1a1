"""The fair method comparison: the common crisp analysis and the files it writes."""
from __future__ import annotations

import base64
import csv
import dataclasses as dc
import io
import json
import math
from html import unescape
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
import shapely
from conftest import example_problem
from shapely.geometry import Point, box

from levelform import optimize
from levelform.comparison import (
    ERSATZ,
    FIELDS,
    area_fractions,
    check_methods,
    compare_methods,
    evaluate_crisp,
    write_comparison,
)
from levelform.fem.analysis import PlateSystem
from levelform.physics import PlaneStress
from levelform.fem.model import build_model, make_grid
from levelform.geometry.shapes import domain_polygon
from levelform.spec import CAUTION, ProblemError

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"
METHODS = ("levelset", "density", "evolutionary")


def _small(name="cantilever.toml", cell=2.0, iterations=40):
    """A benchmark problem on a coarse grid with few iterations, for speed."""
    return example_problem(name, cell=cell, iterations=iterations)


# --------------------------------------------------------------------------- evaluation

def test_full_domain_equals_solid_grid_on_refined_grid():
    # Self-consistency: the whole domain as outline is the solid plate on the refined grid,
    # solved here directly with PlateSystem and an all-ones stiffness scale.
    p = _small()
    ev = evaluate_crisp(p, domain_polygon(p), refine=2)
    fine = dc.replace(p, domain=dc.replace(p.domain, cell=1.0))
    model = build_model(fine)
    m = p.material
    solid = PlateSystem(model, PlaneStress(m.E, m.nu, m.thickness)).analyse(np.ones(model.n_cells))
    assert ev["grid_cell"] == 1.0 and ev["refine"] == 2 and ev["ersatz"] == ERSATZ
    assert ev["n_cells"] == model.n_cells
    assert abs(ev["compliance"] - solid.compliance) <= 1e-9 * solid.compliance
    assert ev["material_fraction"] == pytest.approx(1.0, rel=1e-12)


def test_circle_area_fractions_sum_to_the_polygon_area():
    # Reference: the area of a regular n-gon inscribed in a circle of radius r,
    # (n / 2) sin(2 pi / n) r^2 (closed form), which is what shapely's buffer of a point
    # draws with 4 * quad_segs vertices; and shapely's own polygon area.
    p = _small()
    grid = make_grid(p)
    cells = np.arange(grid.nx * grid.ny)
    r, q = 11.7, 16
    circle = Point(37.3, 21.1).buffer(r, quad_segs=q)
    frac = area_fractions(grid, cells, circle)
    total = frac.sum() * grid.h**2
    n = 4 * q
    ngon = 0.5 * n * math.sin(2.0 * math.pi / n) * r**2
    assert abs(total - ngon) <= 1e-9 * ngon
    assert abs(total - circle.area) <= 1e-9 * circle.area
    assert np.all((frac >= 0.0) & (frac <= 1.0))
    # The cells whose box lies inside / outside the circle are exactly 1 / 0.
    boxes = shapely.box(grid.x0 + grid.h * (cells % grid.nx), grid.y0 + grid.h * (cells // grid.nx),
                        grid.x0 + grid.h * (cells % grid.nx + 1), grid.y0 + grid.h * (cells // grid.nx + 1))
    inside = shapely.contains(circle, boxes)
    outside = ~shapely.intersects(circle, boxes)
    assert inside.any() and np.all(frac[inside] == 1.0) and np.all(frac[outside] == 0.0)


def test_area_fractions_with_domain_holes_sum_to_the_domain_area():
    # Reference: shapely's area of the domain polygon with its two round openings.
    p = _small("plate_with_openings.toml")
    grid = make_grid(p)
    domain = domain_polygon(p)
    frac = area_fractions(grid, np.arange(grid.nx * grid.ny), domain)
    assert abs(frac.sum() * grid.h**2 - domain.area) <= 1e-9 * domain.area


def test_half_outline_is_softer_than_solid_and_stiffer_than_void():
    # Bounds that hold for any elastic body: removing material never makes it stiffer.
    p = _small()
    dom = domain_polygon(p)
    full = evaluate_crisp(p, dom)["compliance"]
    band = evaluate_crisp(p, dom.intersection(box(0, 10, 80, 30)))["compliance"]
    void = evaluate_crisp(p, shapely.Polygon())["compliance"]
    assert full < band < void
    # All void is the solid plate with E scaled by ERSATZ: compliance scales by 1 / ERSATZ.
    assert void == pytest.approx(full / ERSATZ, rel=1e-6)


def test_levelset_compliance_reproduced_from_its_outline():
    # Two independent computations of the cell areas of one design: the level-set method's
    # marching-squares cut cells (levelform.levelset) and shapely's polygon intersections of
    # the exported outline. On the method's own grid and ersatz ratio they must give the
    # method's own compliance; the outline is simplified by at most 0.05 cells (geometry),
    # which moves the figure by well under 1 % (measured 0.07 %).
    p = _mbb()
    r = optimize(p)
    ev = evaluate_crisp(p, r.outline, refine=1, ersatz=r.settings["ersatz"])
    assert ev["compliance"] == pytest.approx(r.compliance, rel=0.01)
    assert ev["material_fraction"] == pytest.approx(r.material_fraction, rel=0.01)


def test_unknown_method_and_bad_refine_are_named():
    p = _small()
    with pytest.raises(ProblemError) as err:
        compare_methods(p, methods=("levelset", "annealing"))
    assert "methods" in str(err.value) and "'annealing'" in str(err.value)
    assert "levelset" in str(err.value)  # the valid names are listed
    with pytest.raises(ProblemError, match="methods: no method"):
        compare_methods(p, methods=())
    assert check_methods(" density, levelset,density ") == ("density", "levelset")
    with pytest.raises(ProblemError, match="^--methods: unknown method 'simp'"):
        check_methods("levelset,simp", key="--methods")
    with pytest.raises(ProblemError, match="refine"):
        evaluate_crisp(p, domain_polygon(p), refine=0)


# --------------------------------------------------------------------------- files

def _mbb():
    # The half-beam on 60 x 20 cells: every method reaches the material goal in 40 iterations.
    return _small("mbb_half_beam.toml", cell=1.0)


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    p = _mbb()
    comparison = compare_methods(p, methods=METHODS)
    out = tmp_path_factory.mktemp("compare")
    files = write_comparison(comparison, out)
    return comparison, files


def test_every_method_is_evaluated_by_the_common_analysis(written):
    comparison, _ = written
    assert comparison.methods == METHODS
    ref = comparison.rows["levelset"]["crisp_compliance"]
    for m in METHODS:
        row = comparison.rows[m]
        again = evaluate_crisp(comparison.problem, comparison.results[m].outline)
        assert row["crisp_compliance"] == again["compliance"]
        assert row["ratio_to_levelset"] == pytest.approx(row["crisp_compliance"] / ref, rel=1e-12)
        assert row["own_compliance"] == comparison.results[m].compliance
        assert row["iterations"] == comparison.results[m].iterations >= 1
    assert comparison.rows["levelset"]["ratio_to_levelset"] == 1.0


def test_material_fraction_is_outline_area_over_domain_area(written):
    comparison, _ = written
    area = domain_polygon(comparison.problem).area
    for m in METHODS:
        row = comparison.rows[m]
        assert row["material_fraction"] == pytest.approx(comparison.results[m].outline.area / area,
                                                         rel=1e-12)
        assert row["outline_area"] == pytest.approx(comparison.results[m].outline.area, rel=1e-12)


def test_bodyfitted_check_agrees_with_the_common_analysis(written):
    # An independent analysis of the same outlines: triangles that follow the outline's
    # edges, quadratic elements (scikit-fem, meshed by Netgen, in levelform.verify), no
    # ersatz material. levelform.verify itself warns beyond 5 %; measured 0.1 to 0.8 % on
    # these designs and the benchmark set (docs/comparison.md).
    comparison, _ = written
    for m in METHODS:
        row = comparison.rows[m]
        assert row["bodyfitted_compliance"] is not None, m
        assert row["bodyfitted_compliance"] == pytest.approx(row["crisp_compliance"], rel=0.02)


def test_json_shape(written):
    comparison, files = written
    data = json.loads(files["comparison.json"].read_text(encoding="utf-8"))
    assert set(data) == {"methods", "problem", "evaluation", "caution", "software"}
    assert list(data["methods"]) == sorted(METHODS)
    for m in METHODS:
        row = data["methods"][m]
        for key in ("crisp_compliance", "material_fraction", "iterations", "seconds"):
            assert key in row
        assert set(row) == set(FIELDS) | {"case_compliance", "limits"}  # the two dicts per row
        assert row["crisp_compliance"] == comparison.rows[m]["crisp_compliance"]
    assert data["evaluation"]["grid_cell"] == 0.5
    assert data["evaluation"]["ersatz"] == 1e-6
    assert data["evaluation"]["refine"] == 2
    assert data["caution"] == CAUTION
    assert data["problem"]["name"] == "MBB half-beam"
    assert data["problem"]["units"]["compliance"] == "N*mm"
    assert data["software"]["name"] == "levelform"


def test_csv_rows(written):
    comparison, files = written
    text = files["comparison.csv"].read_text(encoding="utf-8")
    rows = list(csv.reader(io.StringIO(text)))
    assert rows[0] == list(FIELDS)
    assert [r[0] for r in rows[1:]] == list(METHODS)
    for r in csv.DictReader(io.StringIO(text)):
        want = comparison.rows[r["method"]]
        assert float(r["crisp_compliance"]) == want["crisp_compliance"]  # repr round-trips
        assert float(r["material_fraction"]) == want["material_fraction"]
        assert int(r["iterations"]) == want["iterations"]
        assert float(r["seconds"]) == want["seconds"]


def test_png_is_a_side_by_side_figure(written):
    import matplotlib.image as mpimg

    _, files = written
    img = mpimg.imread(files["comparison.png"])
    assert img.shape[1] > img.shape[0]  # panels in a row, for a wide domain
    assert img[..., :3].std() > 0.05


class _Collect(HTMLParser):
    def __init__(self):
        super().__init__()
        self.imgs, self.rows, self.tables, self.tags = [], [], 0, set()

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.add(tag)
        if tag == "img":
            self.imgs.append(a)
        elif tag == "table":
            self.tables += 1
        elif tag == "tr" and a.get("class") == "method-row":
            self.rows.append(a.get("data-method"))


def test_report_html_is_self_contained(written):
    import matplotlib.image as mpimg

    comparison, files = written
    html = files["report.html"].read_text(encoding="utf-8")
    parser = _Collect()
    parser.feed(html)
    assert parser.tables == 1 and parser.rows == list(METHODS)
    designs = [a for a in parser.imgs if a.get("class") == "design"]
    assert len(designs) == len(METHODS)
    for a in parser.imgs:
        assert a["src"].startswith("data:image/png;base64,")
        png = base64.b64decode(a["src"].split(",", 1)[1], validate=True)
        assert mpimg.imread(io.BytesIO(png), format="png").shape[0] > 100  # decodes
    # Offline: no web address, no external style sheet, script, font or frame.
    assert "http://" not in html and "https://" not in html
    assert not parser.tags & {"script", "link", "iframe", "object", "embed"}
    assert "url(" not in html and "@import" not in html
    assert CAUTION in unescape(html)
    for heading in ("How this was evaluated", "crisp compliance [N*mm]", "wall time [s]"):
        assert heading in unescape(html)


def test_report_escapes_problem_text(written):
    from levelform.io.report import report_html

    comparison, _ = written
    odd = dc.replace(comparison, problem=dc.replace(comparison.problem, name='gusset <b>"A"</b> & co'))
    html = report_html(odd, overview_png=b"\x89PNG\r\n\x1a\n")
    assert "<b>" not in html and "gusset &lt;b&gt;&quot;A&quot;&lt;/b&gt; &amp; co" in html


def test_failed_rendering_writes_nothing(tmp_path, monkeypatch, written):
    comparison, _ = written
    import levelform.io.report as report

    def broken(*args, **kwargs):
        raise RuntimeError("rendering failed")

    monkeypatch.setattr(report, "report_html", broken)
    with pytest.raises(RuntimeError):
        write_comparison(comparison, tmp_path / "out")
    assert not (tmp_path / "out").exists()
    blocker = tmp_path / "file"
    blocker.write_text("keep me")
    monkeypatch.undo()
    with pytest.raises(ProblemError, match="outdir"):
        write_comparison(comparison, blocker)
    assert blocker.read_text() == "keep me"
