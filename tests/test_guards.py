"""No silent wrong answers: a non-finite solution, a lost load path and a diverging
compliance each end the run with a clear status (and the CLI says so)."""
from __future__ import annotations

import dataclasses as dc
from pathlib import Path

import numpy as np
from conftest import example_problem

import levelform.methods.levelset_method as levelset_method
from levelform import optimize
from levelform.cli import main
from levelform.fem.analysis import PlateSystem

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"


def _cantilever(iterations=60):
    return example_problem("cantilever.toml", cell=2.0, iterations=iterations)


def test_non_finite_solution_stops_with_a_status(monkeypatch):
    real = PlateSystem.analyse
    calls = {"n": 0}

    def flaky(self, scale):
        calls["n"] += 1
        if calls["n"] == 4:
            raise FloatingPointError("the finite-element solution is not finite")
        return real(self, scale)

    monkeypatch.setattr(PlateSystem, "analyse", flaky)
    r = optimize(_cantilever())
    assert r.status.startswith("numerical failure") and not r.converged
    assert r.iterations == 3 and np.isfinite(r.compliance)  # the last good design is kept


def test_lost_load_path_stops_with_a_status(monkeypatch):
    monkeypatch.setattr(levelset_method, "load_path_intact", lambda model, phi: False)
    monkeypatch.setattr(levelset_method, "LOST_PATH_LIMIT", 4)
    r = optimize(_cantilever())
    assert r.status.startswith("load path lost") and not r.converged
    assert r.iterations == 4


def test_diverging_compliance_stops_with_a_status(monkeypatch):
    real = PlateSystem.analyse
    calls = {"n": 0}

    problem = _cantilever(iterations=200)
    goal = problem.goal.material

    def rising(self, scale):  # an ever-growing compliance once the volume is at the goal
        state = real(self, scale)
        if abs(float(np.mean(scale)) - goal) < 0.01 * goal:
            calls["n"] += 1
        return dc.replace(state, compliance=state.compliance * 1.05 ** calls["n"])

    monkeypatch.setattr(PlateSystem, "analyse", rising)
    monkeypatch.setattr(levelset_method, "DIVERGE_RISES", 3)
    # the slower steps after each rise may thin a member below the path check's reach on
    # this coarse grid; the rule under test is the divergence rule, so the path counts as held
    monkeypatch.setattr(levelset_method, "load_path_intact", lambda model, phi: True)
    r = optimize(problem)
    # rises of 5 % an iteration: soon more than DIVERGE_RISE (5 %) above the best design
    assert r.status.startswith("diverging") and not r.converged
    assert "above the best design" in r.status


def test_a_slow_creep_ends_converged_with_the_best_design(monkeypatch):
    # A compliance that creeps up by 0.1 % an iteration once at the goal is no divergence:
    # the run ends converged and exports the best design it reached, not the last one.
    real = PlateSystem.analyse
    seen = []

    def creeping(self, scale):
        state = real(self, scale)
        seen.append(state.compliance)
        return dc.replace(state, compliance=state.compliance * (1.0 + 0.001 * len(seen)))

    monkeypatch.setattr(PlateSystem, "analyse", creeping)
    monkeypatch.setattr(levelset_method, "DIVERGE_RISES", 3)
    monkeypatch.setattr(levelset_method, "CONVERGE_TOL", 0.0)  # only the creep can end it
    r = optimize(_cantilever(iterations=200))
    assert r.converged and r.status == "converged"
    best = min(range(len(r.history)), key=lambda k: r.history[k].compliance
               if abs(r.history[k].target_fraction - r.problem.goal.material) < 1e-12
               and abs(r.history[k].material_fraction - r.problem.goal.material) <= 0.005 * r.problem.goal.material
               else float("inf"))
    assert r.exported_iteration == best + 1 < r.iterations
    assert r.compliance <= min(rec.compliance for rec in r.history[best:])


def test_cli_warns_when_a_run_did_not_converge(tmp_path, capsys, monkeypatch):
    monkeypatch.setattr(levelset_method, "load_path_intact", lambda model, phi: False)
    monkeypatch.setattr(levelset_method, "LOST_PATH_LIMIT", 3)
    prob = tmp_path / "p.toml"
    prob.write_text((EXAMPLES / "cantilever.toml").read_text().replace("cell = 1.0", "cell = 2.0"))
    assert main(["run", str(prob), "-o", str(tmp_path / "out"), "-q", "--no-verify"]) == 0
    captured = capsys.readouterr()
    assert "load path lost" in captured.out and "did not converge" in captured.err
