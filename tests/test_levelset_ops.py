"""Level-set operators checked against closed forms and reference libraries.

References (named again beside each check): analytic signed distances of a circle and a
square; contourpy (the filled-contour library, marching squares) for cut-cell areas;
shapely/GEOS for polygon clipping; the Helmholtz filter -r^2 lap(v) + v = f (Lazarov and
Sigmund 2011, Int. J. Numer. Meth. Engng 86:765-781) and its Fourier response
1 / (1 + r^2 k^2); the Hamilton-Jacobi level-set equation phi_t + V |grad phi| = 0 (Osher
and Sethian 1988, J. Comput. Phys. 79:12-49), whose zero contour moves at normal speed V.
"""
from __future__ import annotations

import numpy as np
import pytest
import shapely
from conftest import plate_problem, rectangle
from contourpy import FillType, contour_generator
from shapely.geometry import Point, Polygon, box

from levelform.levelset.operators import LevelSetGrid, cell_fraction, normal_velocity


# ---------------------------------------------------------------------------------------
# helpers
# ---------------------------------------------------------------------------------------
def grid_arrays(active):
    """cell_nodes (n_cells, 4) in local order (CCW from lower left) and node_active for an
    (ny, nx) boolean cell mask; node (i, j) has flat index j (nx + 1) + i."""
    ny, nx = active.shape
    jj, ii = np.nonzero(active)
    n0 = jj * (nx + 1) + ii
    cell_nodes = np.stack([n0, n0 + 1, n0 + nx + 2, n0 + nx + 1], axis=1)
    node_active = np.zeros((ny + 1) * (nx + 1), bool)
    node_active[cell_nodes.ravel()] = True
    return cell_nodes, node_active.reshape(ny + 1, nx + 1)


def full_grid(nx, ny, h, smoothing):
    cell_nodes, node_active = grid_arrays(np.ones((ny, nx), bool))
    X, Y = np.meshgrid(h * np.arange(nx + 1), h * np.arange(ny + 1))
    return LevelSetGrid(node_active, cell_nodes, h, smoothing), X, Y


def square_sdf(X, Y, cx, cy, a):
    """Exact signed distance to the square of half side a centred at (cx, cy)."""
    dx, dy = np.abs(X - cx) - a, np.abs(Y - cy) - a
    return np.hypot(np.maximum(dx, 0.0), np.maximum(dy, 0.0)) + np.minimum(np.maximum(dx, dy), 0.0)


def shapely_sdf(geom, X, Y):
    """Signed distance to a shapely area (negative inside), straight from GEOS."""
    pts = shapely.points(X.ravel(), Y.ravel())
    d = shapely.distance(geom.boundary, pts).reshape(X.shape)
    return np.where(shapely.contains_xy(geom, X.ravel(), Y.ravel()).reshape(X.shape), -d, d)


# ---------------------------------------------------------------------------------------
# a. reinitialization
# ---------------------------------------------------------------------------------------
def test_reinitialize_circle_matches_analytic_distance():
    h = 0.25
    lg, X, Y = full_grid(80, 80, h, 2 * h)
    cx, cy, r = 10.1, 9.7, 6.3
    phi = (X - cx) ** 2 + (Y - cy) ** 2 - r**2  # same zero contour, not a distance
    d = lg.reinitialize(phi)
    exact = np.hypot(X - cx, Y - cy) - r  # analytic signed distance to a circle
    band = np.abs(exact) <= 3 * h
    err = np.abs(d - exact)[band]
    assert err.max() < 0.5 * h  # measured 0.26 h (mean 0.04 h)
    assert np.all(np.sign(d[band]) == np.sign(exact[band]))  # the zero contour stays put


