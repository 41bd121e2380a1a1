"""Level-set building blocks on the fixed grid.

Sign convention: phi < 0 in material, phi > 0 in void, phi = 0 on the boundary. phi lives
on grid nodes, shape (ny + 1, nx + 1), and is kept close to a signed distance (a length in
model units). Nodes outside the domain are masked out by ``node_active``.
"""
from __future__ import annotations

import math

import numpy as np
import scipy.sparse as sp
import skfmm

from ..linalg import sparse_lu
from . import kernels


def cell_fraction(corner_phi: np.ndarray) -> np.ndarray:
    """Area fraction of each cell where phi < 0, for corner values ``(n, 4)`` in local order.

    phi is interpolated linearly along the cell edges (marching squares), so the area is
    exactly that of the polygon the zero contour draws in the cell: the same geometry as
    the exported outline (an ambiguous saddle cell is taken as connected unless the mean
    of its corners is not negative, as contourpy draws it).
    """
    p = np.ascontiguousarray(corner_phi, dtype=float).reshape(-1, 4)
    out = np.empty(p.shape[0])
    kernels.corner_areas(p, out)
    return out


# Columns per strip of the narrow-band reinitialization (LevelSetGrid._narrow_march).
REINIT_STRIP_COLUMNS = 400

# Coarse cells that the Helmholtz smoothing length must span when the filter runs on a
# coarsened grid (LevelSetGrid._build_smoother).
SMOOTH_CELLS_PER_LENGTH = 16.0


def _helmholtz(active_flat: np.ndarray, cell_nodes: np.ndarray, h: float, r: float, weight=None):
    """Factorized (r^2 K + M) on the active nodes of a grid with square cells of size h,
    the map from a cell-wise constant field to its load vector M v, and the nodal areas.
    ``weight`` (per cell, default 1) scales each cell's matrices and load: the share of a
    coarse cell that the fine domain covers."""
    w = np.ones(cell_nodes.shape[0]) if weight is None else np.asarray(weight, float)
    number = np.full(active_flat.size, -1, np.int64)
    number[active_flat] = np.arange(int(active_flat.sum()))
    cn = number[cell_nodes]  # (n_cells, 4)
    KL = np.array([[4, -1, -2, -1], [-1, 4, -1, -2], [-2, -1, 4, -1], [-1, -2, -1, 4]]) / 6.0
    ML = np.array([[4, 2, 1, 2], [2, 4, 2, 1], [1, 2, 4, 2], [2, 1, 2, 4]]) * (h**2 / 36.0)
    AE = r * r * KL + ML
    rows = np.repeat(cn, 4, axis=1).ravel()
    cols = np.tile(cn, (1, 4)).ravel()
    n = int(active_flat.sum())
    A = sp.csc_matrix(((w[:, None] * AE.ravel()[None, :]).ravel(), (rows, cols)), shape=(n, n))
    lu = sparse_lu(A)
    # Right-hand side of a cell-wise constant field: h^2 / 4 of each cell to each corner.
    ones = np.repeat(w * (h**2 / 4.0), 4)
    cell_to_node = sp.csr_matrix((ones, (cn.ravel(), np.repeat(np.arange(cn.shape[0]), 4))), shape=(n, cn.shape[0]))
    return lu, cell_to_node, np.asarray(cell_to_node.sum(axis=1)).ravel()


