"""The linear solvers of the plate system checked against scipy's sparse direct solver.

References (named again beside each check):
- scipy.sparse.linalg.spsolve (SuperLU, Virtanen et al. 2020, Nat. Methods 17:261-272) for
  every displacement, and scipy.sparse.linalg.eigsh (ARPACK) for spectra.
- scipy.sparse.coo_matrix summing duplicate entries: the textbook finite-element assembly.
- Bilinear interpolation reproduces constant and linear fields exactly (Q4 shape
  functions; Zienkiewicz and Taylor, The Finite Element Method, vol. 1, ch. 8, from memory).
- Galerkin coarse operators P^T A P (Trottenberg, Oosterlee and Schueller, Multigrid, 2001,
  sec. 7.7, from memory), formed here with scipy's sparse products.
- Deflated conjugate gradients keep the residual orthogonal to the deflation vector
  (Saad, Yeung, Erhel and Guyomarc'h 2000, SIAM J. Sci. Comput. 21:1909-1926).
"""
from __future__ import annotations

import sys

import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from conftest import plate_problem, rectangle

from levelform.fem import solvers as fem
from levelform.fem.analysis import PlateSystem
from levelform.physics import PlaneStress
from levelform.fem.elements import element_stiffness
from levelform.fem.model import build_model
from levelform.fem.multigrid import (
    GridMultigrid,
    LatticeAssembler,
    _Operator,
    element_bound,
    lanczos_max,
    model_lattice,
    pcg,
)
from levelform.fem.solvers import DirectSolver, PardisoSolver, make_solver
from levelform.spec import Load, LoadCase, Support

E, NU, T = 2.0, 0.3, 1.5
SMALL_COARSE = 300  # free dofs of the coarsest level in these tests: three coarsenings


def make_model(solver="auto"):
    """63 x 31 cells (odd, so the coarse grids overhang), a rectangular hole, a roller
    along the left edge and one at the lower right, two load cases."""
    return build_model(solver_problem(solver))


def solver_problem(solver="auto"):
    hole = rectangle(36.0, 9.0, 47.0, 20.0)
    return plate_problem(
        rectangle(0, 0, 63, 31), 1.0,
        (Support("segment", ((0, 0), (0, 31)), "x", pad=False), Support("point", (63, 0), "y", pad=False)),
        (Load("point", (0.0, 31.0), (0.0, -1.0), case="down"),
         Load("point", (30.0, 31.0), (0.7, -0.4), case="side")),
        holes=(hole,), cases=(LoadCase("down", 1.0), LoadCase("side", 0.5)), E=E, nu=NU, t=T,
        method={"pads": False, "solver": solver}, name="solver-test",
    )


def design(model, level=0.0):
    """A 0/1 design with ersatz cells (1e-3): a smooth field thresholded at ``level``,
    solid near the loads and supports so that no load acts on soft material."""
    g = model.grid
    j, i = np.divmod(model.cells, g.nx)
    x, y = i + 0.5, j + 0.5
    field = np.sin(x / 4.1) * np.cos(y / 3.3) + 0.6 * np.sin((x + 2 * y) / 7.0)
    solid = (field > level) | (y > 28) | (x < 3) | (x > 58)
    return np.where(solid, 1.0, 1e-3)


def reference(model, scale):
    K = LatticeAssembler(model, element_stiffness(E, NU, T)).matrix(scale)
    return K, spla.spsolve(K, model.forces)  # scipy SuperLU


def rel_diff(u, ref):
    return float(np.abs(u - ref).max() / np.abs(ref).max())


def test_lattice_assembly_equals_scipy_coo_assembly():
    model = make_model()
    scale = design(model)
    KE = element_stiffness(E, NU, T)
    # Textbook assembly: every cell's scaled element matrix into a COO matrix, duplicates
    # summed by scipy, fixed dofs dropped.
    fe = model.free[model.edofs]
    rows = np.repeat(fe, 8, axis=1).ravel()
    cols = np.tile(fe, (1, 8)).ravel()
    vals = (scale[:, None, None] * KE[None]).ravel()
    keep = (rows >= 0) & (cols >= 0)
    ref = sp.coo_matrix((vals[keep], (rows[keep], cols[keep])), shape=(model.n_free,) * 2).tocsc()
    K = LatticeAssembler(model, KE).matrix(scale)
    assert abs(K - ref).max() <= 1e-14 * abs(ref).max()
    assert K.has_sorted_indices and K.nnz == ref.nnz