def test_reinitialize_square_matches_analytic_distance_off_corners():
    h = 0.25
    lg, X, Y = full_grid(80, 80, h, 2 * h)
    cx, cy, a = 10.1, 9.7, 5.3  # edges between grid lines
    phi = np.maximum(np.abs(X - cx), np.abs(Y - cy)) ** 2 - a**2  # not a distance
    d = lg.reinitialize(phi)
    exact = square_sdf(X, Y, cx, cy, a)
    # Band of 3h, only where the nearest boundary point lies on an edge at least 3h from
    # a corner: at convex corners the distance is a circular fan and fast marching is
    # first order there (measured 0.36 h including corners).
    band = (np.abs(exact) <= 3 * h) & (np.minimum(np.abs(X - cx), np.abs(Y - cy)) < a - 3 * h)
    err = np.abs(d - exact)[band]
    assert err.max() < 0.1 * h  # measured 0.037 h along straight edges


# ---------------------------------------------------------------------------------------
# b. Hamilton-Jacobi transport
# ---------------------------------------------------------------------------------------
@pytest.mark.parametrize("speed", [1.0, -1.0])
@pytest.mark.parametrize("reinit", [False, True])
def test_advect_moves_circle_at_set_speed(speed, reinit):
    # phi_t + V |grad phi| = 0 moves the zero contour along its normal at speed V (Osher
    # and Sethian 1988). With phi < 0 inside, V > 0 grows the material disc: r -> r + V s.
    h = 0.25
    lg, X, Y = full_grid(80, 80, h, 2 * h)
    cx, cy, r = 10.1, 9.7, 6.3
    phi = np.hypot(X - cx, Y - cy) - r

    def radius(p):  # from the material area, pi r^2
        return np.sqrt(lg.fractions(p).sum() * h * h / np.pi)

    r0 = radius(phi)
    assert r0 == pytest.approx(r, rel=0.01)
    step, calls = 2 * h, 3
    for _ in range(calls):
        phi = lg.advect(phi, np.full(phi.shape, speed), step)
        if reinit:
            phi = lg.reinitialize(phi)
    moved = radius(phi) - r0
    # Measured: within 1.2 % of the set travel (6 cells) in all four variants.
    assert moved == pytest.approx(speed * calls * step, rel=0.05)


def test_advect_zero_speed_or_travel_is_identity():
    h = 0.5
    lg, X, Y = full_grid(10, 10, h, h)
    phi = np.hypot(X - 2.0, Y - 2.5) - 1.2
    np.testing.assert_array_equal(lg.advect(phi, np.zeros(phi.shape), 3.0), phi)
    np.testing.assert_array_equal(lg.advect(phi, np.ones(phi.shape), 0.0), phi)


def godunov_step(phi, speed, active, h, dt):
    """One explicit step of phi_t + V |grad phi| = 0 with the Godunov upwind Hamiltonian of
    Osher and Sethian (1988, eq. 2.33; Sethian 1999, Level Set Methods and Fast Marching
    Methods, sec. 6.4), written out plainly on padded arrays: a one-sided difference to a
    node off the domain is zero (zero-gradient edge condition)."""
    p = np.pad(phi, 1, mode="edge")
    m = np.pad(active, 1, constant_values=False)
    c = p[1:-1, 1:-1]
    ok = lambda nb: m[1:-1, 1:-1] & nb  # noqa: E731
    dxm = np.where(ok(m[1:-1, :-2]), (c - p[1:-1, :-2]) / h, 0.0)
    dxp = np.where(ok(m[1:-1, 2:]), (p[1:-1, 2:] - c) / h, 0.0)
    dym = np.where(ok(m[:-2, 1:-1]), (c - p[:-2, 1:-1]) / h, 0.0)
    dyp = np.where(ok(m[2:, 1:-1]), (p[2:, 1:-1] - c) / h, 0.0)
    grow = np.sqrt(np.maximum(dxm, 0) ** 2 + np.minimum(dxp, 0) ** 2 + np.maximum(dym, 0) ** 2
                   + np.minimum(dyp, 0) ** 2)
    shrink = np.sqrt(np.minimum(dxm, 0) ** 2 + np.maximum(dxp, 0) ** 2 + np.minimum(dym, 0) ** 2
                     + np.maximum(dyp, 0) ** 2)
    v = np.where(active, speed, 0.0)
    return phi - dt * (np.maximum(v, 0) * grow + np.minimum(v, 0) * shrink)


