"""Linear solvers for the plate system behind one interface, and the choice among them."""
from __future__ import annotations

from typing import Protocol

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from ..linalg import sparse_lu


class LinearSolver(Protocol):
    """What the analysis asks of a linear solver (no caller asks for a solver's type).

    ``name`` says which solver it is (written into summaries), ``note`` why it differs
    from the one asked for (or None). ``solve(K, F, x0=None, scale=None)`` returns X with
    K X = F for one or several right-hand sides; ``x0`` is the previous solution (an
    iterative solver starts from it), ``scale`` the cell scale factors K was assembled
    from (a solver that builds coarse grids from them uses them; the others ignore both).
    """

    name: str
    note: str | None

    def solve(self, K: sp.csc_matrix, F: np.ndarray, x0=None, scale=None) -> np.ndarray: ...


class DirectSolver:
    """Sparse LU (SuperLU, always available) with a symmetric fill-reducing ordering."""

    name = "direct"
    note = None

    def solve(self, K: sp.csc_matrix, F: np.ndarray, x0=None, scale=None) -> np.ndarray:
        return sparse_lu(K).solve(F)


class PardisoSolver:
    """Intel MKL PARDISO through pypardiso (optional: ``pip install levelform[pardiso]``),
    as a symmetric positive definite solver on the upper triangle. The symbolic analysis
    (ordering and fill pattern) is done once and reused while the sparsity pattern stays
    the same, which it does in an optimization: each solve is a numerical factorization
    and the triangular solves."""

    name = "pardiso"
    note = None

    def __init__(self):
        import pypardiso  # noqa: F401  (ImportError if missing)

        self._solver = pypardiso.PyPardisoSolver(mtype=2)  # real symmetric positive definite
        self._pattern = None  # (indptr, indices) of the analysed upper triangle

    def solve(self, K: sp.csc_matrix, F: np.ndarray, x0=None, scale=None) -> np.ndarray:
        # The upper triangle in CSR is the lower triangle of the symmetric CSC matrix,
        # read row-wise: no copy of the values beyond the triangle itself.
        U = sp.triu(sp.csr_matrix(K), format="csr")
        U.sort_indices()
        ps = self._solver
        same = (self._pattern is not None and np.array_equal(self._pattern[0], U.indptr)
                and np.array_equal(self._pattern[1], U.indices))
        F2 = np.asfortranarray(np.asarray(F, float).reshape(K.shape[0], -1))
        ps._check_A(U)
        if not same:
            ps.free_memory(everything=True)
            ps.set_phase(11)
            ps._call_pardiso(U, F2)
            self._pattern = (U.indptr.copy(), U.indices.copy())
        ps.set_phase(23)  # numerical factorization, solve and iterative refinement
        X = ps._call_pardiso(U, F2)
        return X.reshape(np.shape(F))


class AlgebraicMultigridSolver:
    """Conjugate gradients preconditioned by smoothed-aggregation algebraic multigrid
    (pyamg, optional), warm-started from the previous solution; stops at a relative
    residual of ``rtol``. Kept as an independent check of levelform's own multigrid."""

    name = "pyamg"
    note = None

    def __init__(self, rtol: float = 1e-10, near_null=None):
        import pyamg  # noqa: F401  (ImportError if missing)

        self.rtol = rtol
        self.near_null = near_null

    def solve(self, K, F, x0=None, scale=None):
        import pyamg

        ml = pyamg.smoothed_aggregation_solver(K.tocsr(), B=self.near_null, symmetry="symmetric")
        M = ml.aspreconditioner(cycle="V")
        F2 = F.reshape(K.shape[0], -1)
        X = np.empty_like(F2)
        for c in range(F2.shape[1]):
            guess = None if x0 is None else x0.reshape(K.shape[0], -1)[:, c]
            x, info = spla.cg(K, F2[:, c], x0=guess, rtol=self.rtol, maxiter=2000, M=M)
            if info != 0:
                x = DirectSolver().solve(K, F2[:, c])
            X[:, c] = x
        return X.reshape(F.shape)


