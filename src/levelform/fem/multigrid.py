"""Geometric multigrid for the plate on the fixed grid: conjugate gradients preconditioned
by a V-cycle over grids coarsened 2 x 2 at a time (the method Amir, Aage and Lazarov 2014,
Struct. Multidisc. Optim. 49:815-829, published for large topology-optimization grids).

Everything that depends only on the grid is built once per model: the sparsity pattern of
every level, the bilinear prolongations P, and the map from cell scale factors to the
coarse operators. Each solve then rebuilds the coarse operators for the new scale. They
are exactly the Galerkin products P^T A P, formed cell by cell: the stiffness is a sum of
cell matrices and a fine cell lies in one coarse cell, so P^T A P is the sum over fine
cells of P_k^T K_e P_k with P_k one of four fixed 8 x 8 local prolongations. Fixed dofs
are not in the system: P has no row for them, and a coarse dof that no free fine dof
interpolates from is dropped. Absent (inactive) cells contribute nothing.

Smoothing is Chebyshev (or damped Jacobi) on the diagonally scaled operator; the coarsest
level is factorized by SuperLU. A previous solution starts CG as a deflation vector, which
keeps the compliance error quadratic in the solution error (see ``pcg``).

Node and dof numbering on every level follows the model's convention: active nodes
numbered row by row, dof 2 n + component, free dofs numbered in dof order. Inside one
column of the free-dof matrix the rows then come in a fixed order of the 3 x 3 neighbour
nodes, which lets a whole level be assembled by one gather, without sorting.
"""
from __future__ import annotations

import os
import time
import warnings
import weakref
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from ..linalg import sparse_lu

# Unknowns per node that the lattice tables, prolongations and cell matrices (8 x 8) are
# written for: the plane-stress physics. Other physics use fem.assembly.Assembler and the
# direct solvers.
DOFS_PER_NODE = 2

# Local corner order of a cell (counter-clockwise from lower left), as (x, y) offsets.
_CORNER = np.array([[0, 0], [1, 0], [1, 1], [0, 1]])


@dataclass(frozen=True)
class Lattice:
    """One level of the structured grid: which cells and nodes are present, which dofs free."""

    cell_index: np.ndarray  # (ny, nx): position of the cell in the level's cell list, -1 if absent
    node_index: np.ndarray  # (ny + 1, nx + 1): node number, -1 if absent
    free: np.ndarray  # (2 n_nodes,): dof -> free dof number or -1
    n_free: int

    @property
    def n_cells(self) -> int:
        return int(np.count_nonzero(self.cell_index >= 0))


def model_lattice(model) -> Lattice:
    """The finest level of a grid.Model."""
    g = model.grid
    cell_index = np.full(g.ny * g.nx, -1, np.int64)
    cell_index[model.cells] = np.arange(model.cells.size)
    return Lattice(
        cell_index=cell_index.reshape(g.ny, g.nx),
        node_index=np.asarray(model.node_number, np.int64).reshape(g.ny + 1, g.nx + 1),
        free=np.asarray(model.free, np.int64),
        n_free=int(model.n_free),
    )


def _node_tables():
    """For a node and each of the 4 cells around it (m = lower-left, lower-right,
    upper-left, upper-right of the node): the node's local corner in that cell, and
    for each of the 9 neighbour offsets the neighbour's local corner (-1 if not in it)."""
    origin = np.array([[-1, -1], [0, -1], [-1, 0], [0, 0]])  # cell m's lower-left corner
    own = np.empty(4, np.int64)
    nb_corner = np.full((4, 9), -1, np.int64)
    for m in range(4):
        rel = origin[m] + _CORNER  # (4, 2) corner offsets from the node
        own[m] = int(np.flatnonzero((rel == 0).all(axis=1))[0])
        for c in range(4):
            dx, dy = rel[c]
            nb_corner[m, (dy + 1) * 3 + (dx + 1)] = c
    return origin, own, nb_corner


_ORIGIN, _OWN, _NB_CORNER = _node_tables()