def test_advect_equals_the_godunov_upwind_scheme_written_out():
    # The compiled sub-steps against the textbook scheme on an L-shaped domain with a hole
    # (missing neighbours on re-entrant corners and inner edges), speeds of both signs.
    h = 0.5
    lg, _ = l_shaped_grid(h, h)
    ny1, nx1 = lg.shape
    rng = np.random.default_rng(7)
    Y, X = np.mgrid[0:ny1, 0:nx1] * h
    phi = np.sin(0.4 * X) * np.cos(0.3 * Y) * 3.0 + 0.05 * rng.standard_normal(X.shape)
    speed = np.clip(1.4 * np.sin(0.2 * X + 0.25 * Y), -1.0, 1.0)
    travel = 3.3 * h
    n_sub = int(np.ceil(travel * np.abs(speed[lg.node_active]).max() / (0.5 * h)))
    ref = phi.copy()
    for _ in range(n_sub):
        ref = godunov_step(ref, speed, lg.node_active, h, travel / n_sub)
    got = lg.advect(phi, speed, travel)
    a = lg.node_active
    np.testing.assert_allclose(got[a], ref[a], rtol=0, atol=1e-13)
    np.testing.assert_array_equal(got[~a], phi[~a])  # off the domain nothing moves
    grow, shrink = lg.upwind_norms(phi)
    one = godunov_step(phi, np.ones(phi.shape), a, h, 1.0)
    np.testing.assert_allclose(grow[a], (phi - one)[a], rtol=0, atol=1e-13)
    one = godunov_step(phi, -np.ones(phi.shape), a, h, 1.0)
    np.testing.assert_allclose(shrink[a], (one - phi)[a], rtol=0, atol=1e-13)


def test_compiled_loops_give_the_same_bits_on_one_thread_and_on_all():
    # Parallel loops write only their own entries and sum over fixed chunks: the thread
    # count must not change a result (a run is reproducible on any machine).
    import numba

    from levelform.levelset import kernels

    h = 0.5
    lg, _ = l_shaped_grid(h, 4 * h)
    Y, X = np.mgrid[0 : lg.shape[0], 0 : lg.shape[1]] * h
    phi = np.sin(0.37 * X) * np.cos(0.29 * Y) * 2.0 + 0.3
    speed = np.clip(np.cos(0.21 * X - 0.17 * Y), -1, 1)
    n_cells = lg.cell_nodes.shape[0]
    local = np.ascontiguousarray(lg.cell_nodes)
    flat = np.ascontiguousarray(phi.ravel())
    ones = np.ones(flat.size)

    def everything():
        frac, stiff = lg.fractions_and_stiffness(phi)
        area = kernels.trial_area_sum(0.1, 1.3, 2 * h, flat, flat * 0.7, ones, ones, ones * 9, ones * 9, local,
                                      np.arange(n_cells), np.empty(flat.size), np.empty(kernels.n_chunks(n_cells)))
        return lg.advect(phi, speed, 4 * h), frac, stiff, area

    before = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        one = everything()
        numba.set_num_threads(numba.config.NUMBA_NUM_THREADS)
        many = everything()
    finally:
        numba.set_num_threads(before)
    for x, y in zip(one, many):
        np.testing.assert_array_equal(x, y)


