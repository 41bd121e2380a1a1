"""Whether fixed unknowns stop every rigid-body motion: one rank test for every caller."""
from __future__ import annotations

import numpy as np

__all__ = ["restrained_modes", "restrained_rank"]

RANK_TOL = 1e-9


def restrained_modes(physics, xy: np.ndarray, component: np.ndarray) -> np.ndarray:
    """The rigid-body modes at the fixed unknowns: one row per fixed unknown, one column
    per mode (n, physics.n_rigid_modes). A combination of modes the supports allow is a
    null vector of this matrix. ``xy`` and ``component`` as in :func:`restrained_rank`."""
    xy = np.asarray(xy, float).reshape(-1, 2)
    component = np.asarray(component, np.int64).ravel()
    return physics.rigid_modes(xy)[np.arange(xy.shape[0]), component, :]


def restrained_rank(physics, xy: np.ndarray, component: np.ndarray, tol: float = RANK_TOL) -> int:
    """Rank of the rigid-body modes restricted to the fixed unknowns.

    Parameters
    ----------
    physics : a physics object or class (``rigid_modes(xy) -> (n, dofs_per_node, n_modes)``)
    xy : (n, 2) positions of the fixed unknowns, already shifted and scaled by the caller
        so that the tolerance is relative to the domain size.
    component : (n,) which unknown of its node each one is (0 .. dofs_per_node - 1).
    tol : singular values below it count as zero.

    Returns
    -------
    int
        The plate is held when this equals ``physics.n_rigid_modes``.

    Examples
    --------
    >>> from levelform.physics import PlaneStress
    >>> ps = PlaneStress(1.0, 0.3, 1.0)
    >>> restrained_rank(ps, np.array([[0.0, 0.0], [0.0, 0.0], [1.0, 0.0]]), np.array([0, 1, 1]))
    3
    """
    rows = restrained_modes(physics, xy, component)
    if rows.shape[0] == 0:
        return 0
    return int(np.linalg.matrix_rank(rows, tol=tol))
