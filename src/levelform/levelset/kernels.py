"""Compiled loops (numba) for the per-iteration grid work of the level-set method.

On a million-cell grid the level-set update takes tens of upwind sub-steps, and the volume
control evaluates the cut-cell areas of the whole boundary band a dozen times; written as
numpy array expressions each of them streams the grid through memory twenty or more times.
Here each is one pass (and the grid's rows are shared between the cores). The arithmetic
of the upwind step is that of the array version it replaced, operation for operation, so
the results are the same bit for bit; the cut-cell areas agree with it to rounding.

Every kernel is deterministic whatever the number of threads: parallel loops only write
outputs of their own index, and sums are taken over fixed chunks in a fixed order.
"""
from __future__ import annotations

import math

from numba import njit, prange

CHUNK = 4096  # cells per partial sum


@njit(cache=True, inline="always")
def _crossing(pa, pb):
    """Where phi changes sign on an edge from a (phi = pa) to b, as a share of the edge."""
    return pa / (pa - pb)


@njit(cache=True, inline="always")
def separated_saddle(p0, p1, p2, p3):
    """Material in two opposite corners that the zero contour keeps apart (the mean of the
    corners is not negative): the outline has no material link across the cell."""
    n0, n1, n2, n3 = p0 < 0.0, p1 < 0.0, p2 < 0.0, p3 < 0.0
    return n0 == n2 and n1 == n3 and n0 != n1 and (p0 + p1 + p2 + p3) >= 0.0


@njit(cache=True)
def corner_area(p0, p1, p2, p3):
    """Area (share of the cell) where phi < 0, phi linear along the edges of a unit cell
    with corners (0,0), (1,0), (1,1), (0,1) of values p0..p3 (marching squares; a saddle is
    connected unless the mean of the corners is not negative)."""
    n0, n1, n2, n3 = p0 < 0.0, p1 < 0.0, p2 < 0.0, p3 < 0.0
    count = int(n0) + int(n1) + int(n2) + int(n3)
    if count == 0:
        return 0.0
    if count == 4:
        return 1.0
    if separated_saddle(p0, p1, p2, p3):  # two corner triangles
        area = 0.0
        ps = (p0, p1, p2, p3)
        for k in range(4):
            qk, qn, qp = ps[k], ps[(k + 1) % 4], ps[(k + 3) % 4]
            if qk < 0.0:
                area += 0.5 * (qk / (qk - qn)) * (qk / (qk - qp))
        return min(max(area, 0.0), 1.0)
    # polygon: the material corners and the edge crossings, counter-clockwise; the
    # shoelace sum is taken on the fly (no arrays: this runs once per cell)
    ps = (p0, p1, p2, p3)
    cx = (0.0, 1.0, 1.0, 0.0)
    cy = (0.0, 0.0, 1.0, 1.0)
    area = 0.0
    fx = fy = lx = ly = 0.0
    m = 0
    for k in range(4):
        kn = (k + 1) % 4
        pa, pb = ps[k], ps[kn]
        for part in range(2):
            if part == 0:
                if not pa < 0.0:
                    continue
                x, y = cx[k], cy[k]
            else:
                if (pa < 0.0) == (pb < 0.0):
                    continue
                t = _crossing(pa, pb)
                x = cx[k] + t * (cx[kn] - cx[k])
                y = cy[k] + t * (cy[kn] - cy[k])
            if m == 0:
                fx, fy = x, y
            else:
                area += lx * y - x * ly
            lx, ly = x, y
            m += 1
    area += lx * fy - fx * ly
    return min(max(0.5 * abs(area), 0.0), 1.0)


@njit(cache=True, parallel=True)
def corner_areas(corners, out):
    """out[e] = corner_area of row e of ``corners`` (n, 4)."""
    for e in prange(corners.shape[0]):
        out[e] = corner_area(corners[e, 0], corners[e, 1], corners[e, 2], corners[e, 3])


@njit(cache=True, parallel=True)
def cell_areas(phi_flat, cell_nodes, frac, stiff):
    """Area fraction of every cell (``frac``) and the stiffness fraction (``stiff``: the same,
    but 0 in a separated saddle cell) from the nodal phi."""
    for e in prange(cell_nodes.shape[0]):
        p0 = phi_flat[cell_nodes[e, 0]]
        p1 = phi_flat[cell_nodes[e, 1]]
        p2 = phi_flat[cell_nodes[e, 2]]
        p3 = phi_flat[cell_nodes[e, 3]]
        a = corner_area(p0, p1, p2, p3)
        frac[e] = a
        stiff[e] = 0.0 if separated_saddle(p0, p1, p2, p3) else a


@njit(cache=True, inline="always")
def normal_speed(w, lam, vscale):
    """The level set's normal velocity at one node: the smoothed shape sensitivity ``w``
    (strain-energy density) less the volume multiplier ``lam``, over the running scale
    ``vscale``, clipped to [-1, 1] (positive moves the boundary outward, into void).
    The one definition: the update and the volume control both call it."""
    v = (w - lam) / vscale
    return min(max(v, -1.0), 1.0)


@njit(cache=True, parallel=True)
def normal_speeds(ws, lam, vscale, out):
    """``normal_speed`` of every node of the flat array ``ws`` into ``out``."""
    for k in prange(ws.shape[0]):
        out[k] = normal_speed(ws[k], lam, vscale)