class LevelSetGrid:
    """Difference, smoothing and reinitialization operators on the active nodes."""

    def __init__(self, node_active: np.ndarray, cell_nodes: np.ndarray, h: float, smoothing: float):
        self.node_active = node_active
        self.shape = node_active.shape
        self.h = h
        self.cell_nodes = cell_nodes  # (n_cells, 4) flat node indices
        a = node_active
        # Neighbour present in each direction (differences to a missing neighbour are 0:
        # a zero-gradient condition at the domain edge).
        self._pair_x = (a[:, 1:] & a[:, :-1]).astype(float)  # both ends of an x edge present
        self._pair_y = (a[1:, :] & a[:-1, :]).astype(float)
        self._build_smoother(smoothing)

    # -- geometry -------------------------------------------------------------------
    def fractions(self, phi: np.ndarray) -> np.ndarray:
        return self.fractions_and_stiffness(phi)[0]

    def stiffness_fractions(self, phi: np.ndarray) -> np.ndarray:
        """Material fraction for the stiffness: the area fraction, except that a cell whose
        two material corners the outline keeps apart carries nothing across (a cell-wise
        stiffness would join them, a link the exported outline does not have)."""
        return self.fractions_and_stiffness(phi)[1]

    def fractions_and_stiffness(self, phi: np.ndarray):
        """(area fractions, stiffness fractions) of the cells, in one pass."""
        n = self.cell_nodes.shape[0]
        frac, stiff = np.empty(n), np.empty(n)
        kernels.cell_areas(np.ascontiguousarray(phi, dtype=float).ravel(), self.cell_nodes, frac, stiff)
        return frac, stiff

    def upwind_norms(self, phi: np.ndarray):
        """Godunov upwind |grad phi| for an outward (V > 0) and an inward (V < 0) speed.
        One-sided differences are zero where a neighbour is missing (a zero-gradient
        condition at the domain edge); see kernels.upwind_norms."""
        grow, shrink = np.empty(self.shape), np.empty(self.shape)
        kernels.upwind_norms(np.ascontiguousarray(phi, dtype=float), self._pair_x, self._pair_y, self.h, grow, shrink)
        return grow, shrink

    def advect(self, phi: np.ndarray, speed: np.ndarray, travel: float, cfl: float = 0.5) -> np.ndarray:
        """Solve phi_t + V |grad phi| = 0 (first-order upwind) until the boundary has moved
        ``travel`` (a length) where |V| = 1; sub-steps keep dt |V|max / h <= cfl (on fine
        grids there are tens of them; each is one compiled pass, kernels.upwind_step)."""
        a = self.node_active
        vmax = float(np.max(np.abs(speed[a]), initial=0.0))
        if travel <= 0.0 or vmax == 0.0:
            return phi.copy()
        n_sub = max(1, int(np.ceil(travel * vmax / (cfl * self.h))))
        dt = travel / n_sub
        vp = np.maximum(speed, 0.0) * a
        vm = np.minimum(speed, 0.0) * a
        old = np.array(phi, dtype=float, order="C")
        new = np.empty_like(old)
        for _ in range(n_sub):  # two buffers in turn: each step reads one and writes the other
            kernels.upwind_step(old, new, vp, vm, self._pair_x, self._pair_y, self.h, dt)
            old, new = new, old
        return old

    def reinitialize(self, phi: np.ndarray, band: float | None = None) -> np.ndarray:
        """Signed distance to the zero contour by fast marching (scikit-fmm), restricted to
        the active nodes. A design with no boundary is returned unchanged.

        ``band`` (a length): march only that far from the contour (scikit-fmm's narrow
        band, in strips: the values inside it are those of the full march to 1e-8 h)
        and set the nodes beyond it to +-band, keeping their sign."""
        a = self.node_active
        vals = phi[a]
        if not (np.any(vals < 0) and np.any(vals > 0)):
            return phi.copy()
        filled = np.where(a, phi, 1.0)
        out = phi.copy()
        if band is None:
            d = skfmm.distance(np.ma.MaskedArray(filled, mask=~a), dx=self.h)
            out[a] = np.ma.getdata(d)[a]
            return out
        dist, far = self._narrow_march(filled, ~a, float(band))
        far &= a
        out[a] = dist[a]
        out[far] = np.where(phi[far] < 0.0, -float(band), float(band))
        return out

    def _narrow_march(self, phi: np.ndarray, off: np.ndarray, band: float):
        """Narrow-band fast marching in strips of about REINIT_STRIP_COLUMNS columns, each
        widened by the band plus five cells on both sides (so every node of a strip that
        lies within the band of the boundary sees all of the boundary it is measured from);
        returns the distances and the mask of nodes beyond the band. scikit-fmm's march
        over a few strips measured 1.5x faster than over the whole grid (320k and 1.28M
        cells, docs/performance.md); the values agree with one march to 1e-8 h or better
        (nodes at equal distance are accepted in another order)."""
        ny1, nx1 = phi.shape
        overlap = int(math.ceil(band / self.h)) + 5
        k = max(1, round(nx1 / REINIT_STRIP_COLUMNS))
        if k > 1 and nx1 / k < overlap:
            k = max(1, nx1 // overlap)
        edges = np.linspace(0, nx1, k + 1).astype(int)
        dist = np.empty(phi.shape)
        far = np.ones(phi.shape, bool)
        for e0, e1 in zip(edges[:-1], edges[1:]):
            lo, hi = max(0, e0 - overlap), min(nx1, e1 + overlap)
            sub = np.ascontiguousarray(phi[:, lo:hi])
            sub_off = np.ascontiguousarray(off[:, lo:hi])
            vals = sub[~sub_off]
            core = (slice(None), slice(e0 - lo, e1 - lo))
            if vals.size and np.any(vals < 0) and np.any(vals > 0):
                try:
                    d = skfmm.distance(np.ma.MaskedArray(sub, mask=sub_off), dx=self.h, narrow=band)
                except ValueError:  # no zero contour among the strip's active nodes
                    d = None
                if d is not None:
                    dist[:, e0:e1] = np.ma.getdata(d)[core]
                    far[:, e0:e1] = np.ma.getmaskarray(d)[core]
                    continue
            dist[:, e0:e1] = sub[core]  # no boundary within reach: every node is beyond the band
        return dist, far

    def extend_distance(self, phi: np.ndarray, band: float) -> np.ndarray:
        """phi of a narrow-band reinitialization (``band``) with the nodes at +-band replaced
        by their distance from a full march; the nodes inside the band, and so the zero
        contour, are kept as they are."""
        full = self.reinitialize(phi)
        far = self.node_active & (np.abs(phi) >= band)
        out = phi.copy()
        out[far] = full[far]
        return out

    # -- smoothing ------------------------------------------------------------------
    def _build_smoother(self, r: float):
        """(r^2 K + M) v_s = M v with Q4 elements (natural boundary condition at the domain
        edge): a Helmholtz filter with length r, factorized once.

        When r spans many cells (r >= 2 SMOOTH_CELLS_PER_LENGTH h) the filter is solved on
        a grid coarsened c x c (c a power of two, so that r still spans at least
        SMOOTH_CELLS_PER_LENGTH coarse cells): the cell field is averaged onto the coarse
        cells, filtered there and interpolated bilinearly back to the nodes. The filtered
        field varies on the length r, so the coarse grid resolves it (difference to the
        fine filter measured in docs/performance.md); the factorization of a million-node
        operator, the largest part of the set-up and of its memory, is avoided."""
        c = 1
        while r / (2 * c * self.h) >= SMOOTH_CELLS_PER_LENGTH:
            c *= 2
        self.smoothing_coarsening = c
        active_flat = self.node_active.ravel()
        n_nodes = int(active_flat.sum())
        if c == 1:
            self._smooth_lu, self._cell_to_node, self.node_area = _helmholtz(active_flat, self.cell_nodes, self.h, r)
            self._restrict = self._prolong = None
            return
        ny1, nx1 = self.shape
        ny, nx = ny1 - 1, nx1 - 1
        j, i = np.divmod(self.cell_nodes[:, 0], nx1)  # each cell's lower-left node
        NY, NX = -(-ny // c), -(-nx // c)
        parent = (j // c) * NX + (i // c)
        present, coarse_of = np.unique(parent, return_inverse=True)
        n_coarse = present.size
        counts = np.bincount(coarse_of, minlength=n_coarse).astype(float)
        self._restrict = sp.csr_matrix((1.0 / counts[coarse_of], (coarse_of, np.arange(parent.size))),
                                       shape=(n_coarse, parent.size))  # mean over present children
        J, I = np.divmod(present, NX)
        base = J * (NX + 1) + I
        coarse_nodes = np.stack([base, base + 1, base + NX + 2, base + NX + 1], axis=1)
        coarse_active = np.zeros((NY + 1) * (NX + 1), bool)
        coarse_active[coarse_nodes.ravel()] = True
        # A coarse cell at the domain edge counts with the share of it the fine cells cover,
        # so the coarse domain does not overhang the fine one.
        self._smooth_lu, self._cell_to_node, _ = _helmholtz(coarse_active, coarse_nodes, c * self.h, r,
                                                            weight=counts / (c * c))
        # bilinear interpolation from the coarse nodes to every active fine node
        number = np.full(coarse_active.size, -1, np.int64)
        number[coarse_active] = np.arange(int(coarse_active.sum()))
        fj, fi = np.divmod(np.flatnonzero(active_flat), nx1)
        J0, I0 = np.minimum(fj // c, NY - 1), np.minimum(fi // c, NX - 1)
        ty, tx = fj / c - J0, fi / c - I0
        rows, cols, vals = [], [], []
        for dj, wy in ((0, 1.0 - ty), (1, ty)):
            for di, wx in ((0, 1.0 - tx), (1, tx)):
                w = wy * wx
                keep = w > 0.0
                col = number[(J0 + dj)[keep] * (NX + 1) + (I0 + di)[keep]]
                if np.any(col < 0):
                    raise AssertionError("a fine node interpolates from a missing coarse node")
                rows.append(np.flatnonzero(keep))
                cols.append(col)
                vals.append(w[keep])
        self._prolong = sp.csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                                      shape=(n_nodes, number.max() + 1))
        cn = np.flatnonzero(active_flat)
        local = np.full(active_flat.size, -1, np.int64)
        local[cn] = np.arange(n_nodes)
        fine = local[self.cell_nodes]
        self.node_area = np.bincount(fine.ravel(), minlength=n_nodes) * (self.h**2 / 4.0)

    def smooth_cells(self, cell_values: np.ndarray) -> np.ndarray:
        """Helmholtz-smoothed nodal field of a cell-wise constant field; 0 outside."""
        if self._restrict is None:
            v = self._smooth_lu.solve(self._cell_to_node @ cell_values)
        else:
            v = self._prolong @ self._smooth_lu.solve(self._cell_to_node @ (self._restrict @ cell_values))
        out = np.zeros(self.shape)
        out[self.node_active] = v
        return out

    def open(self, phi: np.ndarray, r: float) -> np.ndarray:
        """Morphological opening of the material by a disc of radius r: erode, then dilate
        (shifts of a signed distance, each followed by reinitialization). Removes members
        thinner than 2 r and rounds convex corners to radius r."""
        return self.reinitialize(self.reinitialize(phi + r) - r)

    def close(self, phi: np.ndarray, r: float) -> np.ndarray:
        """Morphological closing of the material by a disc of radius r: fills holes and
        gaps narrower than 2 r and rounds inside corners to radius r."""
        return self.reinitialize(self.reinitialize(phi - r) + r)

    def clamp(self, phi: np.ndarray, solid_sdf: np.ndarray, empty_sdf: np.ndarray) -> np.ndarray:
        """Union with the keep-solid regions, minus the keep-empty regions (on distances)."""
        return np.maximum(np.minimum(phi, solid_sdf), -empty_sdf)


def perforated_start(X: np.ndarray, Y: np.ndarray, spacing: float, radius: float, origin) -> np.ndarray:
    """Signed distance of a plate with a square lattice of round holes (phi > 0 inside them),
    lattice aligned with ``origin`` and offset by half a spacing."""
    ox, oy = origin
    cx = ox + spacing * (np.floor((X - ox) / spacing) + 0.5)
    cy = oy + spacing * (np.floor((Y - oy) / spacing) + 0.5)
    return radius - np.hypot(X - cx, Y - cy)


def normal_velocity(ws: np.ndarray, lam: float, vscale: float) -> np.ndarray:
    """The normal velocity of the level set on the nodes: (ws - lam) / vscale clipped to
    [-1, 1] (levelform.levelset.kernels.normal_speed, the one definition).

    Parameters
    ----------
    ws : nodal smoothed shape sensitivity (strain-energy density), any shape
    lam : volume multiplier
    vscale : the running velocity scale (> 0)

    Examples
    --------
    >>> normal_velocity(np.array([0.0, 1.0, 5.0]), 1.0, 2.0)
    array([-0.5,  0. ,  1. ])
    """
    w = np.ascontiguousarray(ws, dtype=float)
    out = np.empty(w.size)
    kernels.normal_speeds(w.ravel(), float(lam), float(vscale), out)
    return out.reshape(w.shape)