def test_volume_control_trial_areas_equal_the_areas_of_the_trial_level_set():
    # The multiplier's compiled evaluation (kernels.trial_area_sum) against the cut-cell
    # areas (checked against contourpy above) of the linearized update written out.
    from levelform.levelset import kernels

    h = 0.5
    lg, _ = l_shaped_grid(h, 4 * h)
    Y, X = np.mgrid[0 : lg.shape[0], 0 : lg.shape[1]] * h
    phi = np.sin(0.37 * X) * np.cos(0.29 * Y) * 2.0 + 0.3
    ws = np.cos(0.11 * X + 0.23 * Y) + 0.2
    grow, shrink = lg.upwind_norms(phi)
    solid = np.hypot(X - 4.0, Y - 4.0) - 1.5  # a keep-solid disc
    empty = np.full(phi.shape, 1e9)
    band = np.flatnonzero(np.arange(lg.cell_nodes.shape[0]) % 3 != 0)  # any subset of cells
    for lam, vscale, step in [(0.1, 1.3, 2 * h), (-0.4, 0.5, 3 * h), (0.9, 2.0, h)]:
        v = normal_velocity(ws, lam, vscale)  # the one velocity formula, checked on its own below
        trial = phi - step * (np.maximum(v, 0.0) * grow + np.minimum(v, 0.0) * shrink)
        trial = np.maximum(np.minimum(trial, solid), -empty)
        ref = cell_fraction(trial.ravel()[lg.cell_nodes[band]]).sum()
        got = kernels.trial_area_sum(lam, vscale, step, phi.ravel(), ws.ravel(), grow.ravel(), shrink.ravel(),
                                     solid.ravel(), empty.ravel(), lg.cell_nodes, band, np.empty(phi.size),
                                     np.empty(kernels.n_chunks(band.size)))
        assert got == pytest.approx(ref, rel=1e-13)


def test_normal_velocity_is_the_clipped_scaled_sensitivity():
    # V = (w - lambda) / scale clipped to [-1, 1] (docs/method.md): values worked by hand.
    ws = np.array([[0.0, 1.0, 5.0], [-9.0, 2.0, 1.5]])
    got = normal_velocity(ws, 1.0, 2.0)
    assert got.shape == ws.shape
    assert got.tolist() == [[-0.5, 0.0, 1.0], [-1.0, 0.5, 0.25]]


def test_narrow_band_reinitialization_keeps_the_full_march_inside_the_band():
    # Inside the band the values are those of the full march (which test (a) checks against
    # the analytic circle distance); beyond it +-band with the sign kept; extend_distance
    # puts the full march back there and leaves the band alone.
    h = 0.25
    lg, X, Y = full_grid(80, 80, h, 2 * h)
    cx, cy, r = 10.1, 9.7, 4.3
    phi = (X - cx) ** 2 + (Y - cy) ** 2 - r**2
    full = lg.reinitialize(phi)
    band = 6 * h
    narrow = lg.reinitialize(phi, band=band)
    inside = np.abs(full) < band - h
    assert 0.1 < inside.mean() < 0.5  # the band is really narrower than the grid
    np.testing.assert_array_equal(narrow[inside], full[inside])
    beyond = np.abs(full) > band + h
    np.testing.assert_array_equal(narrow[beyond], np.sign(phi[beyond]) * band)
    exact = np.hypot(X - cx, Y - cy) - r  # analytic signed distance to a circle
    ext = lg.extend_distance(narrow, band)
    np.testing.assert_array_equal(ext[np.abs(narrow) < band], narrow[np.abs(narrow) < band])
    assert np.abs(ext - exact).max() < 0.5 * h  # a distance everywhere again (full march: 0.26 h)


def test_narrow_band_reinitialization_in_strips_equals_one_march(monkeypatch):
    # The march runs in column strips widened by the band (levelset._narrow_march); on a
    # domain with a re-entrant corner and a hole, strips of 12 columns (the widening then
    # makes them fewer and wider) and one march must agree closely, with the same nodes
    # beyond the band. One strip holds no boundary at all.
    from levelform.levelset import operators as lsmod

    h = 0.5
    active = np.ones((60, 160), bool)
    active[30:, 100:] = False
    active[10:20, 20:30] = False
    cell_nodes, node_active = grid_arrays(active)
    lg = LevelSetGrid(node_active, cell_nodes, h, 2 * h)
    Y, X = np.mgrid[0 : lg.shape[0], 0 : lg.shape[1]] * h
    phi = np.minimum(np.hypot(X - 15.0, Y - 12.0) - 6.0, np.hypot(X - 38.0, Y - 20.0) - 4.0)
    phi = phi * (1.0 + 0.2 * np.sin(X))  # same zero contour, not a distance
    band = 3.0
    one = lg.reinitialize(phi, band=band)
    monkeypatch.setattr(lsmod, "REINIT_STRIP_COLUMNS", 12)
    strips = lg.reinitialize(phi, band=band)
    a = lg.node_active
    assert np.all(np.abs(one[a][X[a] > 60.0]) == band)  # the right strips see no boundary
    # measured 1.3e-8 h: the strips accept nodes of equal distance in another order
    np.testing.assert_allclose(strips[a], one[a], rtol=0, atol=1e-6 * h)
    np.testing.assert_array_equal(np.abs(strips[a]) == band, np.abs(one[a]) == band)


