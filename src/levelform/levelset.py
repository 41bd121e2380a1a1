"""Level-set building blocks on the fixed grid.

Sign convention: phi < 0 in material, phi > 0 in void, phi = 0 on the boundary. phi lives
on grid nodes, shape (ny + 1, nx + 1), and is kept close to a signed distance (a length in
model units). Nodes outside the domain are masked out by ``node_active``.
"""
from __future__ import annotations

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
import skfmm

# Corners of the unit cell in local order (counter-clockwise from lower left).
_CORNER = np.array([[0.0, 0.0], [1.0, 0.0], [1.0, 1.0], [0.0, 1.0]])


def cell_fraction(corner_phi: np.ndarray) -> np.ndarray:
    """Area fraction of each cell where phi < 0, for corner values ``(n, 4)`` in local order.

    phi is interpolated linearly along the cell edges (marching squares), so the area is
    exactly that of the polygon the zero contour draws in the cell: the same geometry as
    the exported outline (an ambiguous saddle cell is taken as connected).
    """
    p_all = np.asarray(corner_phi, float)
    neg_all = p_all < 0.0
    count = neg_all.sum(axis=1)
    out = (count == 4).astype(float)
    cut = np.flatnonzero((count > 0) & (count < 4))
    if cut.size:
        out[cut] = _cut_cell_fraction(p_all[cut])
    return out


def separated_saddles(corner_phi: np.ndarray) -> np.ndarray:
    """Cells whose material sits in two opposite corners that the zero contour keeps apart
    (the mean of the corners is not negative): the outline has no material link across
    them, so the analysis must not give them one either."""
    neg = np.asarray(corner_phi) < 0.0
    saddle = (neg[:, 0] == neg[:, 2]) & (neg[:, 1] == neg[:, 3]) & (neg[:, 0] != neg[:, 1])
    return saddle & (np.asarray(corner_phi).mean(axis=1) >= 0.0)


