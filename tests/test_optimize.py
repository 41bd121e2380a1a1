"""End-to-end checks of the level-set optimizer on the benchmark problems in examples/."""
from __future__ import annotations

import dataclasses as dc
from pathlib import Path

import numpy as np
import pytest
import shapely
from conftest import example_problem as _problem

from levelform import load_problem, optimize
from levelform.geometry.shapes import domain_polygon

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"


def _iou(a, b):
    return a.intersection(b).area / a.union(b).area


@pytest.fixture(scope="module")
def mbb_fine():
    return optimize(_problem("mbb_half_beam.toml", cell=0.5))


@pytest.fixture(scope="module")
def cantilever_coarse():
    return optimize(_problem("cantilever.toml", cell=1.0))


def test_mbb_converges_meets_material_and_outline_matches_grid(mbb_fine):
    r = mbb_fine
    p = r.problem
    assert r.converged and r.status == "converged"
    assert r.iterations < p.method.iterations
    # Material fraction within 0.5 % of the goal (relative).
    assert abs(r.material_fraction - p.goal.material) <= 0.005 * p.goal.material
    # The outline is one valid polygon set whose area matches the grid material within 1 %.
    assert r.outline.is_valid and not r.outline.is_empty
    grid_area = r.material_fraction * domain_polygon(p).area
    assert abs(r.outline.area - grid_area) <= 0.01 * grid_area
    for poly in r.outline.geoms:  # RFC 7946 orientation: outer CCW, holes CW
        assert poly.exterior.is_ccw
        assert all(not ring.is_ccw for ring in poly.interiors)
    # Compliance never below the fully solid design's (a sanity bound), history recorded.
    assert len(r.history) == r.iterations
    assert r.compliance == pytest.approx(r.history[-1].compliance)


def test_mbb_crisp_design_beats_published_grey_density_figure(mbb_fine):
    # Published SIMP result for this benchmark (60 x 20 elements, volume fraction 0.5, p = 3,
    # density filter rmin 2.4): compliance 233.71 (Andreassen et al. 2011, Struct. Multidisc.
    # Optim. 43:1-16). A crisp 0/1 layout at the same material should be stiffer than that
    # grey, penalized one. Lower bound: removing material never makes a structure stiffer, so
    # the fully solid beam (125.88 on the 60 x 20 grid: DESIGN notes sec. 7, computed with an
    # independent implementation, not from a paper) is stiffer than any design.
    assert 125.88 < mbb_fine.compliance < 233.71


@pytest.fixture(scope="module")
def two_bar():
    return optimize(_problem("two_bar.toml"))


def test_two_bar_close_to_analytic_optimum(two_bar):
    # Michell-type two-bar truss: C = 4 P^2 L^2 / (E V) for material volume V (DESIGN notes
    # sec. 7: bar force P / sqrt(2), length L sqrt(2), equal areas). The continuum design
    # approaches it from above; within 20 % at material fraction 0.15.
    r = two_bar
    p = r.problem
    P, L, E = 1.0, 50.0, p.material.E
    V = r.material_fraction * domain_polygon(p).area * p.material.thickness
    c_opt = 4 * P**2 * L**2 / (E * V)
    assert r.converged
    assert c_opt <= r.compliance <= 1.2 * c_opt


TWO_BAR_SPREAD = """
name = "two-bar, load spread over 4 length units"
[material]
E = 1.0
nu = 0.3
thickness = 1.0
[domain]
outline = [[0.0, 0.0], [50.0, 0.0], [50.0, 100.0], [0.0, 100.0]]
cell = 1.0
[[support]]
segment = [[0.0, 0.0], [0.0, 100.0]]
fix = "xy"
[[load]]
segment = [[50.0, 48.0], [50.0, 52.0]]
force_per_length = [0.0, -0.25]
[goal]
material = 0.15
"""


def test_two_bar_with_default_pads_close_to_analytic_optimum(tmp_path):
    # The same Michell-type optimum C = 4 P^2 L^2 / (E V) (DESIGN notes sec. 7), with every
    # setting at its default: the wall support along the whole height gets no pad strip (a
    # long segment spreads its force; docs/method.md, pads), the short load segment does.
    # Within 10 % (measured 1.07; 1.29 while every support had a pad).
    path = tmp_path / "two_bar_spread.toml"
    path.write_text(TWO_BAR_SPREAD, encoding="utf-8")
    r = optimize(load_problem(path))
    p = r.problem
    V = p.goal.material * domain_polygon(p).area * p.material.thickness
    c_opt = 4 * 1.0**2 * 50.0**2 / (p.material.E * V)
    assert abs(r.material_fraction - p.goal.material) <= 0.005 * p.goal.material
    assert c_opt <= r.compliance <= 1.10 * c_opt


def test_cantilever_outline_independent_of_the_cell_size(cantilever_coarse):
    fine = optimize(_problem("cantilever.toml", cell=0.5))
    assert _iou(cantilever_coarse.outline, fine.outline) >= 0.85


@pytest.mark.slow  # the cantilever test above keeps the cell-size independence in the default run
def test_mbb_outline_independent_of_the_cell_size(mbb_fine):
    finer = optimize(_problem("mbb_half_beam.toml", cell=0.25))
    assert _iou(mbb_fine.outline, finer.outline) >= 0.85