def separated_saddles(corner_phi):
    """The rule written out: material in two opposite corners and a corner mean that is not
    negative (contourpy then draws two separate corner pieces; see the contourpy check)."""
    neg = corner_phi < 0.0
    saddle = (neg[:, 0] == neg[:, 2]) & (neg[:, 1] == neg[:, 3]) & (neg[:, 0] != neg[:, 1])
    return saddle & (corner_phi.mean(axis=1) >= 0.0)


def test_stiffness_fraction_is_the_area_except_in_separated_saddles():
    rng = np.random.default_rng(3)
    cell_nodes, node_active = grid_arrays(np.ones((30, 40), bool))
    lg = LevelSetGrid(node_active, cell_nodes, 1.0, 1.0)
    phi = rng.standard_normal(node_active.shape)
    frac, stiff = lg.fractions_and_stiffness(phi)
    corners = phi.ravel()[cell_nodes]
    apart = separated_saddles(corners)
    assert 10 < apart.sum()
    np.testing.assert_array_equal(frac, cell_fraction(corners))
    np.testing.assert_array_equal(stiff, np.where(apart, 0.0, frac))


# ---------------------------------------------------------------------------------------
# c. cut-cell fractions
# ---------------------------------------------------------------------------------------
def contourpy_cell_areas(z):
    """Area of {z < 0} in each unit cell from contourpy's filled contours, one chunk per
    cell; polygons are closed rings (outer CCW, holes CW), so signed shoelace areas add."""
    ny, nx = z.shape[0] - 1, z.shape[1] - 1
    cg = contour_generator(np.arange(nx + 1.0), np.arange(ny + 1.0), z, name="serial",
                           fill_type=FillType.ChunkCombinedOffset, chunk_size=1)
    assert cg.chunk_count == (ny, nx)
    points, offsets = cg.filled(float(z.min()) - 1.0, 0.0)
    out = np.zeros(len(points))
    for k, (p, o) in enumerate(zip(points, offsets)):
        if p is None:
            continue
        for a, b in zip(o[:-1], o[1:]):
            x, y = p[a:b, 0], p[a:b, 1]
            out[k] += 0.5 * np.sum(x[:-1] * y[1:] - x[1:] * y[:-1])
    return out.reshape(ny, nx)  # chunks run along x first, then y


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_cell_fraction_equals_contourpy_filled_area(seed):
    rng = np.random.default_rng(seed)
    ny, nx = 30, 40
    z = rng.standard_normal((ny + 1, nx + 1))  # random fields: many saddle cells
    cell_nodes, _ = grid_arrays(np.ones((ny, nx), bool))
    corners = z.ravel()[cell_nodes]
    frac = cell_fraction(corners).reshape(ny, nx)
    neg = corners < 0
    saddles = (neg[:, 0] == neg[:, 2]) & (neg[:, 1] == neg[:, 3]) & (neg[:, 0] != neg[:, 1])
    assert saddles.sum() > 50  # the saddle rule is really exercised (~150 per field)
    np.testing.assert_allclose(frac, contourpy_cell_areas(z), rtol=0, atol=1e-10)  # contourpy