def test_prolongation_reproduces_linear_fields_and_coarse_operators_are_galerkin():
    model = make_model()
    scale = design(model)
    mg = GridMultigrid(model, element_stiffness(E, NU, T), coarse_size=SMALL_COARSE)
    assert len(mg.coarsenings) == 3
    lat = model_lattice(model)

    def dof_coordinates(lattice, spacing):
        ny1, nx1 = lattice.node_index.shape
        jj, ii = np.nonzero(lattice.node_index >= 0)
        n = lattice.node_index[jj, ii]
        out = np.zeros((lattice.n_free, 2))
        for q in range(2):
            f = lattice.free[2 * n + q]
            out[f[f >= 0]] = np.column_stack([ii, jj])[f >= 0] * spacing
        return out

    spacing = 1.0
    K = LatticeAssembler(model, element_stiffness(E, NU, T)).matrix(scale)
    A = K
    for c, Ac in zip(mg.coarsenings, mg.coarse_matrices(K, scale)):
        fine_xy = dof_coordinates(lat, spacing)
        coarse_xy = dof_coordinates(c.coarse, 2 * spacing)
        # Bilinear interpolation reproduces constants and linear fields exactly.
        assert np.allclose(c.P @ np.ones(c.coarse.n_free), 1.0, rtol=0, atol=1e-14)
        lin = lambda xy: 0.3 + 0.7 * xy[:, 0] - 1.1 * xy[:, 1]  # noqa: E731
        assert np.allclose(c.P @ lin(coarse_xy), lin(fine_xy), rtol=0, atol=1e-12)
        # Cell-by-cell coarse operators equal the sparse Galerkin product.
        A = (c.P.T @ A @ c.P).tocsc()
        assert abs(Ac - A).max() <= 1e-13 * abs(A).max()
        lat, spacing = c.coarse, 2 * spacing


@pytest.mark.parametrize("kind", ["direct", "pardiso", "multigrid", "multigrid-products", "multigrid-jacobi", "pyamg"])
def test_solvers_match_scipy_spsolve(kind):
    model = make_model()
    scale = design(model)
    KE = element_stiffness(E, NU, T)
    K, ref = reference(model, scale)
    if kind == "direct":
        U = DirectSolver().solve(K, model.forces)
    elif kind == "pyamg":
        pytest.importorskip("pyamg")
        U = fem.AlgebraicMultigridSolver().solve(K, model.forces)
    elif kind == "pardiso":
        if not fem.optional_solver_available("pardiso"):
            pytest.skip("pypardiso (MKL) is not installed")
        solver = fem.PardisoSolver()
        U = solver.solve(K, model.forces)
        # a second matrix of the same pattern reuses the symbolic analysis
        scale2 = design(model, 0.1)
        K2, ref2 = reference(model, scale2)
        assert rel_diff(solver.solve(K2, model.forces), ref2) <= 1e-8
    else:
        mg = GridMultigrid(model, KE, rtol=1e-12, coarse_size=SMALL_COARSE,
                           smoother="jacobi" if kind == "multigrid-jacobi" else "chebyshev")
        U = mg.solve(K, model.forces, scale=None if kind == "multigrid-products" else scale)
        assert len(mg.info.levels) == 4 and all(k > 0 for k in mg.info.iterations)
    assert U.shape == ref.shape == (model.n_free, 2)
    assert rel_diff(U, ref) <= 1e-8


