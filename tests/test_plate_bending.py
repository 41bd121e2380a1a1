"""Reissner-Mindlin plate bending with the MITC4 element, checked against plate theory.

The element is assembled here on a uniform n x n grid of square cells with numpy/scipy
sparse (the grid model is not wired to plate bending yet). Node (i, j) is number
j * (n + 1) + i, at (i h, j h); its unknowns are 3 k, 3 k + 1, 3 k + 2 = (w, theta_x,
theta_y).
"""
from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from levelform.physics import restrained_rank
from levelform.physics.plate_bending import (
    PlateBending,
    displacement_shear_operator,
)

NU = 0.3


# ---------------------------------------------------------------- grid helpers (test only)
def plate_grid(n: int, h: float):
    """Node positions (N, 2), cell nodes (n^2, 4) counter-clockwise, cell dofs (n^2, 12)."""
    nn = n + 1
    i, j = np.meshgrid(np.arange(n), np.arange(n), indexing="xy")
    first = (j * nn + i).ravel()
    cell_nodes = np.stack([first, first + 1, first + nn + 1, first + nn], axis=1)
    edofs = (3 * cell_nodes[:, :, None] + np.arange(3)).reshape(-1, 12)
    X, Y = np.meshgrid(np.arange(nn) * h, np.arange(nn) * h, indexing="xy")
    return np.column_stack([X.ravel(), Y.ravel()]), cell_nodes, edofs


def assemble(KE: np.ndarray, edofs: np.ndarray, n_dof: int, scale=None) -> sp.csc_matrix:
    """K = sum_e scale_e KE scattered by the cell dofs."""
    s = np.ones(edofs.shape[0]) if scale is None else np.asarray(scale, float)
    rows = np.repeat(edofs, 12, axis=1).ravel()
    cols = np.tile(edofs, (1, 12)).ravel()
    vals = (s[:, None] * KE.ravel()[None, :]).ravel()
    return sp.csc_matrix((vals, (rows, cols)), shape=(n_dof, n_dof))


def cell_loads(edofs: np.ndarray, fe: np.ndarray, n_dof: int) -> np.ndarray:
    """Global load vector from the same cell load vector ``fe`` (12,) on every cell.
    (np.bincount rather than np.add.at: add.at with a broadcast value gave NaNs under
    numpy 2.4.6 here.)"""
    return np.bincount(edofs.ravel(), weights=np.tile(fe, edofs.shape[0]), minlength=n_dof)


def solve(K, F, fixed):
    """Displacements with the dofs in the boolean mask ``fixed`` held at zero; F (n_dof,)
    or (n_dof, k)."""
    free = ~fixed
    U = np.zeros(F.shape)
    U[free] = spla.splu(K[free][:, free].tocsc()).solve(F[free])
    return U


def square_plate(pb: PlateBending, n: int, a: float, q: float, edge: str, KE=None):
    """A square a x a plate under uniform pressure q on n x n cells; ``edge`` is
    "simply supported" (w and the rotation about the edge normal held: the hard simple
    support of the Navier solution) or "clamped". Returns (U, xy, edofs, h)."""
    h = a / n
    xy, _, edofs = plate_grid(n, h)
    n_dof = 3 * xy.shape[0]
    KE = pb.element_matrix(h) if KE is None else KE
    K = assemble(KE, edofs, n_dof)
    F = cell_loads(edofs, q * pb.pressure_load(h), n_dof)
    tol = 1e-9 * a
    on_x = (np.abs(xy[:, 0]) < tol) | (np.abs(xy[:, 0] - a) < tol)  # edges x = 0, a
    on_y = (np.abs(xy[:, 1]) < tol) | (np.abs(xy[:, 1] - a) < tol)  # edges y = 0, a
    fixed = np.zeros((xy.shape[0], 3), bool)
    fixed[on_x | on_y, 0] = True
    if edge == "clamped":
        fixed[on_x | on_y, 1:] = True
    else:
        # along x = const edges w = 0 forces dw/dy = theta_x = 0; along y = const, theta_y
        fixed[on_x, 1] = True
        fixed[on_y, 2] = True
    return solve(K, F, fixed.ravel()), xy, edofs, h


