"""The truss ground-structure reference: closed forms, an independent formulation, files."""
from __future__ import annotations

import json
import math

import numpy as np
import pytest
from conftest import example_problem, plate_problem, rectangle
from scipy.optimize import minimize

from levelform.cli import main
from levelform.geometry.shapes import domain_polygon
from levelform.spec import CAUTION, Load, ProblemError, Region, Support
from levelform.truss import all_bars, build_ground_structure, truss_reference


def _wall_problem(width, height, load_at, goal=0.15, E=1.0, t=1.0, P=1.0):
    """A wall along x = 0 held in x and y over its whole height, one downward point load."""
    return plate_problem(
        rectangle(0.0, 0.0, width, height), 1.0,
        supports=[Support("segment", ((0.0, 0.0), (0.0, height)), "xy", key="support[1]")],
        loads=[Load("point", load_at, (0.0, -P), key="load[1]")], goal=goal, E=E, t=t)


def _pinned_span(a, height, load_at, goal=0.2):
    """Two pins at (0, 0) and (2a, 0), each held in x and y, one downward unit load."""
    return plate_problem(
        rectangle(0.0, 0.0, 2 * a, height), 1.0,
        supports=[Support("point", (0.0, 0.0), "xy", key="support[1]"),
                  Support("point", (2 * a, 0.0), "xy", key="support[2]")],
        loads=[Load("point", load_at, (0.0, -1.0), key="load[1]")], goal=goal)


def test_two_bar_compliance_and_bars_at_45_degrees():
    # Closed form (Michell-type two-bar truss; derivation in docs/truss.md): bar forces
    # P / sqrt(2), lengths L sqrt(2), so W = 2 P L and C = W^2 / (E V) = 4 P^2 L^2 / (E V),
    # the figure tests/test_optimize.py holds the plate designs to. E and t other than 1
    # check the unit convention: forces are totals and V = goal x area x thickness.
    P, L, E, t = 3.0, 50.0, 7.0, 2.0
    p = _wall_problem(L, 2 * L, (L, L), E=E, t=t, P=P)
    r = truss_reference(p, spacing=5.0)
    V = p.goal.material * domain_polygon(p).area * t
    assert r.volume == pytest.approx(V, rel=1e-12)
    c_exact = 4 * P**2 * L**2 / (E * V)
    (case,) = r.cases
    assert case.status == "optimal"
    assert abs(case.compliance / c_exact - 1.0) <= 0.005
    assert r.compliance == case.compliance
    d = case.end - case.start
    angle = np.degrees(np.arctan2(d[:, 1], d[:, 0])) % 180.0
    assert np.all((np.abs(angle - 45.0) < 1e-6) | (np.abs(angle - 135.0) < 1e-6))
    # fully stressed: every bar at the same stress W / V, and the areas use the whole volume
    assert np.allclose(np.abs(case.force) / case.area, case.W / V)
    assert np.sum(case.area * np.hypot(d[:, 0], d[:, 1])) == pytest.approx(V, rel=1e-9)


def test_refining_the_spacing_never_raises_w():
    # Nested lattices (each spacing halves the last; the outline, support and load lie on
    # every lattice) hold every coarser bar, so the optimum cannot rise; the two finest
    # must agree within 1 % (a short cantilever whose optimum has curved members).
    p = _wall_problem(60.0, 30.0, (60.0, 15.0))
    W = [truss_reference(p, spacing=s).cases[0].W for s in (10.0, 5.0, 2.5)]
    assert W[0] >= W[1] >= W[2] > 0
    assert W[1] / W[2] - 1.0 <= 0.01