def test_warm_start_gives_the_same_answer_and_keeps_the_compliance_second_order():
    model = make_model()
    KE = element_stiffness(E, NU, T)
    a, b = design(model, 0.0), design(model, 0.15)
    Kb, ref_b = reference(model, b)
    mg = GridMultigrid(model, KE, rtol=1e-10, coarse_size=SMALL_COARSE)
    Ua = mg.solve(reference(model, a)[0], model.forces, scale=a)
    Ub_warm = mg.solve(Kb, model.forces, x0=Ua, scale=b)
    assert not mg.info.fallback
    Ub_cold = mg.solve(Kb, model.forces, scale=b)
    assert rel_diff(Ub_warm, ref_b) <= 1e-8 and rel_diff(Ub_cold, ref_b) <= 1e-8
    # Loosely converged from the warm start, the residual stays orthogonal to the start
    # vector and the search directions (deflated CG), so x.r ~ 0 ...
    f = model.forces[:, 0]
    M = mg.preconditioner(Kb, b)
    x, k, rel = pcg(_Operator(Kb), f, M, rtol=1e-2, maxiter=100, x0=Ua[:, 0])
    r = f - Kb @ x
    assert rel <= 1e-2 and abs(x @ r) <= 1e-9 * abs(f @ x)
    # ... and the compliance error is exactly e^T K e >= 0 (e = u - x), second order.
    e = ref_b[:, 0] - x
    c_ref = f @ ref_b[:, 0]
    assert f @ x < c_ref
    assert abs((c_ref - f @ x) - e @ (Kb @ e)) <= 1e-9 * c_ref


def test_default_tolerance_keeps_the_compliance_within_1e_6():
    model = make_model()
    KE = element_stiffness(E, NU, T)
    mg = GridMultigrid(model, KE, rtol=fem.MULTIGRID_RTOL, ctol=fem.MULTIGRID_CTOL, coarse_size=SMALL_COARSE)
    x = None
    for level in (0.0, 0.1, 0.2):
        s = design(model, level)
        K, ref = reference(model, s)
        x = mg.solve(K, model.forces, x0=x, scale=s)
        c, c_ref = np.einsum("ic,ic->c", model.forces, x), np.einsum("ic,ic->c", model.forces, ref)
        assert np.all(np.abs(c - c_ref) <= 1e-6 * c_ref)


def test_smoother_bounds_against_arpack():
    model = make_model()
    KE = element_stiffness(E, NU, T)
    K, _ = reference(model, design(model))
    op = _Operator(K)
    d = 1.0 / np.sqrt(op.diag)
    top = spla.eigsh(sp.diags(d) @ K @ sp.diags(d), k=1, which="LA", return_eigenvectors=False)[0]  # ARPACK
    assert top <= element_bound(KE) * (1 + 1e-12)  # a bound for any cell scale factors
    est = lanczos_max(op, 1.0 / op.diag)
    assert 0.98 * top <= est <= 1.3 * top


def test_no_convergence_falls_back_to_the_direct_solver():
    model = make_model()
    scale = design(model)
    K, ref = reference(model, scale)
    mg = GridMultigrid(model, element_stiffness(E, NU, T), rtol=1e-12, coarse_size=SMALL_COARSE, maxiter=2)
    with pytest.warns(RuntimeWarning, match="solving directly"):
        U = mg.solve(K, model.forces, scale=scale)
    assert mg.info.fallback and rel_diff(U, ref) <= 1e-10


