"""Linear isotropic elasticity in plane stress on square bilinear (Q4) cells.

Two unknowns per node (ux, uy); local node order counter-clockwise from the lower-left
corner, local dofs [u1, v1, u2, v2, u3, v3, u4, v4] (levelform.fem.elements).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..fem.elements import centre_strain_operator, elasticity_matrix, element_stiffness

__all__ = ["PlaneStress"]


@dataclass(frozen=True)
class PlaneStress:
    """Plane-stress elasticity of a plate of thickness ``thickness``.

    Parameters
    ----------
    E, nu : Young's modulus (force / length^2) and Poisson's ratio.
    thickness : plate thickness (length).
    """

    E: float
    nu: float
    thickness: float

    name = "plane stress"
    dofs_per_node = 2
    dof_names = ("ux", "uy")
    n_rigid_modes = 3  # two translations and a rotation

    def material_matrix(self) -> np.ndarray:
        """D (3 x 3): stress = D @ [exx, eyy, gxy]."""
        return elasticity_matrix(self.E, self.nu)

    def element_matrix(self, h: float = 1.0) -> np.ndarray:
        """Stiffness (8 x 8) of a solid square cell of side ``h`` (independent of h in 2D)."""
        return element_stiffness(self.E, self.nu, self.thickness, h)

    @staticmethod
    def fixed_components(fix: str) -> tuple:
        """Unknowns of a node that a support's ``fix`` ("x", "y" or "xy") holds."""
        return tuple(k for k, c in enumerate("xy") if c in fix)

    def nodal_load(self, load) -> tuple:
        """The load's value per unknown of a node (a force per unit weight)."""
        return (float(load.force[0]), float(load.force[1]))

    def energy_density(self, cell_energy: np.ndarray, weights: np.ndarray, h: float) -> np.ndarray:
        """Weighted strain-energy density sigma:eps of each cell as if solid (force / length^2).

        ``cell_energy`` (n_cells, n_cases) holds u_e^T K_solid u_e per case."""
        return cell_energy @ weights / (self.thickness * h * h)

    def centre_stress(self, ue: np.ndarray, h: float) -> np.ndarray:
        """Solid stresses (n, 3) [sxx, syy, sxy] at the centres of cells with dofs ``ue`` (n, 8)."""
        DB = (self.material_matrix() @ centre_strain_operator(h)).T  # (8, 3)
        return ue @ DB

    def topological_derivative(self, stress: np.ndarray) -> np.ndarray:
        """Compliance increase per unit hole area for a small traction-free circular hole,
        (4 s:s - (tr s)^2) / E in plane stress (Novotny and Sokolowski 2013; Allaire et
        al. 2005); opening a hole of area a raises compliance by about a * t * value."""
        s = stress
        ss = s[:, 0] ** 2 + s[:, 1] ** 2 + 2.0 * s[:, 2] ** 2
        tr = s[:, 0] + s[:, 1]
        return (4.0 * ss - tr**2) / self.E

    @staticmethod
    def rigid_modes(xy: np.ndarray) -> np.ndarray:
        """Rigid-body motions at points ``xy`` (n, 2): (n, 2, 3), the modes
        u = (1, 0), (0, 1) and (-y, x)."""
        xy = np.asarray(xy, float).reshape(-1, 2)
        n = xy.shape[0]
        out = np.zeros((n, 2, 3))
        out[:, 0, 0] = 1.0
        out[:, 1, 1] = 1.0
        out[:, 0, 2] = -xy[:, 1]
        out[:, 1, 2] = xy[:, 0]
        return out