def test_cell_fraction_exact_for_linear_fields():
    # phi = a x + b y + c is linear, so its zero set in the cell is a straight cut; the
    # reference is the unit square clipped by the half-plane {phi < 0} in GEOS (shapely).
    rng = np.random.default_rng(5)
    n = 400
    a, b = rng.normal(size=(2, n))
    c = rng.uniform(-1.5, 1.5, n)
    xy = np.array([[0.0, 0.0], [1.0, 0.0], [1.0, 1.0], [0.0, 1.0]])  # local order
    corners = a[:, None] * xy[:, 0] + b[:, None] * xy[:, 1] + c[:, None]
    frac = cell_fraction(corners)
    unit = box(0.0, 0.0, 1.0, 1.0)
    ref = np.empty(n)
    for k in range(n):
        nrm = np.hypot(a[k], b[k])
        nvec = np.array([a[k], b[k]]) / nrm
        tvec = np.array([-nvec[1], nvec[0]])
        p0 = -c[k] / nrm * nvec  # a point on the line phi = 0
        R = 10.0 + abs(c[k] / nrm)
        half = Polygon([p0 + R * tvec, p0 - R * tvec, p0 - R * tvec - R * nvec, p0 + R * tvec - R * nvec])
        ref[k] = unit.intersection(half).area
    assert 0 < np.sum((ref > 0) & (ref < 1)) < n  # both cut and uncut cells present
    np.testing.assert_allclose(frac, ref, rtol=0, atol=1e-12)
    # Two hand cases: a cut through the middle (1/2) and a corner triangle (1/8).
    np.testing.assert_allclose(cell_fraction(np.array([[-1.0, 1.0, 1.0, -1.0], [-0.5, 0.5, 1.5, 0.5]])),
                               [0.5, 0.125], rtol=0, atol=1e-15)


# ---------------------------------------------------------------------------------------
# d. Helmholtz smoothing
# ---------------------------------------------------------------------------------------
def cosine_response(lg, X, nx, ny, h, waves):
    """Smooth the cell means of cos(k x), k = waves pi / (nx h); returns k, the smoothed
    nodal field and its least-squares gain on cos(k x)."""
    k = waves * np.pi / (nx * h)
    jj, ii = np.nonzero(np.ones((ny, nx), bool))
    c = (np.sin(k * (ii + 1) * h) - np.sin(k * ii * h)) / (k * h)  # cell means of cos(k x)
    v = lg.smooth_cells(c)
    gain = np.linalg.lstsq(np.cos(k * X).reshape(-1, 1), v.reshape(-1), rcond=None)[0][0]
    return k, v, gain


def l_shaped_grid(h, r):
    """An L-shaped domain with an interior hole, so the natural boundary condition acts on
    re-entrant corners and inner edges too."""
    active = np.ones((30, 40), bool)
    active[15:, 20:] = False
    active[5:9, 5:9] = False
    cell_nodes, node_active = grid_arrays(active)
    return LevelSetGrid(node_active, cell_nodes, h, r), active


def test_smoother_preserves_constants_and_integral():
    h, r = 0.5, 1.0
    lg, active = l_shaped_grid(h, r)
    na = lg.node_active
    n = int(active.sum())
    # (r^2 K + M) v = M c: K annihilates constants, and M 1 equals the load vector of a
    # cell-wise constant 1 (rows of the Q4 mass matrix sum to h^2/4 per cell), so a
    # constant comes back unchanged.
    v = lg.smooth_cells(np.full(n, 3.7))
    np.testing.assert_allclose(v[na], 3.7, rtol=1e-13)
    assert np.all(v[~na] == 0.0)
    # Integral. Summing the equations (multiplying by 1^T): 1^T K = 0 with the natural
    # boundary condition, and 1^T M = (M 1)^T = node_area, so
    # sum_nodes node_area v = 1^T M v = sum_cells h^2 c exactly. The same number is the FE
    # integral of the bilinear interpolant (mean of the four corners times h^2 per cell);
    # both weightings are exact, and they are the same sum.
    c = np.random.default_rng(0).random(n)
    v = lg.smooth_cells(c)
    cell_integral = c.sum() * h * h
    assert float(lg.node_area @ v[na]) == pytest.approx(cell_integral, rel=1e-10)
    fe_integral = v.ravel()[lg.cell_nodes].mean(axis=1).sum() * h * h
    assert fe_integral == pytest.approx(cell_integral, rel=1e-10)
    assert lg.node_area.sum() == pytest.approx(n * h * h, rel=1e-14)