def _min_compliance_truss(gs, i, j, V, E):
    """The same ground structure posed as a minimum-compliance problem with the bar areas as
    the unknowns: minimize f^T K(a)^-1 f subject to sum a L = V, a >= tiny, by scipy's
    general optimizer (SLSQP), with the exact gradient -E / L (e . du)^2."""
    d = gs.xy[j] - gs.xy[i]
    L = np.hypot(d[:, 0], d[:, 1])
    e = d / L[:, None]
    free = np.flatnonzero(~gs.fixed)
    f = gs.forces[free, 0]
    dofs = np.stack([2 * i, 2 * i + 1, 2 * j, 2 * j + 1], axis=1)
    g = np.concatenate([-e, e], axis=1)  # elongation = g . u_bar
    pos = -np.ones(gs.fixed.size, int)
    pos[free] = np.arange(free.size)
    a0 = V / L.sum()

    def solve(x):
        K = np.zeros((free.size, free.size))
        k = E * a0 * x / L
        for b in range(L.size):
            idx = pos[dofs[b]]
            m = idx >= 0
            K[np.ix_(idx[m], idx[m])] += k[b] * np.outer(g[b, m], g[b, m])
        u = np.linalg.solve(K, f)
        full = np.zeros(gs.fixed.size)
        full[free] = u
        strain = np.einsum("bk,bk->b", g, full[dofs])
        return float(f @ u), -E * a0 * strain**2 / L

    res = minimize(solve, np.ones(L.size), jac=True, method="SLSQP",
                   bounds=[(1e-9, None)] * L.size,
                   constraints=[{"type": "eq", "fun": lambda x: (x * a0 * L).sum() / V - 1.0,
                                 "jac": lambda x: a0 * L / V}],
                   options={"maxiter": 2000, "ftol": 1e-14})
    return res.fun


def test_same_ground_structure_as_minimum_compliance_problem():
    # Independent formulation (scipy.optimize.minimize, SLSQP, on the stiffness form): for
    # one load case the least compliance of a truss of volume V equals W^2 / (E V) from the
    # layout program (the two problems' equivalence is the basis of the reference; here it
    # is checked numerically, not assumed). Every admissible bar of a 5 x 3 node ground
    # structure is a candidate in both.
    E = 2.0
    p = _wall_problem(20.0, 10.0, (20.0, 5.0), E=E)
    r = truss_reference(p, spacing=5.0)
    gs = build_ground_structure(p, 5.0)
    i, j = all_bars(gs)
    assert gs.n_nodes == 15 and i.size > 20  # more bars than the layout keeps
    c_min = _min_compliance_truss(gs, i, j, r.volume, E)
    assert abs(c_min / r.cases[0].compliance - 1.0) <= 1e-3


def test_pinned_span_with_a_central_load_matches_the_closed_form():
    # Closed form derived in docs/truss.md (pinned span, load at height a above the middle
    # of a span 2a): two struts at 45 degrees, W = 2 P a; optimal because the virtual
    # displacement u = (0, -2 min(x, 2a - x)) has principal strains +-1 everywhere in the
    # strip 0 <= x <= 2a and does the work 2 P a. The domain reaches above the load, so
    # other layouts are open to the program too. Within 2 %. The optimality criterion used
    # (a virtual strain field of magnitude <= 1 whose work equals W) is Michell's (Michell
    # 1904, Phil. Mag. 8:589-597; citation from memory).
    a = 20.0
    p = _pinned_span(a, 1.5 * a, (a, a))
    r = truss_reference(p, spacing=2.5)
    (case,) = r.cases
    assert abs(case.W / (2 * a) - 1.0) <= 0.02
    assert np.all(case.force < 0)  # both struts in compression


def test_load_no_truss_can_carry_is_a_clear_error():
    # One pin leaves the rotation free: a sideways load at a distance has no equilibrium.
    p = plate_problem(rectangle(0, 0, 20, 10), 1.0,
                      supports=[Support("point", (0.0, 0.0), "xy", key="support[1]")],
                      loads=[Load("point", (20.0, 10.0), (0.0, -1.0), key="load[1]")])
    with pytest.raises(ProblemError, match=r"no truss can carry the loads.*rigid-body motion"):
        truss_reference(p, spacing=5.0)


def test_load_off_the_domain_names_the_load():
    p = _wall_problem(20.0, 10.0, (35.0, 5.0))
    with pytest.raises(ProblemError, match=r"load\[1\]\.point: lies 15 mm outside the domain"):
        truss_reference(p, spacing=5.0)


def test_keep_empty_region_that_cuts_the_load_off_is_infeasible():
    # A keep-empty band across the whole plate: no bar may cross it.
    p = _wall_problem(20.0, 10.0, (20.0, 5.0))
    p = type(p)(**{**p.__dict__, "regions": (Region("empty", "box", (8.0, -1.0, 12.0, 11.0), key="region[1]"),)})
    with pytest.raises(ProblemError, match="no chain of bars inside the domain"):
        truss_reference(p, spacing=2.0)