def centre_node(n: int) -> int:
    return (n // 2) * (n + 1) + n // 2


# ---------------------------------------------------------------- series solutions
def navier_centre_deflection(nu: float = NU, terms: int = 199) -> float:
    """alpha in w_max = alpha q a^4 / D for a simply supported square plate under uniform
    q: Navier double series (Timoshenko and Woinowsky-Krieger, Theory of Plates and Shells,
    1959, section 30), alpha = 16 / pi^6 sum_{m, n odd} (-1)^((m+n)/2 - 1) / (m n (m^2 +
    n^2)^2). Independent of nu."""
    m = np.arange(1, terms + 1, 2, dtype=float)
    M, N = np.meshgrid(m, m, indexing="ij")
    sign = (-1.0) ** ((M + N) / 2 - 1)
    return 16.0 / np.pi**6 * float(np.sum(sign / (M * N * (M**2 + N**2) ** 2)))


def mindlin_centre_deflection(a_over_t: float, nu: float = NU, k: float = 5 / 6, terms: int = 399) -> float:
    """w_max D / (q a^4) for the same plate in Reissner-Mindlin theory (hard simple support).

    Derivation (stated here, our own): the equilibrium equations div Q + q = 0 and
    div M - Q = 0 with M = Db sym grad(beta) and Q = k G t (grad w + beta) give
    div div M = D lap(div beta) = -q and k G t (lap w + div beta) = -q. For the Navier
    modes sin(m pi x / a) sin(n pi y / a), with kappa^2 = pi^2 (m^2 + n^2) / a^2 and
    q_mn = 16 q / (pi^2 m n), this is w_mn = q_mn / (D kappa^4) + q_mn / (k G t kappa^2):
    the Kirchhoff series plus a shear term (the known relation w_M = w_K + M_K / (k G t),
    Wang, Reddy and Lee, Shear Deformable Beams and Plates, 2000; from memory). With
    k G t = k 6 D (1 - nu) / t^2 the shear term is
    (16 / pi^4) (t / a)^2 / (6 k (1 - nu)) sum (-1)^(...) / (m n (m^2 + n^2)).
    """
    m = np.arange(1, terms + 1, 2, dtype=float)
    M, N = np.meshgrid(m, m, indexing="ij")
    sign = (-1.0) ** ((M + N) / 2 - 1)
    shear = 16.0 / np.pi**4 / (6.0 * k * (1.0 - nu)) / a_over_t**2 * float(np.sum(sign / (M * N * (M**2 + N**2))))
    return navier_centre_deflection(nu, terms) + shear


def navier_centre_moment(nu: float = NU, terms: int = 199) -> float:
    """beta in Mx = beta q a^2 at the centre of the simply supported square plate: Navier
    series of Mx = -D (w_xx + nu w_yy) (Timoshenko and Woinowsky-Krieger, section 30; their
    table gives 0.0479 at nu = 0.3)."""
    m = np.arange(1, terms + 1, 2, dtype=float)
    M, N = np.meshgrid(m, m, indexing="ij")
    sign = (-1.0) ** ((M + N) / 2 - 1)
    return 16.0 / np.pi**4 * float(np.sum(sign * (M**2 + nu * N**2) / (M * N * (M**2 + N**2) ** 2)))


# ---------------------------------------------------------------- element
@pytest.mark.parametrize("t", [0.01, 0.3, 2.0])
def test_single_element_has_exactly_the_three_rigid_modes(t):
    # A free element must have three zero-energy modes (w translation and two rotations)
    # and no spurious ones (Bathe and Dvorkin 1985: MITC4 is free of spurious modes).
    pb = PlateBending(E=1000.0, nu=NU, thickness=t)
    h = 0.7
    KE = pb.element_matrix(h)
    assert np.allclose(KE, KE.T, atol=1e-12 * np.abs(KE).max())
    ev = np.linalg.eigvalsh(KE)
    zero = np.abs(ev) < 1e-10 * ev.max()
    assert zero.sum() == 3
    assert ev.min() > -1e-10 * ev.max()
    corners = np.array([[0, 0], [h, 0], [h, h], [0, h]], float)
    R = pb.rigid_modes(corners).reshape(12, 3)
    assert np.abs(KE @ R).max() < 1e-10 * ev.max()
    Kb, Ks = pb.element_matrix_parts(h)
    assert np.allclose(Kb + Ks, KE)


def test_constant_curvature_patch_test():
    # Patch test (Bathe and Dvorkin 1985 report MITC4 passes it): boundary nodes of a 4 x 4
    # patch take the exact constant-curvature Kirchhoff field w = -(kx x^2 + ky y^2 +
    # kxy x y) / 2, theta_x = dw/dy, theta_y = -dw/dx (zero transverse shear); the interior
    # must reproduce it and every cell must carry M = Db k. A thick plate, so that a shear
    # error would show.
    pb = PlateBending(E=7.0e4, nu=NU, thickness=0.4)
    n, h = 4, 0.5
    kx, ky, kxy = 0.3, -0.2, 0.5
    xy, _, edofs = plate_grid(n, h)
    x, y = xy[:, 0], xy[:, 1]
    exact = np.column_stack([
        -(kx * x**2 + ky * y**2 + kxy * x * y) / 2,
        -(ky * y + kxy * x / 2),
        kx * x + kxy * y / 2,
    ]).ravel()
    K = assemble(pb.element_matrix(h), edofs, exact.size)
    boundary = (x < 1e-9) | (y < 1e-9) | (x > n * h - 1e-9) | (y > n * h - 1e-9)
    fixed = np.repeat(boundary, 3)
    free = ~fixed
    u = exact.copy()
    u[free] = spla.spsolve(K[free][:, free].tocsc(), -K[free][:, fixed] @ exact[fixed])
    assert np.abs(u - exact).max() < 1e-10
    M = pb.centre_moments(u[edofs], h)
    assert np.allclose(M, pb.bending_matrix() @ [kx, ky, kxy], rtol=1e-10, atol=1e-12)


# ---------------------------------------------------------------- plates under pressure
def test_simply_supported_square_plate_navier():
    # Timoshenko and Woinowsky-Krieger (1959), section 30: w_max = 0.00406 q a^4 / D at the
    # centre; the Navier series, computed here, gives 0.0040624. Thin plate (a / t = 1000),
    # 24 x 24 cells, within 1 %. Centre moment Mx: series (table value 0.0479 q a^2).
    alpha = navier_centre_deflection()
    assert abs(alpha - 0.00406) < 0.00001  # the quoted table value
    a, q, n = 2.0, 3.0, 24
    pb = PlateBending(E=2.0e5, nu=NU, thickness=a / 1000)
    U, xy, edofs, h = square_plate(pb, n, a, q, "simply supported")
    D = pb.flexural_rigidity
    w_fe = U[3 * centre_node(n)] * D / (q * a**4)
    assert w_fe == pytest.approx(alpha, rel=0.01)
    # the four cells around the centre node; their centres are h / sqrt(2) away
    cells = np.where(np.linalg.norm(xy[edofs[:, ::3] // 3].mean(axis=1) - a / 2, axis=1) < h)[0]
    assert cells.size == 4
    Mx = pb.centre_moments(U[edofs[cells]], h)[:, 0].mean() / (q * a**2)
    assert Mx == pytest.approx(navier_centre_moment(), rel=0.02)


def test_clamped_square_plate():
    # Timoshenko and Woinowsky-Krieger (1959), section 44, table: w_max = 0.00126 q a^4 / D
    # (more digits, 0.0012653, from memory), within 1.5 % on 24 x 24 cells, thin plate.
    a, q, n = 1.0, 1.0, 24
    pb = PlateBending(E=1.0e4, nu=NU, thickness=a / 1000)
    U, *_ = square_plate(pb, n, a, q, "clamped")
    w_fe = U[3 * centre_node(n)] * pb.flexural_rigidity / (q * a**4)
    assert w_fe == pytest.approx(0.00126, rel=0.015)
    assert w_fe == pytest.approx(0.0012653, rel=0.005)  # the from-memory value, tighter


@pytest.mark.parametrize("a_over_t", [5.0, 10.0])
def test_thick_simply_supported_plate_mindlin_series(a_over_t):
    # Reissner-Mindlin series with shear correction 5/6 (formula derived in
    # mindlin_centre_deflection): 16 x 16 cells within 1.5 %. The shear part is 5 % (a/t = 10)
    # and 21 % (a/t = 5) of the deflection, so a plate without shear would fail.
    a, q, n = 1.0, 1.0, 16
    pb = PlateBending(E=1.0e4, nu=NU, thickness=a / a_over_t)
    U, *_ = square_plate(pb, n, a, q, "simply supported")
    w_fe = U[3 * centre_node(n)] * pb.flexural_rigidity / (q * a**4)
    ref = mindlin_centre_deflection(a_over_t)
    assert ref > 1.04 * navier_centre_deflection()
    assert w_fe == pytest.approx(ref, rel=0.015)


def test_no_shear_locking_from_thick_to_very_thin():
    # With D held fixed (E = 12 D (1 - nu^2) / t^3, i.e. q scaled with t^3), the normalized
    # centre deflection tends to the Kirchhoff value 0.0040624 (Navier series). From
    # a / t = 10 to 10^4 it must stay within 0.5 % of the Mindlin series on 16 x 16 cells, and
    # within 0.5 % of the Kirchhoff value for a / t >= 100 (the shear part is 5 % at 10). The same mesh with the shear
    # strains of the bilinear interpolation fully integrated locks (a check that the test
    # can tell the difference).
    a, q, n, D = 1.0, 1.0, 16, 1.0
    alpha = navier_centre_deflection()
    for a_over_t in (10.0, 100.0, 1.0e3, 1.0e4):
        t = a / a_over_t
        pb = PlateBending(E=12 * D * (1 - NU**2) / t**3, nu=NU, thickness=t)
        U, *_ = square_plate(pb, n, a, q, "simply supported")
        w_fe = U[3 * centre_node(n)] * D / (q * a**4)
        assert w_fe == pytest.approx(mindlin_centre_deflection(a_over_t), rel=0.005), a_over_t
        if a_over_t >= 100:
            assert w_fe == pytest.approx(alpha, rel=0.005), a_over_t
    # the locking element at a / t = 10^3
    t = a / 1.0e3
    pb = PlateBending(E=12 * D * (1 - NU**2) / t**3, nu=NU, thickness=t)
    h = a / n
    Kb, _ = pb.element_matrix_parts(h)
    Ks = np.zeros((12, 12))
    for xi in (-1 / np.sqrt(3), 1 / np.sqrt(3)):
        for eta in (-1 / np.sqrt(3), 1 / np.sqrt(3)):
            Bs = displacement_shear_operator(xi, eta, h)
            Ks += Bs.T @ pb.shear_matrix() @ Bs * h * h / 4
    U, *_ = square_plate(pb, n, a, q, "simply supported", KE=Kb + Ks)
    assert U[3 * centre_node(n)] * D / (q * a**4) < 0.1 * alpha


# ---------------------------------------------------------------- supports and modes
def test_fixed_components_and_rigid_rank():
    # rigid-body motions of a plate: w = c0 + c1 y - c2 x, theta = (c1, c2)
    pb = PlateBending(E=1.0, nu=NU, thickness=0.1)
    assert pb.fixed_components("z") == (0,)
    assert pb.fixed_components("xyz") == (0,)
    assert pb.fixed_components("xy") == ()
    assert pb.fixed_components("yz", clamped=True) == (0, 1, 2)
    three = np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]])
    assert restrained_rank(pb, three, np.zeros(3, int)) == 3
    line = np.array([[0.0, 0.0], [0.5, 0.5], [1.0, 1.0]])
    assert restrained_rank(pb, line, np.zeros(3, int)) == 2  # a hinge line: one mechanism
    one = np.zeros((3, 2))
    assert restrained_rank(pb, one, np.array(pb.fixed_components("z", clamped=True))) == 3
    assert restrained_rank(pb, one[:2], np.array(pb.fixed_components("", clamped=True))) == 2
    # the modes are the null space of an assembled free plate
    xy, _, edofs = plate_grid(3, 0.4)
    K = assemble(pb.element_matrix(0.4), edofs, 3 * xy.shape[0]).toarray()
    R = pb.rigid_modes(xy).reshape(-1, 3)
    assert np.abs(K @ R).max() < 1e-10 * np.abs(K).max()
    assert np.sum(np.linalg.eigvalsh(K) < 1e-10 * np.abs(K).max()) == 3


def test_pressure_load_and_energy_density():
    # the consistent load of a unit pressure sums to the cell area; the cell energies of a
    # solved plate add up to its compliance F . u (Clapeyron's theorem)
    pb = PlateBending(E=1.0e4, nu=NU, thickness=0.05)
    assert pb.pressure_load(0.3)[0::3].sum() == pytest.approx(0.09)
    assert not pb.pressure_load(0.3)[1::3].any() and not pb.pressure_load(0.3)[2::3].any()
    a, q, n = 1.0, 2.0, 8
    U, xy, edofs, h = square_plate(pb, n, a, q, "clamped")
    F = cell_loads(edofs, q * pb.pressure_load(h), U.size)
    ue = U[edofs]
    energy = np.einsum("ei,ij,ej->e", ue, pb.element_matrix(h), ue)[:, None]
    density = pb.energy_density(energy, np.ones(1), h)
    assert density.sum() * pb.thickness * h * h == pytest.approx(F @ U, rel=1e-10)


# ---------------------------------------------------------------- small hole
def hole_compliance_change(n: int, radius_cells: float, one_cell: bool = False):
    """A thin square plate L x L (t = h / 20) under uniform edge moments M0 (a uniform
    field; held at three corners against rigid motion) for the fields Mx = My = 1
    (isotropic), Mx = 1 (uniaxial) and Mxy = 1 (twist). Returns (compliance increase of
    cutting the hole, prediction area * t * topological_derivative(M0), the solid plate's
    compliance over the closed form L^2 M0 . Db^-1 M0). The hole is the cells whose centres
    lie within ``radius_cells`` cells of the plate centre, or the one cell just above and
    right of it."""
    L = 1.0
    h = L / n
    pb = PlateBending(E=1.0e4, nu=NU, thickness=h / 20)
    xy, cell_nodes, edofs = plate_grid(n, h)
    n_dof = 3 * xy.shape[0]
    fields = np.array([[1.0, 1.0, 0.0], [1.0, 0.0, 0.0], [0.0, 0.0, 1.0]])  # Mx, My, Mxy
    # consistent edge loads: M0 works on an edge of outward normal nrm through
    # int (M0 nrm) . beta ds, beta = (theta_y, -theta_x); each node takes its share of length
    F = np.zeros((n_dof, len(fields)))
    for c, (Mx, My, Mxy) in enumerate(fields):
        T = np.array([[Mx, Mxy], [Mxy, My]])
        for axis, value, sign in ((0, 0.0, -1), (0, L, 1), (1, 0.0, -1), (1, L, 1)):
            nodes = np.where(np.abs(xy[:, axis] - value) < 1e-9)[0]
            length = np.full(nodes.size, h)
            length[np.isclose(xy[nodes, 1 - axis], 0.0) | np.isclose(xy[nodes, 1 - axis], L)] = h / 2
            nrm = np.zeros(2)
            nrm[axis] = sign
            m = T @ nrm
            F[3 * nodes + 2, c] += m[0] * length  # beta_x = theta_y
            F[3 * nodes + 1, c] -= m[1] * length  # beta_y = -theta_x
    corners = [0, n, n * (n + 1)]  # (0, 0), (L, 0), (0, L)

    def compliance(active):
        K = assemble(pb.element_matrix(h), edofs, n_dof, active.astype(float))
        used = np.zeros(xy.shape[0], bool)
        used[cell_nodes[active].ravel()] = True
        fixed = np.repeat(~used, 3)
        fixed[[3 * k for k in corners]] = True
        return np.einsum("ic,ic->c", F, solve(K, F, fixed))

    solid = np.ones(n * n, bool)
    C0 = compliance(solid)
    closed = L * L * np.einsum("ci,ci->c", fields, np.linalg.solve(pb.bending_matrix(), fields.T).T)
    if one_cell:
        hole = np.zeros(n * n, bool)
        hole[(n // 2) * n + n // 2] = True
    else:
        centres = xy[cell_nodes].mean(axis=1)
        hole = np.linalg.norm(centres - L / 2, axis=1) < radius_cells * h
    C1 = compliance(solid & ~hole)
    predicted = hole.sum() * h * h * pb.thickness * pb.topological_derivative(fields)
    return C1 - C0, predicted, C0 / closed


def test_topological_derivative_against_cutting_a_circular_hole():
    # Staircase circular hole of radius 6 cells (R / L = 0.075, R / t = 120) on 80 x 80 cells:
    # the measured increase is 1.04 to 1.045 times the prediction; it falls towards 1 as the
    # hole shrinks relative to the plate (finite-plate interaction, about (R / L)^2 times a
    # few: 1.023 to 1.028 at R = 4 cells, 1.049 to 1.056 at 8), so within 8 %. The plane-stress
    # formula carried over by analogy (a free edge with M_nn = M_nt = 0, which a Kirchhoff
    # plate cannot have) would be 1.7 times too large for the uniaxial field and 2.5 for the
    # twist, and fail.
    dC, predicted, solid = hole_compliance_change(80, 6.0)
    assert np.allclose(solid, 1.0, rtol=1e-4)  # the solid plate carries the uniform field
    assert np.all(np.abs(dC / predicted - 1.0) < 0.08), dC / predicted


def test_topological_derivative_against_removing_one_cell():
    # What hole seeding does: remove one cell of a uniform field on 40 x 40 cells. A square
    # unresolved by the mesh is not the small circle of the formula; measured 0.74
    # (isotropic), 0.87 (uniaxial), 0.92 (twist) of the prediction: within 30 %.
    dC, predicted, _ = hole_compliance_change(40, 0.0, one_cell=True)
    assert np.all(np.abs(dC / predicted - 1.0) < 0.30), dC / predicted