class LatticeAssembly:
    """Free-dof stiffness of one lattice level from its cell matrices, in CSC form.

    Column (node n, component q) holds the rows of the free dofs of the 3 x 3 neighbours
    of n that share a present cell with it, in neighbour order; each entry sums the
    matching entry of the (at most 4) cell matrices around n. So a fill is a gather of
    four (n_nodes, 36) blocks and one boolean compress."""

    def __init__(self, lat: Lattice):
        ny1, nx1 = lat.node_index.shape
        ny, nx = ny1 - 1, nx1 - 1
        cpad = np.full((ny + 2, nx + 2), -1, np.int64)
        cpad[1:-1, 1:-1] = lat.cell_index
        npad = np.full((ny1 + 2, nx1 + 2), -1, np.int64)
        npad[1:-1, 1:-1] = lat.node_index
        n_cells = lat.n_cells
        # cells around each node, absent -> n_cells (a zero row appended at fill time)
        around = np.empty((ny1 * nx1, 4), np.int64)
        for m in range(4):
            oy, ox = _ORIGIN[m, 1] + 1, _ORIGIN[m, 0] + 1
            around[:, m] = cpad[oy : oy + ny1, ox : ox + nx1].ravel()
        present = around >= 0
        around[~present] = n_cells
        # neighbour present and sharing a present cell with the node
        share = np.zeros((ny1 * nx1, 9), bool)
        for m in range(4):
            share |= present[:, m : m + 1] & (_NB_CORNER[m] >= 0)[None, :]
        free_ext = np.append(lat.free, -1)
        row_free = np.empty((ny1 * nx1, 18), np.int64)
        for k in range(9):
            dy, dx = divmod(k, 3)
            nb = npad[dy : dy + ny1, dx : dx + nx1].ravel()
            for p in range(2):
                row_free[:, 2 * k + p] = np.where(nb >= 0, free_ext[np.where(nb >= 0, 2 * nb + p, -1)], -1)
        node = lat.node_index.ravel()
        col_free = np.stack([np.where(node >= 0, free_ext[np.where(node >= 0, 2 * node + q, -1)], -1)
                             for q in range(2)], axis=1)
        row_ok = np.repeat(share, 2, axis=1) & (row_free >= 0)
        mask = (col_free >= 0)[:, :, None] & row_ok[:, None, :]  # (n_nodes, 2, 18)
        cols = col_free[col_free >= 0]
        if not np.array_equal(cols, np.arange(lat.n_free)):
            raise ValueError("free dofs are not numbered in lattice order; the lattice assembly needs that")
        counts = np.count_nonzero(mask, axis=2)[col_free >= 0]
        self.indptr = np.concatenate([[0], np.cumsum(counts)]).astype(np.int32)
        self.indices = np.broadcast_to(row_free[:, None, :], mask.shape)[mask].astype(np.int32)
        # Positions of the kept entries in the (n_nodes, 36) block, int64. Fancy indexing
        # with them measured 10x faster than np.take here (numpy 2.x, 46M entries).
        self.keep = np.flatnonzero(mask.ravel())
        self.around = around
        # Entry (column (n, q), row slot 2k + p) of cell m is cell-matrix entry
        # [2 c + p, 2 own + q] with c the neighbour's corner; 64 = none (a zero).
        table = np.full((4, 2, 18), 64, np.int64)
        for m in range(4):
            for q in range(2):
                for k in range(9):
                    c = _NB_CORNER[m, k]
                    if c >= 0:
                        for p in range(2):
                            table[m, q, 2 * k + p] = (2 * c + p) * 8 + 2 * _OWN[m] + q
        self.table = table.reshape(4, 36)
        self.n = lat.n_free
        self.n_cells = n_cells
        self._block = None  # (n_nodes, 36) work array, reused: a fresh one costs page faults
        self._slots = None  # built on the first from_cells

    def _work(self) -> np.ndarray:
        if self._block is None:
            self._block = np.empty((self.around.shape[0], 36))
        return self._block

    def _matrix(self, full: np.ndarray, reuse: bool = False) -> sp.csc_matrix:
        flat = full.reshape(-1)
        if reuse:  # into the previous matrix's data array: no fresh pages to fault in
            if getattr(self, "_data", None) is None:
                self._data = np.empty(self.keep.size)
            # mode "clip": with the default "raise" numpy buffers ``out`` (3x slower here)
            data = np.take(flat, self.keep, out=self._data, mode="clip")
        else:
            data = flat[self.keep]
        K = sp.csc_matrix((data, self.indices, self.indptr), shape=(self.n, self.n), copy=False)
        K.has_sorted_indices = True  # rows come in neighbour order, which is sorted
        return K

    def from_scale(self, scale: np.ndarray, KE: np.ndarray, reuse: bool = False) -> sp.csc_matrix:
        """sum_e scale_e KE over the level's cells (one 8 x 8 matrix for all cells).
        ``reuse``: write into the matrix the last such call returned (which then changes)."""
        tab = np.append(np.asarray(KE, float).ravel(), 0.0)[self.table]  # (4, 36)
        s = np.append(np.asarray(scale, float), 0.0)
        return self._matrix(np.matmul(s[self.around], tab, out=self._work()), reuse)

    def from_cells(self, Ke: np.ndarray) -> sp.csc_matrix:
        """sum_e K_e for per-cell matrices ``Ke`` (n_cells, 64), row-major 8 x 8."""
        if self._slots is None:
            self._slots = self._cell_slots()
        nnz = self.keep.size
        data = np.bincount(self._slots.ravel(), weights=np.asarray(Ke, float).ravel(), minlength=nnz + 1)[:nnz]
        return sp.csc_matrix((data, self.indices, self.indptr), shape=(self.n, self.n))

    def _cell_slots(self) -> np.ndarray:
        """(n_cells, 64): where each cell-matrix entry goes in the CSC data (nnz: nowhere,
        a fixed or dropped dof). Entry [2 c + p, 2 own + q] of the cell at position m of
        node n (own = its corner there) is block entry (n, q, 2 k + p), k the neighbour
        offset of corner c: one place per entry, so a fill is one bincount."""
        nnz = self.keep.size
        inv = np.full(self.around.shape[0] * 36, nnz, np.int64)
        inv[self.keep] = np.arange(nnz)
        slots = np.full((self.n_cells, 64), nnz, np.int64)
        for m in range(4):
            nodes = np.flatnonzero(self.around[:, m] < self.n_cells)
            cells = self.around[nodes, m]
            for k in range(9):
                c = _NB_CORNER[m, k]
                if c < 0:
                    continue
                for q in range(2):
                    for p in range(2):
                        slots[cells, (2 * c + p) * 8 + 2 * _OWN[m] + q] = inv[nodes * 36 + q * 18 + 2 * k + p]
        return slots