@pytest.mark.parametrize("domain", ["rectangle", "l_shape"])
def test_smoother_damps_checkerboard(domain):
    h = 0.5
    r = 2 * h
    if domain == "rectangle":
        active = np.ones((30, 40), bool)
        cell_nodes, node_active = grid_arrays(active)
        lg = LevelSetGrid(node_active, cell_nodes, h, r)
    else:
        lg, active = l_shaped_grid(h, r)
    jj, ii = np.nonzero(active)
    chk = np.where((ii + jj) % 2 == 0, 1.0, -1.0)  # amplitude 1
    v = lg.smooth_cells(chk)
    cell_mean = v.ravel()[lg.cell_nodes].mean(axis=1)  # the smoothed field back on cells
    # Damping measured as the largest cell mean of the smoothed field: 0.052 (95 %).
    # (Single nodes at convex domain corners, which see one cell only, keep 0.117.)
    assert np.abs(cell_mean).max() < 0.1
    # RMS over nodes, measured 0.0075 (rectangle) and 0.010 (L-shape): > 98 % damping.
    assert np.sqrt(np.mean(v[lg.node_active] ** 2)) < 0.02


@pytest.mark.parametrize("r_cells", [1.0, 2.0, 4.0])
@pytest.mark.parametrize("waves", [2, 4, 8])
def test_smoother_matches_helmholtz_fourier_response(r_cells, waves):
    # -r^2 v'' + v = cos(k x) with v' = 0 at both ends (k = m pi / L) has the exact
    # solution cos(k x) / (1 + r^2 k^2) (Lazarov and Sigmund 2011 filter equation).
    h = 0.25
    nx, ny = 80, 6
    lg, X, Y = full_grid(nx, ny, h, r_cells * h)
    k, v, gain = cosine_response(lg, X, nx, ny, h, waves)
    # Wavelengths of 20-80 cells: discretization error measured at most 0.5 %.
    assert gain == pytest.approx(1.0 / (1.0 + (r_cells * h * k) ** 2), rel=0.01)
    assert np.abs(v - gain * np.cos(k * X)).max() < 0.01  # the mode stays a cosine in x


@pytest.mark.parametrize("waves", [2, 5])
def test_smoother_on_a_coarsened_grid_keeps_the_fourier_response_and_constants(waves):
    # A smoothing length of 40 cells: the filter runs on a grid coarsened 2 x 2 (it still
    # spans 20 coarse cells) and must keep the closed-form response cos(k x) / (1 + r^2 k^2)
    # (Lazarov and Sigmund 2011), on an odd number of cells so coarse cells overhang.
    h = 0.25
    nx, ny = 161, 9
    r = 40 * h
    lg, X, Y = full_grid(nx, ny, h, r)
    assert lg.smoothing_coarsening == 2
    k, v, gain = cosine_response(lg, X, nx, ny, h, waves)
    assert gain == pytest.approx(1.0 / (1.0 + (r * k) ** 2), rel=0.02)
    assert np.abs(v - gain * np.cos(k * X)).max() < 0.02 * max(gain, 0.05)
    # constants come back unchanged (mean restriction, consistent load, bilinear prolongation)
    np.testing.assert_allclose(lg.smooth_cells(np.full(nx * ny, 2.5))[lg.node_active], 2.5, rtol=1e-12)


