"""Q4 plane-stress finite elements on a uniform grid of square cells.

One element matrix serves every cell (a square Q4 element's stiffness does not depend on
its size in 2D); each iteration only rescales it per cell. Local node order, counter-
clockwise from the lower-left corner: (i, j), (i+1, j), (i+1, j+1), (i, j+1); local dofs
[u1, v1, u2, v2, u3, v3, u4, v4].
"""
from __future__ import annotations

import numpy as np

_GAUSS = 1.0 / np.sqrt(3.0)
# Natural coordinates of the local nodes.
_XI = np.array([-1.0, 1.0, 1.0, -1.0])
_ETA = np.array([-1.0, -1.0, 1.0, 1.0])


def elasticity_matrix(E: float, nu: float) -> np.ndarray:
    """Plane-stress D: stress = D @ [exx, eyy, gxy]."""
    return E / (1.0 - nu**2) * np.array([[1.0, nu, 0.0], [nu, 1.0, 0.0], [0.0, 0.0, (1.0 - nu) / 2.0]])


def strain_displacement(xi: float, eta: float, h: float) -> np.ndarray:
    """B (3 x 8) of a square cell of side h at natural coordinates (xi, eta)."""
    dN_dxi = 0.25 * _XI * (1.0 + eta * _ETA)
    dN_deta = 0.25 * _ETA * (1.0 + xi * _XI)
    dN_dx = dN_dxi * 2.0 / h
    dN_dy = dN_deta * 2.0 / h
    B = np.zeros((3, 8))
    B[0, 0::2] = dN_dx
    B[1, 1::2] = dN_dy
    B[2, 0::2] = dN_dy
    B[2, 1::2] = dN_dx
    return B


def element_stiffness(E: float, nu: float, thickness: float, h: float = 1.0) -> np.ndarray:
    """8 x 8 stiffness of a solid square cell by 2 x 2 Gauss quadrature (exact for Q4)."""
    D = elasticity_matrix(E, nu)
    KE = np.zeros((8, 8))
    for xi in (-_GAUSS, _GAUSS):
        for eta in (-_GAUSS, _GAUSS):
            B = strain_displacement(xi, eta, h)
            KE += B.T @ D @ B * (h * h / 4.0)
    return thickness * KE


def centre_strain_operator(h: float) -> np.ndarray:
    """B at the cell centre: the strain there is B @ u_e."""
    return strain_displacement(0.0, 0.0, h)