def test_automatic_choice_by_size_and_without_the_optional_solvers(monkeypatch):
    model = make_model()
    KE = element_stiffness(E, NU, T)
    assert model.n_free < fem.MULTIGRID_MIN_FREE
    small = PardisoSolver if fem.optional_solver_available("pardiso") else DirectSolver
    assert isinstance(make_solver("auto", model.n_free, model, KE), small)
    assert isinstance(make_solver("direct", model.n_free, model, KE), DirectSolver)
    for name in ("multigrid", "iterative"):
        assert isinstance(make_solver(name, model.n_free, model, KE), GridMultigrid)
    assert isinstance(make_solver("iterative", model.n_free), DirectSolver)  # no grid given
    # Without pyamg the algebraic solver is unavailable and the choice falls back to the
    # geometric one, saying so; without pypardiso, PARDISO falls back to SuperLU. The
    # automatic choice needs neither.
    monkeypatch.setitem(sys.modules, "pyamg", None)  # makes `import pyamg` fail
    monkeypatch.setitem(sys.modules, "pypardiso", None)
    with pytest.raises(ImportError):
        fem.AlgebraicMultigridSolver()
    with pytest.raises(ImportError):
        fem.PardisoSolver()
    got = make_solver("pyamg", model.n_free, model, KE)
    assert isinstance(got, GridMultigrid) and "pyamg" in got.note
    got = make_solver("pardiso", model.n_free, model, KE)
    assert isinstance(got, DirectSolver) and "pardiso" in got.note
    got = make_solver("auto", model.n_free, model, KE)
    assert isinstance(got, DirectSolver) and got.note is None
    _, ref = reference(model, design(model))
    assert rel_diff(PlateSystem(model, PlaneStress(E, NU, T)).analyse(design(model)).displacement[model.free >= 0], ref) <= 1e-8
    # Above the crossover sizes: multigrid, wired through PlateSystem (the cell scale
    # factors reach the coarse grids). Between the two crossovers PARDISO where installed.
    monkeypatch.setattr(fem, "MULTIGRID_MIN_FREE", model.n_free)
    monkeypatch.delitem(sys.modules, "pypardiso")
    if fem.optional_solver_available("pardiso"):
        assert isinstance(make_solver("auto", model.n_free, model, KE), PardisoSolver)
    monkeypatch.setattr(fem, "PARDISO_MAX_FREE", model.n_free)
    monkeypatch.setattr(fem, "MULTIGRID_COARSE_SIZE", SMALL_COARSE)
    plate = PlateSystem(model, PlaneStress(E, NU, T))
    assert isinstance(plate.solver, GridMultigrid) and plate.solver.name == "multigrid"
    scale = design(model)
    U = plate.analyse(scale).displacement[model.free >= 0]
    assert len(plate.solver.info.levels) == 4
    _, ref = reference(model, scale)
    c, c_ref = np.einsum("ic,ic->c", model.forces, U), np.einsum("ic,ic->c", model.forces, ref)
    assert np.all(np.abs(c - c_ref) <= 1e-6 * c_ref)
    assert rel_diff(U, ref) <= 1e-3  # the loose default residual (1e-4) still gives the field


def test_no_direct_fallback_above_the_size_limit(monkeypatch):
    # Above DIRECT_FALLBACK_MAX unknowns a failed CG is reported, not handed to a
    # factorization that may not fit in memory; the loop turns it into a numerical failure.
    from levelform.fem import multigrid

    model = make_model()
    scale = design(model)
    K, _ = reference(model, scale)
    monkeypatch.setattr(multigrid, "DIRECT_FALLBACK_MAX", model.n_free - 1)
    mg = GridMultigrid(model, element_stiffness(E, NU, T), rtol=1e-12, coarse_size=SMALL_COARSE, maxiter=2)
    with pytest.raises(FloatingPointError, match="too large"):
        mg.solve(K, model.forces, scale=scale)


def test_timing_the_phases_does_not_change_the_run():
    # The phase clock of benchmarks/iteration.py only reads the time: the same design,
    # compliance history and outline with and without it.
    import dataclasses

    from levelform.methods import levelset_method as levelset
    from levelform.timing import PhaseClock

    problem = solver_problem("direct")
    problem = dataclasses.replace(problem, method=dataclasses.replace(problem.method, iterations=12))
    clock = PhaseClock()
    timed_run = levelset.run(problem, clock=clock)
    plain = levelset.run(problem)
    assert [r.compliance for r in timed_run.history] == [r.compliance for r in plain.history]
    assert np.array_equal(timed_run.phi, plain.phi, equal_nan=True)
    assert len(clock.iterations) == 11  # every iteration but the last moves the design
    for it in clock.iterations:
        assert {"assembly", "solve", "smoothing", "volume control", "update", "reinitialization"} <= set(it)
        parts = sum(v for k, v in it.items() if k != "total")
        assert 0.0 < parts <= it["total"] * (1 + 1e-9)