def _cut_cell_fraction(p: np.ndarray) -> np.ndarray:
    """Marching-squares area for cells with corners of both signs."""
    n = p.shape[0]
    neg = p < 0.0
    verts = np.zeros((n, 8, 2))
    valid = np.zeros((n, 8), bool)
    for k in range(4):
        a, b = k, (k + 1) % 4
        verts[:, 2 * k] = _CORNER[a]
        valid[:, 2 * k] = neg[:, a]
        cross = neg[:, a] != neg[:, b]
        denom = np.where(cross, p[:, a] - p[:, b], 1.0)
        t = np.where(cross, p[:, a] / denom, 0.0)
        verts[:, 2 * k + 1] = _CORNER[a] + t[:, None] * (_CORNER[b] - _CORNER[a])
        valid[:, 2 * k + 1] = cross
    # Fill each invalid slot with the previous valid vertex (cyclically): repeated vertices
    # add nothing to the shoelace sum, so the sum runs over the polygon's vertices only.
    slot = np.where(valid, np.arange(8), -1)
    last = np.maximum.accumulate(slot, axis=1)
    wrap = slot.max(axis=1, keepdims=True)
    idx = np.where(last < 0, wrap, last)
    idx = np.maximum(idx, 0)
    v = np.take_along_axis(verts, idx[:, :, None], axis=1)
    x, y = v[:, :, 0], v[:, :, 1]
    area = 0.5 * np.sum(x * np.roll(y, -1, axis=1) - np.roll(x, -1, axis=1) * y, axis=1)
    area = np.where(wrap[:, 0] < 0, 0.0, np.abs(area))
    # Saddle cells (material at two opposite corners): like contourpy, the mean of the
    # corners decides; a non-negative centre value separates two corner triangles.
    saddle = (neg[:, 0] == neg[:, 2]) & (neg[:, 1] == neg[:, 3]) & (neg[:, 0] != neg[:, 1])
    apart = saddle & (p.mean(axis=1) >= 0.0)
    if apart.any():
        q = p[apart]
        tri = np.zeros(q.shape[0])
        for k in range(4):
            qk, qn, qp = q[:, k], q[:, (k + 1) % 4], q[:, (k - 1) % 4]
            with np.errstate(divide="ignore", invalid="ignore"):
                corner = 0.5 * (qk / (qk - qn)) * (qk / (qk - qp))
            tri += np.where(qk < 0.0, corner, 0.0)
        area[apart] = tri
    return np.clip(area, 0.0, 1.0)


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
        self.has_xm = np.zeros_like(a)
        self.has_xm[:, 1:] = a[:, 1:] & a[:, :-1]
        self.has_xp = np.zeros_like(a)
        self.has_xp[:, :-1] = a[:, :-1] & a[:, 1:]
        self.has_ym = np.zeros_like(a)
        self.has_ym[1:, :] = a[1:, :] & a[:-1, :]
        self.has_yp = np.zeros_like(a)
        self.has_yp[:-1, :] = a[:-1, :] & a[1:, :]
        self._build_smoother(smoothing)

    # -- geometry -------------------------------------------------------------------
    def fractions(self, phi: np.ndarray) -> np.ndarray:
        return cell_fraction(phi.ravel()[self.cell_nodes])

    def stiffness_fractions(self, phi: np.ndarray) -> np.ndarray:
        """Material fraction for the stiffness: the area fraction, except that a cell whose
        two material corners the outline keeps apart carries nothing across (a cell-wise
        stiffness would join them, a link the exported outline does not have)."""
        corners = phi.ravel()[self.cell_nodes]
        return np.where(separated_saddles(corners), 0.0, cell_fraction(corners))

    def upwind_norms(self, phi: np.ndarray):
        """Godunov upwind |grad phi| for an outward (V > 0) and an inward (V < 0) speed."""
        h = self.h
        dxm = np.zeros(self.shape)
        dxp = np.zeros(self.shape)
        dym = np.zeros(self.shape)
        dyp = np.zeros(self.shape)
        d = (phi[:, 1:] - phi[:, :-1]) / h
        dxm[:, 1:] = d
        dxp[:, :-1] = d
        d = (phi[1:, :] - phi[:-1, :]) / h
        dym[1:, :] = d
        dyp[:-1, :] = d
        dxm *= self.has_xm
        dxp *= self.has_xp
        dym *= self.has_ym
        dyp *= self.has_yp
        grow = np.sqrt(
            np.maximum(dxm, 0) ** 2 + np.minimum(dxp, 0) ** 2 + np.maximum(dym, 0) ** 2 + np.minimum(dyp, 0) ** 2
        )
        shrink = np.sqrt(
            np.minimum(dxm, 0) ** 2 + np.maximum(dxp, 0) ** 2 + np.minimum(dym, 0) ** 2 + np.maximum(dyp, 0) ** 2
        )
        return grow, shrink

    def advect(self, phi: np.ndarray, speed: np.ndarray, travel: float, cfl: float = 0.5) -> np.ndarray:
        """Solve phi_t + V |grad phi| = 0 (first-order upwind) until the boundary has moved
        ``travel`` (a length) where |V| = 1; sub-steps keep dt |V|max / h <= cfl."""
        vmax = float(np.max(np.abs(speed[self.node_active]), initial=0.0))
        if travel <= 0.0 or vmax == 0.0:
            return phi.copy()
        n_sub = max(1, int(np.ceil(travel * vmax / (cfl * self.h))))
        dt = travel / n_sub
        vp = np.maximum(speed, 0.0) * self.node_active
        vm = np.minimum(speed, 0.0) * self.node_active
        out = phi.copy()
        for _ in range(n_sub):
            grow, shrink = self.upwind_norms(out)
            out -= dt * (vp * grow + vm * shrink)
        return out

    def reinitialize(self, phi: np.ndarray) -> np.ndarray:
        """Signed distance to the zero contour by fast marching (scikit-fmm), restricted to
        the active nodes. A design with no boundary is returned unchanged."""
        a = self.node_active
        vals = phi[a]
        if not (np.any(vals < 0) and np.any(vals > 0)):
            return phi.copy()
        masked = np.ma.MaskedArray(np.where(a, phi, 1.0), mask=~a)
        d = skfmm.distance(masked, dx=self.h)
        out = phi.copy()
        out[a] = np.ma.getdata(d)[a]
        return out

    # -- smoothing ------------------------------------------------------------------
    def _build_smoother(self, r: float):
        """(r^2 K + M) v_s = M v on the active nodes with Q4 elements (natural boundary
        condition at the domain edge): a Helmholtz filter with length r. Factorized once."""
        active_flat = self.node_active.ravel()
        number = np.full(active_flat.size, -1, np.int64)
        number[active_flat] = np.arange(int(active_flat.sum()))
        self._number = number
        cn = number[self.cell_nodes]  # (n_cells, 4)
        KL = np.array([[4, -1, -2, -1], [-1, 4, -1, -2], [-2, -1, 4, -1], [-1, -2, -1, 4]]) / 6.0
        ML = np.array([[4, 2, 1, 2], [2, 4, 2, 1], [1, 2, 4, 2], [2, 1, 2, 4]]) * (self.h**2 / 36.0)
        AE = r * r * KL + ML
        rows = np.repeat(cn, 4, axis=1).ravel()
        cols = np.tile(cn, (1, 4)).ravel()
        n = int(active_flat.sum())
        A = sp.csc_matrix((np.tile(AE.ravel(), cn.shape[0]), (rows, cols)), shape=(n, n))
        self._smooth_lu = spla.splu(A, permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0, options={"SymmetricMode": True})
        # Right-hand side of a cell-wise constant field: h^2 / 4 of each cell to each corner.
        ones = np.full(cn.size, self.h**2 / 4.0)
        self._cell_to_node = sp.csr_matrix((ones, (cn.ravel(), np.repeat(np.arange(cn.shape[0]), 4))), shape=(n, cn.shape[0]))
        self.node_area = np.asarray(self._cell_to_node.sum(axis=1)).ravel()

    def smooth_cells(self, cell_values: np.ndarray) -> np.ndarray:
        """Helmholtz-smoothed nodal field of a cell-wise constant field; 0 outside."""
        v = self._smooth_lu.solve(self._cell_to_node @ cell_values)
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
