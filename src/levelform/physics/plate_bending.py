"""Reissner-Mindlin plate bending on square cells with the MITC4 element.

Three unknowns per node (w, theta_x, theta_y); local node order counter-clockwise from the
lower-left corner as for plane stress (levelform.fem.elements), local dofs
[w1, tx1, ty1, w2, tx2, ty2, w3, tx3, ty3, w4, tx4, ty4].

Sign convention. w is the deflection along +z (the direction of a positive pressure).
theta_x and theta_y are the rotations of the plate's normal about the +x and +y axes
(right-hand rule). A point at height z above the mid-plane moves in the plane by
u = z * theta_y, v = -z * theta_x, so the section rotations used in the strains are
beta_x = theta_y and beta_y = -theta_x. In the thin (Kirchhoff) limit theta_x = dw/dy and
theta_y = -dw/dx.

Strains: curvatures kappa = [d beta_x/dx, d beta_y/dy, d beta_x/dy + d beta_y/dx],
transverse shear gamma = [dw/dx + beta_x, dw/dy + beta_y]. Moments M = Db @ kappa
(force * length / length), so Mx = -D (w_xx + nu w_yy) in the thin limit; shear forces
Q = Ds @ gamma.

Transverse shear uses the MITC4 assumed strains (Bathe and Dvorkin 1985, Int. J. Numer.
Methods Eng. 21:367-383): gamma_xz is sampled at the midpoints of the two edges parallel
to x and interpolated linearly in y, gamma_yz at the midpoints of the edges parallel to y
and interpolated linearly in x. On a square cell the covariant strains of the method are
the Cartesian ones times h / 2, so this is the element exactly. The element does not lock
in shear as the plate gets thin.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["PlateBending", "curvature_operator", "displacement_shear_operator", "shear_operator"]

_GAUSS = 1.0 / np.sqrt(3.0)
# Natural coordinates of the local nodes (as in levelform.fem.elements).
_XI = np.array([-1.0, 1.0, 1.0, -1.0])
_ETA = np.array([-1.0, -1.0, 1.0, 1.0])


def _shape(xi: float, eta: float, h: float):
    """Bilinear shape functions and their x, y derivatives on a square cell of side h."""
    N = 0.25 * (1.0 + xi * _XI) * (1.0 + eta * _ETA)
    dN_dx = 0.25 * _XI * (1.0 + eta * _ETA) * 2.0 / h
    dN_dy = 0.25 * _ETA * (1.0 + xi * _XI) * 2.0 / h
    return N, dN_dx, dN_dy


def curvature_operator(xi: float, eta: float, h: float) -> np.ndarray:
    """B_b (3 x 12): the curvatures [kxx, kyy, kxy] at (xi, eta) are B_b @ u_e."""
    _, dx, dy = _shape(xi, eta, h)
    B = np.zeros((3, 12))
    B[0, 2::3] = dx  # d beta_x / dx, beta_x = theta_y
    B[1, 1::3] = -dy  # d beta_y / dy, beta_y = -theta_x
    B[2, 2::3] = dy
    B[2, 1::3] = -dx
    return B


def displacement_shear_operator(xi: float, eta: float, h: float) -> np.ndarray:
    """Shear strains [gxz, gyz] (2 x 12) at (xi, eta) from the bilinear interpolation itself
    (without the MITC4 tying; integrated fully, this is the element that locks)."""
    N, dx, dy = _shape(xi, eta, h)
    B = np.zeros((2, 12))
    B[0, 0::3] = dx
    B[0, 2::3] = N  # + beta_x = theta_y
    B[1, 0::3] = dy
    B[1, 1::3] = -N  # + beta_y = -theta_x
    return B


def shear_operator(xi: float, eta: float, h: float) -> np.ndarray:
    """MITC4 assumed shear strains B_s (2 x 12) at (xi, eta): gxz tied at the midpoints of
    the edges eta = -1 and eta = +1, gyz at those of xi = -1 and xi = +1."""
    bottom, top = displacement_shear_operator(0.0, -1.0, h)[0], displacement_shear_operator(0.0, 1.0, h)[0]
    left, right = displacement_shear_operator(-1.0, 0.0, h)[1], displacement_shear_operator(1.0, 0.0, h)[1]
    B = np.zeros((2, 12))
    B[0] = 0.5 * (1.0 - eta) * bottom + 0.5 * (1.0 + eta) * top
    B[1] = 0.5 * (1.0 - xi) * left + 0.5 * (1.0 + xi) * right
    return B


@dataclass(frozen=True)
class PlateBending:
    """Out-of-plane bending of a plate of thickness ``thickness`` (Reissner-Mindlin).

    Parameters
    ----------
    E, nu : Young's modulus (force / length^2) and Poisson's ratio.
    thickness : plate thickness (length).
    shear_correction : transverse shear correction factor (5/6 for a homogeneous plate).

    Examples
    --------
    >>> pb = PlateBending(E=210e3, nu=0.3, thickness=2.0)
    >>> pb.element_matrix(10.0).shape
    (12, 12)
    """

    E: float
    nu: float
    thickness: float
    shear_correction: float = 5.0 / 6.0

    name = "plate bending"
    dofs_per_node = 3
    dof_names = ("w", "theta_x", "theta_y")
    n_rigid_modes = 3  # a translation along z and rotations about x and y

    @property
    def flexural_rigidity(self) -> float:
        """D = E t^3 / (12 (1 - nu^2)) (force * length)."""
        return self.E * self.thickness**3 / (12.0 * (1.0 - self.nu**2))

    def bending_matrix(self) -> np.ndarray:
        """Db (3 x 3): [Mx, My, Mxy] = Db @ [kxx, kyy, kxy]."""
        nu = self.nu
        return self.flexural_rigidity * np.array([[1.0, nu, 0.0], [nu, 1.0, 0.0], [0.0, 0.0, (1.0 - nu) / 2.0]])

    def shear_matrix(self) -> np.ndarray:
        """Ds (2 x 2): [Qx, Qy] = Ds @ [gxz, gyz], Ds = k G t I."""
        G = self.E / (2.0 * (1.0 + self.nu))
        return self.shear_correction * G * self.thickness * np.eye(2)

    def element_matrix_parts(self, h: float = 1.0) -> tuple:
        """(bending, shear) stiffness parts (12 x 12 each) of a solid square cell of side h,
        both by 2 x 2 Gauss quadrature (exact on a square: the integrands are polynomials of
        degree at most two in each coordinate)."""
        Db, Ds = self.bending_matrix(), self.shear_matrix()
        Kb = np.zeros((12, 12))
        Ks = np.zeros((12, 12))
        w = h * h / 4.0  # Jacobian determinant times the unit Gauss weights
        for xi in (-_GAUSS, _GAUSS):
            for eta in (-_GAUSS, _GAUSS):
                Bb = curvature_operator(xi, eta, h)
                Bs = shear_operator(xi, eta, h)
                Kb += Bb.T @ Db @ Bb * w
                Ks += Bs.T @ Ds @ Bs * w
        return Kb, Ks

    def element_matrix(self, h: float = 1.0) -> np.ndarray:
        """MITC4 stiffness (12 x 12) of a solid square cell of side ``h``. Unlike plane
        stress it depends on h (the shear part couples w and the rotations through h)."""
        Kb, Ks = self.element_matrix_parts(h)
        return Kb + Ks

    @staticmethod
    def fixed_components(fix: str, clamped: bool = False) -> tuple:
        """Unknowns of a node that an out-of-plane support holds.

        A ``fix`` containing "z" ("z", "xz", "yz", "xyz") holds w; "x" and "y" concern the
        in-plane problem and hold nothing here. ``clamped=True`` holds both rotations
        as well (a built-in edge or bolt); the rotations alone are held when ``clamped``
        is set without "z" (a sliding clamp)."""
        held = [0] if "z" in fix else []
        if clamped:
            held += [1, 2]
        return tuple(held)

    @staticmethod
    def nodal_load(load) -> tuple:
        """The load's value per unknown of a node: the out-of-plane component of its force
        (the third, zero when a force has only in-plane components); no nodal moments."""
        f = tuple(getattr(load, "force", ()) or ())
        return (float(f[2]) if len(f) > 2 else 0.0, 0.0, 0.0)

    @staticmethod
    def pressure_load(h: float = 1.0) -> np.ndarray:
        """Consistent nodal loads (12,) of a unit pressure (+z) on a square cell of side h:
        a quarter of the cell area at each w, none at the rotations (w is bilinear)."""
        f = np.zeros(12)
        f[0::3] = h * h / 4.0
        return f

    def energy_density(self, cell_energy: np.ndarray, weights: np.ndarray, h: float) -> np.ndarray:
        """Weighted bending-plus-shear strain-energy density of each cell as if solid,
        (M:kappa + Q.gamma) / t (force / length^2, per unit volume as for plane stress, so
        that in-plane and bending parts add).

        ``cell_energy`` (n_cells, n_cases) holds u_e^T K_solid u_e per case."""
        return cell_energy @ weights / (self.thickness * h * h)

    def centre_moments(self, ue: np.ndarray, h: float) -> np.ndarray:
        """Bending moments (n, 3) [Mx, My, Mxy] (force * length / length) at the centres of
        cells with dofs ``ue`` (n, 12)."""
        DB = (self.bending_matrix() @ curvature_operator(0.0, 0.0, h)).T  # (12, 3)
        return np.asarray(ue, float).reshape(-1, 12) @ DB

    def centre_stress(self, ue: np.ndarray, h: float) -> np.ndarray:
        """Bending stresses (n, 3) [sxx, syy, sxy] on the face z = +t/2 at the cell centres,
        6 M / t^2 (the largest in-plane stress of a cell in bending, up to sign)."""
        return 6.0 * self.centre_moments(ue, h) / self.thickness**2

    def topological_derivative(self, moments: np.ndarray) -> np.ndarray:
        """Compliance increase per unit hole area and thickness for a small free circular
        hole in a thin (Kirchhoff) plate under the solid cell's moments ``moments`` (n, 3)
        [Mx, My, Mxy] (from :meth:`centre_moments`): opening a hole of area a raises the
        compliance by about a * t * value, as for plane stress.

        Per unit hole area the increase is
            T = [4 M:M / (1 - nu) + (tr M)^2 / (1 + nu)] / ((3 + nu) D),
        with M:M = Mx^2 + My^2 + 2 Mxy^2 and tr M = Mx + My. It follows from the classical
        Kirchhoff solution for a free circular hole (M_r = 0 and V_r = Q_r + dM_rt/(r dt) = 0
        on the edge) in a uniform moment field, the solution behind the bending stress
        concentration (5 + 3 nu) / (3 + nu) (Savin, Stress Concentration around Holes,
        1961; from memory), with the identity dC = -int_hole (M0 n) . grad w ds for the
        compliance at fixed load. Split by parts: an isotropic field M0 = m I gives
        4 m^2 / ((1 - nu^2) D), a deviatoric one of norm s (Mx = -My = s) gives
        8 s^2 / ((1 - nu)(3 + nu) D). The topological derivative of Kirchhoff plates is
        treated in Amstutz and Novotny 2011, ESAIM: COCV 17:705-721 (from memory); the form
        here is our derivation, checked numerically against cutting holes in the grid
        (tests/test_plate_bending.py). Valid for holes much wider than the thickness."""
        M = np.asarray(moments, float).reshape(-1, 3)
        nu, D = self.nu, self.flexural_rigidity
        mm = M[:, 0] ** 2 + M[:, 1] ** 2 + 2.0 * M[:, 2] ** 2
        tr = M[:, 0] + M[:, 1]
        return (4.0 * mm / (1.0 - nu) + tr**2 / (1.0 + nu)) / ((3.0 + nu) * D * self.thickness)

    @staticmethod
    def rigid_modes(xy: np.ndarray) -> np.ndarray:
        """Rigid-body motions at points ``xy`` (n, 2): (n, 3, 3), the modes
        (w, theta_x, theta_y) = (1, 0, 0), (y, 1, 0) and (-x, 0, 1): a translation along z
        and rotations about the x and y axes (zero curvature and zero shear strain)."""
        xy = np.asarray(xy, float).reshape(-1, 2)
        n = xy.shape[0]
        out = np.zeros((n, 3, 3))
        out[:, 0, 0] = 1.0
        out[:, 0, 1] = xy[:, 1]
        out[:, 1, 1] = 1.0
        out[:, 0, 2] = -xy[:, 0]
        out[:, 2, 2] = 1.0
        return out