class LatticeAssembler:
    """Drop-in for fem.Assembler on a grid.Model (``matrix(scale)`` gives the same CSC
    matrix) that builds no per-cell index arrays: at a million cells it needs a small
    fraction of the memory and set-up time."""

    @staticmethod
    def supports(model) -> bool:
        """Whether the model's dofs follow the lattice's numbering (two per node)."""
        return getattr(model, "dofs_per_node", 2) == DOFS_PER_NODE

    def __init__(self, model, KE: np.ndarray):
        if not self.supports(model):
            raise ValueError(f"the lattice assembly is written for {DOFS_PER_NODE} unknowns per node")
        self.KE = np.asarray(KE, float)
        self.lattice = model_lattice(model)
        self.assembly = LatticeAssembly(self.lattice)
        self.n = model.n_free

    def matrix(self, scale: np.ndarray, reuse: bool = False) -> sp.csc_matrix:
        """The free-dof stiffness for the cell scale factors; with ``reuse`` it is written
        into the matrix the previous ``reuse`` call returned (for a loop that does not
        keep the old matrix: saves the page faults of a fresh array on big grids)."""
        return self.assembly.from_scale(scale, self.KE, reuse)


# ---- coarsening -------------------------------------------------------------------------
def _local_prolongations() -> np.ndarray:
    """(4, 8, 8): bilinear interpolation from a coarse cell's 8 dofs to the 8 dofs of its
    child k = 2 dj + di (child at offset (di, dj) in fine cells)."""
    P = np.zeros((4, 8, 8))
    for k in range(4):
        dj, di = divmod(k, 2)
        for c in range(4):
            u = (di + _CORNER[c, 0]) / 2.0
            v = (dj + _CORNER[c, 1]) / 2.0
            for C in range(4):
                w = (1.0 - abs(u - _CORNER[C, 0])) * (1.0 - abs(v - _CORNER[C, 1]))
                for p in range(2):
                    P[k, 2 * c + p, 2 * C + p] = w
    return P


_PK = _local_prolongations()
# vec(P_k^T K P_k) = vec(K) @ kron(P_k, P_k) for row-major 8 x 8 blocks.
_WK = np.stack([np.kron(_PK[k], _PK[k]) for k in range(4)])
_W_STACK = _WK.reshape(256, 64)  # the four children's entries side by side -> parent entries


@dataclass(frozen=True)
class Coarsening:
    coarse: Lattice
    P: sp.csr_matrix  # (fine n_free, coarse n_free) bilinear prolongation
    children: np.ndarray  # (coarse n_cells, 4): fine cell position of child k = 2 dj + di, -1 absent