# Free dofs from which "auto" picks the multigrid solver: measured crossover with SuperLU
# (MMD ordering) on the benchmark plates, benchmarks/solve.py --crossover; docs/performance.md.
MULTIGRID_MIN_FREE = 50_000
# ... and below which it keeps PARDISO where installed: measured in whole iterations
# (benchmarks/iteration.py --solver pardiso / multigrid): PARDISO 1.4x faster at 161k
# unknowns, multigrid 1.5x faster at 231k and 1.4x at 642k; docs/performance.md.
PARDISO_MAX_FREE = 200_000
# Multigrid stopping rule inside an optimization (docs/performance.md, tolerance study):
# relative residual, and estimated compliance error relative to the compliance.
MULTIGRID_RTOL, MULTIGRID_CTOL = 1e-4, 1e-7
MULTIGRID_COARSE_SIZE = 50_000  # free dofs at which coarsening stops
PRECISE_RTOL = 1e-10  # relative residual of a one-off precise analysis


def optional_solver_available(name: str) -> bool:
    """Whether the optional solver ``pardiso`` or ``pyamg`` can be made here."""
    try:
        {"pardiso": PardisoSolver, "pyamg": AlgebraicMultigridSolver}[name]()
    except (ImportError, OSError):  # not installed, or MKL's shared library not loadable
        return False
    return True


def _multigrid_supports(model) -> bool:
    from .multigrid import GridMultigrid

    return GridMultigrid.supports(model)


def make_solver(choice: str, n_free: int, model=None, KE=None, precise: bool = False):
    """The linear solver for a plate system of ``n_free`` unknowns; its ``note`` says why
    it differs from the one asked for (an optional library missing), else is None.

    ``direct``: SuperLU with a symmetric minimum-degree ordering (always there).
    ``pardiso``: MKL PARDISO, symbolic analysis once (optional; else ``direct``).
    ``multigrid`` (old name ``iterative``): conjugate gradients with levelform's geometric
    multigrid preconditioner, which needs the grid ``model`` and the solid element matrix
    ``KE`` (without them: ``direct``). ``pyamg``: CG with pyamg's algebraic multigrid
    (optional; else ``multigrid``). ``auto``: PARDISO below PARDISO_MAX_FREE unknowns where
    it is installed, else SuperLU below MULTIGRID_MIN_FREE; above, multigrid, which is then
    faster and needs a fraction of a factorization's memory (docs/performance.md). ``precise``: the iterative
    solvers stop at a relative residual of PRECISE_RTOL instead of the optimization's
    looser rule (for the one-off analyses that compare or check designs)."""
    note = None
    if choice == "iterative":
        choice = "multigrid"
    grid = model is not None and KE is not None and _multigrid_supports(model)
    if choice == "auto":
        if n_free < PARDISO_MAX_FREE and optional_solver_available("pardiso"):
            choice = "pardiso"
        elif n_free >= MULTIGRID_MIN_FREE and grid:
            choice = "multigrid"
        else:
            choice = "direct"
    if choice == "pardiso":
        try:
            return PardisoSolver()
        except (ImportError, OSError) as exc:
            note = f"solver 'pardiso' is not available ({exc}); using 'direct'"
            choice = "direct"
    if choice == "pyamg":
        try:
            return AlgebraicMultigridSolver()
        except ImportError:
            note = "solver 'pyamg' is not installed; using 'multigrid'"
            choice = "multigrid"
    if choice == "multigrid" and grid:
        from .multigrid import GridMultigrid

        rtol, ctol = (PRECISE_RTOL, 0.0) if precise else (MULTIGRID_RTOL, MULTIGRID_CTOL)
        solver = GridMultigrid(model, KE, rtol=rtol, ctol=ctol, coarse_size=MULTIGRID_COARSE_SIZE)
        solver.note = note
        return solver
    solver = DirectSolver()
    solver.note = note
    return solver