# ---------------------------------------------------------------------------------------
# e. clamp: union with keep-solid, minus keep-empty
# ---------------------------------------------------------------------------------------
def test_clamp_union_and_difference_of_two_circles():
    h = 0.125
    lg, X, Y = full_grid(96, 80, h, h)
    (ax, ay, ra), (bx, by, rb) = (5.0, 5.0, 3.0), (8.1, 5.4, 2.2)
    dA = np.hypot(X - ax, Y - ay) - ra  # design: material disc A
    dB = np.hypot(X - bx, Y - by) - rb  # the other disc B
    inf = np.full(X.shape, np.inf)
    # Reference: signed distance to the exact union / difference built in GEOS from
    # 1024-gons (polygon error ~r (1 - cos(pi/1024)) < 2e-5 here).
    A = Point(ax, ay).buffer(ra, quad_segs=256)
    B = Point(bx, by).buffer(rb, quad_segs=256)
    # Circle intersection points, where the min/max construction has its kinks.
    ip = shapely.get_coordinates(A.boundary.intersection(B.boundary))
    assert ip.shape[0] == 2
    far_from_kinks = np.min(np.hypot(X[..., None] - ip[:, 0], Y[..., None] - ip[:, 1]), axis=-1) > 3 * h
    tol = 1e-4
    for name, got, geom in [
        ("union", lg.clamp(dA, dB, inf), A.union(B)),  # keep-solid B
        ("difference", lg.clamp(dA, inf, dB), A.difference(B)),  # keep-empty B
    ]:
        ref = shapely_sdf(geom, X, Y)
        clear = np.abs(ref) > tol
        # Same material set (phi < 0 exactly where the analytic shape is).
        assert np.all(np.sign(got[clear]) == np.sign(ref[clear])), name
        # min/max of distances never overstates the distance (a distance bound; Hart 1996,
        # The Visual Computer 12:527-545).
        assert np.all(np.abs(got) <= np.abs(ref) + tol), name
        # Exact near the boundary away from the two kinks.
        near = (np.abs(ref) < 2 * h) & far_from_kinks
        np.testing.assert_allclose(got[near], ref[near], rtol=0, atol=tol, err_msg=name)
    # Outside a union the distance is exactly the smaller of the two distances.
    union_ref = shapely_sdf(A.union(B), X, Y)
    out = union_ref > tol
    np.testing.assert_allclose(lg.clamp(dA, dB, inf)[out], union_ref[out], rtol=0, atol=tol)
    # Keep-empty wins over keep-solid where they overlap: B both kept solid and kept empty
    # leaves B void.
    both = lg.clamp(dA, dB, dB)
    assert np.all(both[dB < -tol] > 0.0)


def test_narrow_band_reinitialization_does_not_change_a_run(monkeypatch):
    # The loop marches only reinit_band(...) from the boundary (docs/performance.md); a run
    # must give the compliance history and outline of full marches (to rounding). A plate
    # with a lattice of holes at a cell of 0.5: distances reach well past the band.
    from levelform.methods import levelset_method as method
    from levelform.spec import Load, Support

    problem = plate_problem(
        rectangle(0, 0, 90, 45), 0.5,
        (Support("segment", ((0, 0), (0, 45)), "x", pad=False), Support("point", (90, 0), "y", pad=False)),
        (Load("point", (0.0, 45.0), (0.0, -1.0)),),
        method={"pads": False, "solver": "direct", "iterations": 12, "initial_holes": True, "hole_spacing": 30.0},
        name="band-test",
    )
    clipped = []
    narrow_march = LevelSetGrid.reinitialize

    def spy(self, phi, band=None):
        out = narrow_march(self, phi, band)
        if band is not None:
            clipped.append(float(np.mean(np.abs(out[self.node_active]) >= band)))
        return out

    monkeypatch.setattr(LevelSetGrid, "reinitialize", spy)
    banded = method.run(problem)
    # every march really stopped short of some nodes (measured 1-13 % of them)
    assert len(clipped) == 11 and min(clipped) > 0.005 and max(clipped) > 0.1
    monkeypatch.setattr(LevelSetGrid, "reinitialize", lambda self, phi, band=None: narrow_march(self, phi))
    full = method.run(problem)
    c_band = np.array([r.compliance for r in banded.history])
    c_full = np.array([r.compliance for r in full.history])
    np.testing.assert_allclose(c_band, c_full, rtol=1e-9, atol=0)
    assert banded.outline.symmetric_difference(full.outline).area < 1e-9 * full.outline.area
    # the result's level set is a distance everywhere, not clipped at the band
    a = ~np.isnan(full.phi)
    np.testing.assert_allclose(banded.phi[a], full.phi[a], rtol=0, atol=1e-6 * problem.domain.cell)