@njit(cache=True, parallel=True)
def trial_area_sum(lam, vscale, step, phi, ws, grow, shrink, solid, empty, cell_nodes, band, trial, partial):
    """Sum of the areas of the cells ``band`` (indices into ``cell_nodes``) after one
    linearized update with multiplier ``lam``: every node takes phi - step * (max(v, 0)
    grow + min(v, 0) shrink), v = normal_speed(ws, lam, vscale), clamped to the keep
    regions (flat node arrays). ``trial`` (one per node) and ``partial``
    (n_chunks(band.size)) are work arrays. (A node pass first, then the cells: computing
    the corners inside the cell loop repeats each node's division four times, 2.7x
    slower at 1.28M cells.)"""
    n = phi.shape[0]
    for k in prange(n):
        v = normal_speed(ws[k], lam, vscale)
        t = phi[k] - step * (max(v, 0.0) * grow[k] + min(v, 0.0) * shrink[k])
        trial[k] = max(min(t, solid[k]), -empty[k])
    nb = band.shape[0]
    n_part = partial.shape[0]
    for c in prange(n_part):
        s = 0.0
        for b in range(c * CHUNK, min((c + 1) * CHUNK, nb)):
            e = band[b]
            s += corner_area(trial[cell_nodes[e, 0]], trial[cell_nodes[e, 1]], trial[cell_nodes[e, 2]],
                             trial[cell_nodes[e, 3]])
        partial[c] = s
    total = 0.0
    for c in range(n_part):
        total += partial[c]
    return total


@njit(cache=True, inline="always")
def _differences(phi, pair_x, pair_y, h, i, j, ny, nx):
    """One-sided differences at node (i, j); 0 towards a missing neighbour."""
    c = phi[i, j]
    dxm = (c - phi[i, j - 1]) / h * pair_x[i, j - 1] if j > 0 else 0.0
    dxp = (phi[i, j + 1] - c) / h * pair_x[i, j] if j < nx - 1 else 0.0
    dym = (c - phi[i - 1, j]) / h * pair_y[i - 1, j] if i > 0 else 0.0
    dyp = (phi[i + 1, j] - c) / h * pair_y[i, j] if i < ny - 1 else 0.0
    return dxm, dxp, dym, dyp


@njit(cache=True, inline="always")
def _grow(dxm, dxp, dym, dyp):
    """Godunov upwind |grad phi| for an outward speed, summed in the order of the array
    version it replaced: max(dxm,0)^2 + min(dxp,0)^2 + max(dym,0)^2 + min(dyp,0)^2."""
    a = max(dxm, 0.0)
    b = min(dxp, 0.0)
    e = max(dym, 0.0)
    f = min(dyp, 0.0)
    return math.sqrt(((a * a + b * b) + e * e) + f * f)


@njit(cache=True, inline="always")
def _shrink(dxm, dxp, dym, dyp):
    """The same for an inward speed (max and min swapped)."""
    a = min(dxm, 0.0)
    b = max(dxp, 0.0)
    e = min(dym, 0.0)
    f = max(dyp, 0.0)
    return math.sqrt(((a * a + b * b) + e * e) + f * f)


@njit(cache=True, parallel=True)
def upwind_norms(phi, pair_x, pair_y, h, grow, shrink):
    """Fill ``grow`` and ``shrink`` with the upwind norms of phi (node arrays)."""
    ny, nx = phi.shape
    for i in prange(ny):
        for j in range(nx):
            dxm, dxp, dym, dyp = _differences(phi, pair_x, pair_y, h, i, j, ny, nx)
            grow[i, j] = _grow(dxm, dxp, dym, dyp)
            shrink[i, j] = _shrink(dxm, dxp, dym, dyp)


@njit(cache=True, parallel=True)
def upwind_step(old, new, vp, vm, pair_x, pair_y, h, dt):
    """One explicit upwind step of phi_t + V |grad phi| = 0: new = old - dt (vp grow +
    vm shrink), vp = max(V, 0), vm = min(V, 0) (zero off the domain). A node needs only
    the norm its speed's sign selects; the other term is 0 * 0, as in the array version."""
    ny, nx = old.shape
    for i in prange(ny):
        for j in range(nx):
            p, q = vp[i, j], vm[i, j]
            if p == 0.0 and q == 0.0:
                new[i, j] = old[i, j]
                continue
            dxm, dxp, dym, dyp = _differences(old, pair_x, pair_y, h, i, j, ny, nx)
            g = _grow(dxm, dxp, dym, dyp) if p != 0.0 else 0.0
            s = _shrink(dxm, dxp, dym, dyp) if q != 0.0 else 0.0
            new[i, j] = old[i, j] - (p * g + q * s) * dt


@njit(cache=True, parallel=True)
def near_cells(phi_flat, cell_nodes, reach, out):
    """out[e] = True where some corner of cell e has |phi| <= reach."""
    for e in prange(cell_nodes.shape[0]):
        m = abs(phi_flat[cell_nodes[e, 0]])
        for k in range(1, 4):
            m = min(m, abs(phi_flat[cell_nodes[e, k]]))
        out[e] = m <= reach


def n_chunks(n_cells: int) -> int:
    """Partial sums that trial_area_sum needs for ``n_cells`` cells."""
    return max(1, -(-n_cells // CHUNK))