def test_too_large_ground_structure_is_refused_up_front_with_a_spacing_that_fits():
    p = _wall_problem(50.0, 100.0, (50.0, 50.0))
    with pytest.raises(ProblemError, match=r"spacing: 0\.01 mm .* use a spacing of at least") as info:
        truss_reference(p, spacing=0.01)
    fit = float(info.value.problems[0].rsplit("at least ", 1)[1].split()[0])
    with pytest.raises(ProblemError, match="GiB"):
        truss_reference(p, spacing=1.0, memory_limit=1e6)
    # the spacing offered does fit the node-count limit
    from levelform.truss.ground import estimated_nodes
    from levelform.truss.layout import MAX_NODE_PAIRS

    n = estimated_nodes(p, fit)
    assert n * (n - 1) // 2 <= MAX_NODE_PAIRS


def test_cli_writes_the_three_files(tmp_path, capsys):
    path = tmp_path / "two_bar.toml"
    path.write_text((example_problem.__globals__["EXAMPLES"] / "two_bar.toml").read_text(), encoding="utf-8")
    out = tmp_path / "out"
    assert main(["truss", str(path), "-o", str(out), "--spacing", "10"]) == 0
    text = capsys.readouterr().out
    assert CAUTION in text and "compliance" in text and str(out) in text
    assert sorted(f.name for f in out.iterdir()) == ["truss.dxf", "truss.json", "truss.png"]
    data = json.loads((out / "truss.json").read_text(encoding="utf-8"))
    for key in ("compliance", "W", "volume", "bars", "ground_structure", "status", "seconds",
                "caution", "version", "cases"):
        assert key in data, key
    assert set(data["ground_structure"]) == {"nodes", "candidate_bars_possible", "bars_in_final_lp"}
    assert data["caution"] == CAUTION and data["status"] == "optimal"
    assert {"start", "end", "force", "area"} <= set(data["bars"][0])
    assert (out / "truss.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    import ezdxf

    bars = ezdxf.readfile(out / "truss.dxf").modelspace().query('LWPOLYLINE[layer=="TRUSS_BARS"]')
    assert len(bars) == len(data["bars"])
    # a second run into the same folder is refused, one error line, exit status 2
    assert main(["truss", str(path), "-o", str(out)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: -o:") and err.count("\n") == 1
    assert main(["truss", str(path), "-o", str(out), "--overwrite", "--spacing", "-1"]) == 2
    assert "error: --spacing" in capsys.readouterr().err


def test_compare_reports_the_truss_reference(tmp_path):
    import csv

    from levelform.comparison import compare_methods, write_comparison

    p = example_problem("cantilever.toml", cell=4.0, iterations=6)
    cmp = compare_methods(p, methods=("levelset",))
    ev = cmp.evaluation
    assert ev["truss_note"] is None and ev["truss_compliance"] > 0
    row = cmp.rows["levelset"]
    assert row["truss_compliance"] == ev["truss_compliance"]
    assert row["ratio_to_truss"] == pytest.approx(row["crisp_compliance"] / ev["truss_compliance"])
    files = write_comparison(cmp, tmp_path)
    data = json.loads(files["comparison.json"].read_text(encoding="utf-8"))
    assert data["methods"]["levelset"]["ratio_to_truss"] == row["ratio_to_truss"]
    assert data["evaluation"]["truss_compliance"] == ev["truss_compliance"]
    header = next(csv.reader(files["comparison.csv"].open(encoding="utf-8")))
    assert "truss_compliance" in header and "ratio_to_truss" in header
    assert "Truss reference" in files["report.html"].read_text(encoding="utf-8")


def test_compare_still_succeeds_when_the_reference_cannot_be_computed(monkeypatch):
    import levelform.truss.layout as layout
    from levelform.comparison import truss_evaluation

    monkeypatch.setattr(layout, "MAX_NODE_PAIRS", 10)
    ref, record = truss_evaluation(example_problem("cantilever.toml", cell=4.0))
    assert ref is None and record["truss_compliance"] is None
    assert record["truss_note"].startswith("truss reference not computed: spacing:")