def coarsen(lat: Lattice) -> Coarsening:
    """Merge 2 x 2 cells: a coarse cell is present if any child is; a coarse dof is kept if
    some free fine dof interpolates from it."""
    ny, nx = lat.cell_index.shape
    ncy, ncx = (ny + 1) // 2, (nx + 1) // 2
    cpad = np.full((2 * ncy, 2 * ncx), -1, np.int64)
    cpad[:ny, :nx] = lat.cell_index
    ch = np.stack([cpad[dj::2, di::2] for dj in (0, 1) for di in (0, 1)], axis=-1)  # (ncy, ncx, 4)
    active = (ch >= 0).any(axis=-1)
    cell_index = np.full((ncy, ncx), -1, np.int64)
    cell_index[active] = np.arange(int(active.sum()))
    node_active = np.zeros((ncy + 1, ncx + 1), bool)
    for oy in (0, 1):
        for ox in (0, 1):
            node_active[oy : oy + ncy, ox : ox + ncx] |= active
    node_index = np.full(node_active.shape, -1, np.int64)
    node_index[node_active] = np.arange(int(node_active.sum()))

    # Prolongation rows: every free fine dof from the (up to 4) coarse nodes around it.
    fj, fi = np.nonzero(lat.node_index >= 0)
    fnode = lat.node_index[fj, fi]
    rows, cols, vals = [], [], []
    for q in range(2):
        f = lat.free[2 * fnode + q]
        ok = f >= 0
        j, i, f = fj[ok], fi[ok], f[ok]
        odd_i, odd_j = (i % 2).astype(float), (j % 2).astype(float)
        for I, wi in ((i // 2, 1.0 - 0.5 * odd_i), ((i + 1) // 2, 0.5 * odd_i)):
            for J, wj in ((j // 2, 1.0 - 0.5 * odd_j), ((j + 1) // 2, 0.5 * odd_j)):
                w = wi * wj
                keep = w > 0.0
                cn = node_index[J[keep], I[keep]]
                rows.append(f[keep])
                cols.append(2 * cn + q)
                vals.append(w[keep])
    rows, cols, vals = np.concatenate(rows), np.concatenate(cols), np.concatenate(vals)
    if np.any(cols < 0):
        raise ValueError("a fine node interpolates from a missing coarse node")
    used = np.zeros(2 * int(node_active.sum()), bool)
    used[cols] = True
    free = np.full(used.size, -1, np.int64)
    free[used] = np.arange(int(used.sum()))
    n_free = int(used.sum())
    P = sp.csr_matrix((vals, (rows, free[cols])), shape=(lat.n_free, n_free))
    coarse = Lattice(cell_index=cell_index, node_index=node_index, free=free, n_free=n_free)
    return Coarsening(coarse=coarse, P=P, children=ch[active])


# ---- smoothing and the cycle --------------------------------------------------------------
# Upper bound of the spectrum of D^-1 A on the finest level for any cell scale factors:
# x^T A x = sum_e s_e x_e^T KE x_e <= lam_E x^T D x with lam_E the largest eigenvalue of
# the diagonally scaled element matrix (removing fixed dofs only lowers it, by interlacing).
def element_bound(KE: np.ndarray) -> float:
    d = 1.0 / np.sqrt(np.diag(KE))
    return float(np.linalg.eigvalsh(KE * d[:, None] * d[None, :]).max())


def default_threads() -> int:
    """Threads for the large sparse products: the cores this process may use, at most 4
    (the products are bound by memory bandwidth; more threads stop paying off)."""
    try:
        n = len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        n = os.cpu_count() or 1
    return max(1, min(n, 4))


class _Operator:
    """A symmetric sparse matrix whose products run on row blocks in the threads of
    ``pool`` (scipy's sparse products release the GIL); matrices below PARALLEL_NNZ, or
    without a pool, use one thread."""

    PARALLEL_NNZ = 1_000_000

    def __init__(self, A, pool: ThreadPoolExecutor | None = None):
        A = sp.csc_matrix(A)
        self.n = A.shape[0]
        # A is symmetric, so its CSC arrays are also the CSR arrays of A (CSR products
        # gather instead of scatter, and split into independent row blocks).
        self.A = sp.csr_matrix((A.data, A.indices, A.indptr), shape=A.shape)
        self.diag = self.A.diagonal()
        self.blocks = []
        self.pool = pool
        nt = pool._max_workers if pool is not None and A.nnz >= self.PARALLEL_NNZ else 1
        if nt > 1:
            ip = self.A.indptr
            cut = np.searchsorted(ip, np.linspace(0, A.nnz, nt + 1)).clip(0, self.n)
            cut[0], cut[-1] = 0, self.n
            for a, b in zip(cut[:-1], cut[1:]):
                if b > a:
                    blk = sp.csr_matrix((self.A.data[ip[a] : ip[b]], self.A.indices[ip[a] : ip[b]],
                                         ip[a : b + 1] - ip[a]), shape=(b - a, self.n))
                    self.blocks.append((a, b, blk))

    def __matmul__(self, x: np.ndarray) -> np.ndarray:
        if len(self.blocks) < 2:
            return self.A @ x
        out = np.empty(self.n)

        def run(item):
            a, b, blk = item
            out[a:b] = blk @ x

        list(self.pool.map(run, self.blocks))
        return out


def lanczos_max(op: _Operator, dinv: np.ndarray, steps: int = 10) -> float:
    """Largest eigenvalue of D^-1 A, estimated by a few Lanczos steps on D^-1/2 A D^-1/2
    plus the residual bound of the top Ritz pair (a slight over-estimate: the safe side
    for a smoother). A fixed start vector keeps runs reproducible."""
    s = np.sqrt(dinv)
    v = np.cos(np.arange(op.n) * 0.7548776662) + 1.5
    v /= np.linalg.norm(v)
    v_prev = np.zeros_like(v)
    alphas, betas = [], []
    beta = 0.0
    for _ in range(min(steps, op.n)):
        w = s * (op @ (s * v))
        a = float(w @ v)
        w -= a * v + beta * v_prev
        alphas.append(a)
        beta = float(np.linalg.norm(w))
        betas.append(beta)
        if beta <= 1e-12 * abs(a):
            break
        v_prev, v = v, w / beta
    k = len(alphas)
    T = np.diag(alphas) + np.diag(betas[: k - 1], 1) + np.diag(betas[: k - 1], -1)
    vals, vecs = np.linalg.eigh(T)
    return float(vals[-1] + abs(betas[k - 1] * vecs[-1, -1]))


class _Level:
    """Operator and smoother of one level, lam_max bounding the spectrum of D^-1 A:
    Chebyshev on [lam_max / ratio, lam_max] (Adams, Brezina, Hu and Tuminaro 2003,
    J. Comput. Phys. 188:593-610), or damped Jacobi with omega = 4 / (3 lam_max), the
    classical smoothing weight (2/3 for the 1D Laplacian)."""

    def __init__(self, A, smoother: str, degree: int, lam_max: float | None, pool, ratio: float):
        self.op = _Operator(A, pool)
        self.dinv = 1.0 / self.op.diag
        lam = lanczos_max(self.op, self.dinv) if lam_max is None else lam_max
        self.lam_max = lam
        self.smoother, self.degree = smoother, degree
        self.wdinv = (4.0 / (3.0 * lam)) * self.dinv
        self.interval = (lam / ratio, lam)

    def smooth(self, b: np.ndarray, x: np.ndarray | None) -> np.ndarray:
        """``degree`` smoothing steps on A x = b from x (zero if None)."""
        A = self.op
        if self.smoother == "jacobi":
            wd = self.wdinv
            sweeps = self.degree
            if x is None:
                x = wd * b
                sweeps -= 1
            else:
                x = x.copy()
            for _ in range(sweeps):
                t = A @ x
                np.subtract(b, t, out=t)
                t *= wd
                x += t
            return x
        lo, hi = self.interval
        theta, delta = 0.5 * (hi + lo), 0.5 * (hi - lo)
        sigma = theta / delta
        r = b.copy() if x is None else b - A @ x
        x = np.zeros_like(b) if x is None else x.copy()
        rho = 1.0 / sigma
        d = self.dinv * r * (1.0 / theta)
        for _ in range(self.degree - 1):
            x += d
            r -= A @ d
            rho_new = 1.0 / (2.0 * sigma - rho)
            d *= rho_new * rho
            d += (2.0 * rho_new / delta) * (self.dinv * r)
            rho = rho_new
        x += d
        return x


@dataclass(frozen=True)
class SolveInfo:
    iterations: tuple  # CG iterations per load case
    residual: tuple  # final ||F - K x|| / ||F|| per load case
    levels: tuple  # free dofs per level, finest first
    setup_seconds: float  # coarse operators, smoothers and the coarsest factorization
    solve_seconds: float  # the CG iterations
    fallback: bool = False  # CG did not converge and the direct solver answered


class GridMultigrid:
    """Conjugate gradients preconditioned by a geometric multigrid V-cycle on the grid of
    ``model`` (a grid.Model); ``KE`` is the solid element matrix the system is made of.

    ``solve(K, F, x0, scale)``: with ``scale`` (the cell scale factors K was assembled
    from) the coarse operators come from cell matrices; without it from sparse products
    P^T A P (slower, same operators). Each load case stops when ||F - K x|| <= rtol ||F||
    and the estimated compliance error is below ctol (relative); ``x0`` (the previous
    solution) starts the iteration. Coarsening stops at ``coarse_size`` free dofs, and the
    coarsest level is solved directly; a smaller coarsest grid costs iterations once its
    cells span the design's members (measured in docs/performance.md). If CG does not converge in ``maxiter`` iterations the direct solver answers
    (with a warning)."""

    name = "multigrid"
    note = None
    supports = staticmethod(LatticeAssembler.supports)

    def __init__(self, model, KE: np.ndarray, rtol: float = 1e-8, ctol: float = 0.0,
                 coarse_size: int = 50_000, smoother: str = "chebyshev",
                 degree: int = 2, cycle: str = "V", maxiter: int = 400, threads: int | None = None,
                 ratio: float = 6.0):
        if smoother not in ("chebyshev", "jacobi"):
            raise ValueError(f"smoother: {smoother!r} is not one of 'chebyshev', 'jacobi'")
        if cycle not in ("V", "W"):
            raise ValueError(f"cycle: {cycle!r} is not one of 'V', 'W'")
        if not self.supports(model):
            raise ValueError(f"the grid multigrid is written for {DOFS_PER_NODE} unknowns per node")
        t0 = time.perf_counter()
        self.KE = np.asarray(KE, float)
        self.rtol, self.ctol, self.maxiter = float(rtol), float(ctol), int(maxiter)
        self.smoother, self.degree, self.cycle, self.ratio = smoother, int(degree), cycle, float(ratio)
        self.threads = default_threads() if threads is None else max(1, int(threads))
        # the solver's own threads for the large sparse products (shut down with it)
        self._pool = ThreadPoolExecutor(max_workers=self.threads) if self.threads > 1 else None
        if self._pool is not None:
            weakref.finalize(self, self._pool.shutdown, wait=False)
        lat = model_lattice(model)
        self.lattices = [lat]
        self.coarsenings: list[Coarsening] = []
        while lat.n_free > coarse_size and min(lat.cell_index.shape) > 2:
            c = coarsen(lat)
            if c.coarse.n_free >= lat.n_free:
                break
            self.coarsenings.append(c)
            lat = c.coarse
            self.lattices.append(lat)
        self.assemblies = [LatticeAssembly(L) for L in self.lattices[1:]]
        self.R = [c.P.T.tocsr() for c in self.coarsenings]
        self.lam_fine = element_bound(self.KE)
        if self.coarsenings:
            self._first_coarse_terms(self.lattices[0], self.coarsenings[0])
        self._cell_work = None
        self.init_seconds = time.perf_counter() - t0
        self.info: SolveInfo | None = None

    def _first_coarse_terms(self, lat: Lattice, c: Coarsening):
        """Cell matrices of the first coarse level are sum_k s_child G_k with
        G_k = P_k^T KE P_k; a fine cell with a fixed dof gets a correction term (its fixed
        rows and columns removed first)."""
        G = np.stack([self.KE.ravel() @ _WK[k] for k in range(4)])  # (4, 64)
        self.G = 0.5 * (G + G.reshape(4, 8, 8).transpose(0, 2, 1).reshape(4, 64))
        nx = lat.cell_index.shape[1]
        jj, ii = np.nonzero(lat.cell_index >= 0)
        pos = lat.cell_index[jj, ii]
        n0 = jj * (nx + 1) + ii
        nodes = lat.node_index.ravel()[np.stack([n0, n0 + 1, n0 + nx + 2, n0 + nx + 1], axis=1)]
        edofs = np.empty((pos.size, 8), np.int64)
        edofs[:, 0::2], edofs[:, 1::2] = 2 * nodes, 2 * nodes + 1
        z = lat.free[edofs] >= 0
        special = ~z.all(axis=1)
        parent_of = np.full((lat.n_cells, 2), -1, np.int64)  # fine cell -> (coarse cell, k)
        cc, kk = np.nonzero(c.children >= 0)
        parent_of[c.children[cc, kk]] = np.stack([cc, kk], axis=1)
        sp_pos = pos[special]
        zf = z[special].astype(float)
        KEz = (zf[:, :, None] * self.KE[None] * zf[:, None, :]).reshape(-1, 64)
        k_of = parent_of[sp_pos, 1]
        D = np.empty((sp_pos.size, 64))
        for k in range(4):
            sel = k_of == k
            D[sel] = KEz[sel] @ _WK[k] - self.G[k]
        self.special_cells, self.special_parent, self.special_delta = sp_pos, parent_of[sp_pos, 0], D

    def coarse_cell_matrices(self, scale: np.ndarray) -> list[np.ndarray]:
        """Cell matrices (n_cells, 64) of every coarse level for the cell scale factors.
        They live in work arrays that the next call overwrites."""
        if not self.coarsenings:
            return []
        if self._cell_work is None:  # one row more, kept zero, for absent children
            self._cell_work = [np.zeros((L.n_cells + 1, 64)) for L in self.lattices[1:]]
        s = np.append(np.asarray(scale, float), 0.0)  # s[-1] = 0 for an absent child
        work = self._cell_work
        Ke = np.matmul(s[self.coarsenings[0].children], self.G, out=work[0][:-1])
        np.add.at(Ke, self.special_parent, s[self.special_cells, None] * self.special_delta)
        for l, c in enumerate(self.coarsenings[1:], start=1):
            children = work[l - 1][c.children].reshape(-1, 256)  # absent child -> the zero row
            np.matmul(children, _W_STACK, out=work[l][:-1])
        return [w[:-1] for w in work]

    def coarse_matrices(self, K: sp.csc_matrix, scale=None) -> list[sp.csc_matrix]:
        """The free-dof operator of every coarse level, coarsest last."""
        if scale is not None:
            return [asm.from_cells(Ke) for asm, Ke in zip(self.assemblies, self.coarse_cell_matrices(scale))]
        out, A = [], sp.csr_matrix(K)
        for c, R in zip(self.coarsenings, self.R):
            A = (R @ (A @ c.P)).tocsc()
            A.sort_indices()
            out.append(A)
        return out

    def preconditioner(self, K, scale=None):
        """The multigrid cycle for K as a function r -> M^-1 r."""
        return self._cycle(K, scale)[0]

    def _cycle(self, K, scale):
        mats = [K] + self.coarse_matrices(K, scale)
        levels = [_Level(A, self.smoother, self.degree, self.lam_fine if l == 0 else None, self._pool, self.ratio)
                  for l, A in enumerate(mats[:-1])]
        Ac = sp.csc_matrix(mats[-1])
        # A tiny diagonal shift keeps the coarsest factorization regular if P has
        # dependent columns (their null vectors never reach the fine grid).
        Ac = sp.csc_matrix(Ac + sp.diags(1e-12 * Ac.diagonal()))
        lu = sparse_lu(Ac)
        P, R, w_cycle = [c.P for c in self.coarsenings], self.R, self.cycle == "W"

        def cycle(b: np.ndarray, l: int = 0) -> np.ndarray:
            if l == len(levels):
                return lu.solve(b)
            lev = levels[l]
            x = lev.smooth(b, None)
            rc = R[l] @ (b - lev.op @ x)
            xc = cycle(rc, l + 1)
            if w_cycle and l + 1 < len(levels):
                xc += cycle(rc - levels[l + 1].op @ xc, l + 1)
            x += P[l] @ xc
            return lev.smooth(b, x)

        return cycle, (levels[0].op if levels else _Operator(K, self._pool))

    def solve(self, K: sp.csc_matrix, F: np.ndarray, x0=None, scale=None) -> np.ndarray:
        t0 = time.perf_counter()
        F2 = np.asarray(F, float).reshape(K.shape[0], -1)
        if not self.coarsenings:  # a grid this small is solved directly
            lu = sparse_lu(K)
            X = lu.solve(F2)
            t1 = time.perf_counter()
            self.info = SolveInfo((0,) * F2.shape[1], tuple(np.linalg.norm(F2 - K @ X, axis=0) / np.linalg.norm(F2, axis=0)),
                                  (K.shape[0],), t1 - t0, 0.0)
            return X.reshape(np.shape(F))
        M, A = self._cycle(K, scale)
        t1 = time.perf_counter()
        X0 = None if x0 is None else np.asarray(x0, float).reshape(K.shape[0], -1)
        if X0 is not None and X0.shape != F2.shape:
            X0 = None
        X = np.zeros_like(F2)
        its, res = [], []
        try:
            for c in range(F2.shape[1]):
                X[:, c], k, rel = pcg(A, F2[:, c], M, self.rtol, self.maxiter,
                                      None if X0 is None else X0[:, c], self.ctol)
                its.append(k)
                res.append(rel)
        except NotConverged as exc:
            if K.shape[0] > DIRECT_FALLBACK_MAX:  # a factorization this big may not fit in memory
                raise NotConverged(f"{exc}; too large ({K.shape[0]:,} unknowns) to solve directly instead") from None
            warnings.warn(f"{exc}; solving directly instead", RuntimeWarning, stacklevel=2)
            lu = sparse_lu(K)
            X = lu.solve(F2)
            R = F2 - K @ X
            self.info = SolveInfo(tuple(its), tuple(np.linalg.norm(R, axis=0) / np.linalg.norm(F2, axis=0)),
                                  tuple(L.n_free for L in self.lattices), t1 - t0, time.perf_counter() - t1, True)
            return X.reshape(np.shape(F))
        self.info = SolveInfo(tuple(its), tuple(res), tuple(L.n_free for L in self.lattices),
                              t1 - t0, time.perf_counter() - t1)
        return X.reshape(np.shape(F))


class NotConverged(FloatingPointError):
    """Conjugate gradients stopped at the iteration limit (an optimization loop reports it
    as a numerical failure, as any FloatingPointError)."""


# Largest system that the direct solver takes over when CG fails: SuperLU needs about
# 3 GB there (benchmarks/solve.py); at 2.5M unknowns it needed 15 GB and 5 minutes.
DIRECT_FALLBACK_MAX = 700_000


def pcg(A, b: np.ndarray, M, rtol: float, maxiter: int, x0=None, ctol: float = 0.0):
    """Preconditioned conjugate gradients; returns (x, iterations, ||b - A x|| / ||b||).

    A start ``x0`` is used as a deflation vector (Saad, Yeung, Erhel and Guyomarc'h 2000,
    SIAM J. Sci. Comput. 21:1909-1926): the iterate starts at the best multiple of x0 and
    every search direction is kept A-orthogonal to x0. The residual then stays orthogonal
    to x0 and to all search directions, so x.r = 0 and the compliance error
    b.u - b.x = x.r + e^T A e (e = u - x) is e^T A e, quadratic in the error as from a
    zero start; a plain warm start would make it first order. Rounding would let r drift
    away from orthogonality to x0, so each step removes that component again.

    Stops when ||b - A x|| <= rtol ||b|| and, if ``ctol`` > 0, |x.r| + r.M^-1 r (the last
    one computed, on the large side of e^T A e) <= ctol b.x; the stop is confirmed with the
    true residual (the updated one drifts from it in rounding). Raises NotConverged at
    ``maxiter``."""
    nb = float(np.linalg.norm(b))
    if nb == 0.0:
        return np.zeros_like(b), 0, 0.0
    w = Aw = None
    if x0 is not None:
        w = np.array(x0, float)
        Aw = A @ w
        wAw = float(w @ Aw)
        if not (np.isfinite(wAw) and wAw > 0.0):
            w = None
    if w is None:
        x, r = np.zeros_like(b), b.copy()
    else:
        g = float(w @ b) / wAw
        x, r = g * w, b - g * Aw

    def project(z):  # the part of a direction A-orthogonal to w
        return z if w is None else z - (float(Aw @ z) / wAw) * w

    def converged(rz: float) -> bool:
        if float(np.linalg.norm(r)) > rtol * nb:
            return False
        return ctol <= 0.0 or abs(float(x @ r)) + rz <= ctol * abs(float(b @ x))

    z = M(r)
    rz = float(r @ z)
    p = project(z)
    checks, k = 0, 0
    best_rn, best_x = np.inf, x
    conv = converged(rz)
    while True:
        if conv:
            r = b - A @ x  # confirm with the true residual
            if converged(rz) or checks >= 3:
                return x, k, float(np.linalg.norm(r)) / nb
            checks += 1  # restart from the true residual
            z = M(r)
            rz = float(r @ z)
            p = project(z)
        if k == maxiter:
            break
        k += 1
        q = A @ p
        alpha = rz / float(p @ q)
        x += alpha * p
        r -= alpha * q
        if w is not None:
            g = float(w @ r) / wAw
            x += g * w
            r -= g * Aw
        rn = float(np.linalg.norm(r))
        if rn < best_rn:
            best_rn, best_x = rn, x.copy()
        elif w is not None and rn > 1e3 * best_rn:
            # Past the rounding floor the deflated recurrences can drift apart and grow:
            # go on from the best iterate as plain CG.
            w = None
            x = best_x
            r = b - A @ x
            z = M(r)
            rz = float(r @ z)
            p = z.copy()
            conv = converged(rz)
            continue
        conv = converged(rz)
        if not conv:
            z = M(r)
            rz_new = float(r @ z)
            p *= rz_new / rz
            p += project(z)
            rz = rz_new
    raise NotConverged(f"multigrid CG did not reach a relative residual of {rtol:g} in {maxiter} "
                       f"iterations ({float(np.linalg.norm(r)) / nb:.2e})")