def test_results_are_deterministic(cantilever_coarse):
    again = optimize(_problem("cantilever.toml", cell=1.0))
    assert np.array_equal(np.nan_to_num(again.phi), np.nan_to_num(cantilever_coarse.phi))
    assert again.compliance == cantilever_coarse.compliance
    assert shapely.equals_exact(again.outline, cantilever_coarse.outline, 0.0)


def test_perforated_start_also_reaches_the_goal():
    r = optimize(_problem("cantilever.toml", cell=1.0, initial_holes=True))
    assert abs(r.material_fraction - 0.5) <= 0.005 * 0.5
    assert r.converged


def test_keep_regions_are_respected():
    p = load_problem(EXAMPLES / "screen_panel.toml")
    r = optimize(p)
    opening = shapely.Point(600.0, 400.0).buffer(90.0)
    # The keep-empty opening holds no material beyond the cell-scale contour tolerance.
    assert r.outline.intersection(opening).area <= 0.01 * opening.area
    # Pads around the corner supports stay solid.
    corner = shapely.box(0.0, 0.0, 40.0, 40.0)
    assert r.outline.intersection(corner).area >= 0.95 * corner.area
    # Weighted compliance is the weighted sum of the case compliances.
    weights = {c.name: c.weight for c in p.cases}
    assert r.compliance == pytest.approx(sum(weights[k] * v for k, v in r.case_compliance.items()), rel=1e-12)


def test_min_member_and_min_hole_are_honoured():
    from levelform.spec import Fabrication

    base = _problem("cantilever.toml", cell=1.0)
    free = optimize(base)
    # Without a limit the thinnest member of this design is about 2.6 long.
    assert free.fabrication["smallest_member_width"] < 4.0
    limited = optimize(dc.replace(base, fabrication=Fabrication(min_member=4.0, min_hole=8.0)))
    lim = limited.fabrication["limits"]
    assert lim["min_member"]["met"] and lim["min_member"]["measured"] >= 4.0
    assert lim["min_hole"]["met"]
    holes = limited.fabrication["smallest_hole"]
    assert holes is None or holes >= 8.0
    assert abs(limited.material_fraction - 0.5) <= 0.005 * 0.5
    # The outline stays smooth: no cell-scale zig-zag (common practice, no source: turning
    # angles of a smooth boundary sampled at cell scale stay well below a right angle).
    assert limited.fabrication["max_turning_angle_deg"] < 60.0


def test_mbb_outline_checked_on_a_body_fitted_mesh(mbb_fine):
    # What is exported is what was checked: the outline re-analysed on a body-fitted mesh of
    # quadratic triangles agrees with the grid figure within 5 %.
    from levelform.bodyfitted.check import verify_outline

    v = verify_outline(mbb_fine.problem, mbb_fine.outline, grid_compliance=mbb_fine.compliance)
    assert v.ok
    assert abs(v.relative_difference) <= 0.05


def _assert_level_set_at_most_5_percent_above_density(runs):
    # The density-based (SIMP) crisp result is the reference a reviewer asks for; every crisp
    # outline is re-analysed by the same common analysis (grid twice as fine, exact area
    # fractions).
    from levelform.comparison import evaluate_crisp

    for name, ls in runs.items():
        p = ls.problem
        dens = optimize(dc.replace(p, method=dc.replace(p.method, name="density")))
        c_ls = evaluate_crisp(p, ls.outline)["compliance"]
        c_dens = evaluate_crisp(p, dens.outline)["compliance"]
        assert c_ls <= 1.05 * c_dens, (name, c_ls, c_dens)


def test_level_set_at_most_5_percent_above_density_on_two_benchmarks(mbb_fine, cantilever_coarse):
    # The comparison of the benchmark-set test below on two of its problems, at the cells
    # given in their files (MBB half-beam at 0.5, cantilever at 1.0), for the default run:
    # the same SIMP reference, the same common analysis and the same 5 % bound.
    _assert_level_set_at_most_5_percent_above_density(
        {"mbb_half_beam.toml": mbb_fine, "cantilever.toml": cantilever_coarse})


@pytest.mark.slow  # about a minute; the two-benchmark test above keeps the check in the default run
def test_level_set_at_most_5_percent_above_density_on_the_benchmark_set(mbb_fine, cantilever_coarse, two_bar):
    # Benchmark set: MBB half-beam, cantilever, two-bar, and a plate with openings.
    runs = {"mbb_half_beam.toml": mbb_fine, "cantilever.toml": cantilever_coarse, "two_bar.toml": two_bar,
            "plate_with_openings.toml": optimize(_problem("plate_with_openings.toml"))}
    _assert_level_set_at_most_5_percent_above_density(runs)


def test_a_limit_the_unrestricted_design_already_meets_costs_little():
    # Fabrication limits shape the design from early on (docs/method.md): where the design
    # without the limit already meets it, honouring it costs at most 10 % of compliance
    # (a project requirement, not an outside figure).
    from levelform.spec import Fabrication

    limited = optimize(_problem("bolted_gusset.toml"))
    free = optimize(dc.replace(limited.problem, fabrication=Fabrication()))
    required = limited.problem.fabrication.min_member
    assert free.fabrication["smallest_member_width"] >= required
    assert limited.fabrication["limits"]["min_member"]["met"]
    assert limited.compliance <= 1.10 * free.compliance
    steps = [b.compliance / a.compliance for a, b in zip(limited.history, limited.history[1:])]
    assert max(steps) < 1.5  # no shock when the filter sets in
