"""Reference solutions shared by the tests (closed forms from outside the project)."""
from __future__ import annotations

import numpy as np


def parabolic_end_forces(ys, P, D, t):
    """Consistent nodal forces of tau(y) = P (c^2 - y^2) / (2 I) on the end nodes ys.
    The integrand (quadratic traction times linear shape function) is cubic, so 2-point
    Gauss-Legendre is exact (Gauss rule with n points is exact to degree 2n - 1)."""
    I = t * D**3 / 12.0
    c = D / 2
    f = np.zeros(ys.size)
    g = np.array([-1.0, 1.0]) / np.sqrt(3.0)
    a, b = ys[:-1], ys[1:]
    yq = 0.5 * (a + b)[:, None] + 0.5 * (b - a)[:, None] * g
    tq = t * P * (c**2 - yq**2) / (2 * I)
    w = 0.5 * (b - a)[:, None]
    np.add.at(f, np.arange(a.size), np.sum(w * tq * (b[:, None] - yq) / (b - a)[:, None], axis=1))
    np.add.at(f, np.arange(a.size) + 1, np.sum(w * tq * (yq - a[:, None]) / (b - a)[:, None], axis=1))
    return f
