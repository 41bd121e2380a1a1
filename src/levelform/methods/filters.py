"""Cone (linear hat) filters over points of the grid, as sparse matrices built once.

A cone filter of radius r weights a neighbour at distance d by max(0, r - d) (Bruns and
Tortorelli 2001; Sigmund 2001, Struct. Multidisc. Optim. 21:120-127). Used by the
density-based and the evolutionary methods; r is a length in model units, so the filtered
field does not change scale when the grid is refined.
"""
from __future__ import annotations

import math

import numpy as np
import scipy.sparse as sp
from scipy.spatial import cKDTree

from ..geometry.shapes import domain_polygon


def default_filter_radius(problem) -> float:
    """``method.filter_radius`` or max(1.5 cells, 0.04 sqrt(domain area)): fixed by the
    domain size so refining the grid keeps the design, floored so that the filter reaches
    past the nearest neighbours on coarse grids."""
    r = problem.method.filter_radius
    if r is not None:
        return float(r)
    return float(max(1.5 * problem.domain.cell, 0.04 * math.sqrt(domain_polygon(problem).area)))


def cone_weights(targets: np.ndarray, sources: np.ndarray, radius: float) -> sp.csr_matrix:
    """W[i, j] = max(0, radius - |targets[i] - sources[j]|) as a CSR matrix (n_t, n_s).

    Points are (n, 2) arrays. The pairs come as a record array, which keeps the pairs at
    zero distance (a point and itself) that a sparse distance matrix would drop.
    """
    targets = np.asarray(targets, float)
    sources = np.asarray(sources, float)
    pairs = cKDTree(targets).sparse_distance_matrix(cKDTree(sources), radius, output_type="ndarray")
    w = np.maximum(0.0, radius - pairs["v"])
    keep = w > 0.0
    return sp.csr_matrix(
        (w[keep], (pairs["i"][keep], pairs["j"][keep])), shape=(len(targets), len(sources))
    )


def cell_centres(model) -> np.ndarray:
    """Centres (n_cells, 2) of the active cells, in ``model.cells`` order."""
    g = model.grid
    i = model.cells % g.nx
    j = model.cells // g.nx
    return np.column_stack([g.x0 + g.h * (i + 0.5), g.y0 + g.h * (j + 0.5)])


def cell_filter(model, radius: float):
    """The cone filter over active cell centres: (H, Hs) with H symmetric and Hs its row
    sums, so a filtered field is ``H @ v / Hs``."""
    H = cone_weights(cell_centres(model), cell_centres(model), radius)
    return H, np.asarray(H.sum(axis=1)).ravel()


def node_average(model) -> sp.csr_matrix:
    """A (n_nodes_flat, n_cells) matrix giving each node the mean of its adjacent active
    cells' values (zero rows for nodes outside the domain)."""
    g = model.grid
    n_nodes = (g.nx + 1) * (g.ny + 1)
    cn = model.cell_nodes
    A = sp.csr_matrix(
        (np.ones(cn.size), (cn.ravel(), np.repeat(np.arange(cn.shape[0]), 4))), shape=(n_nodes, cn.shape[0])
    )
    count = np.asarray(A.sum(axis=1)).ravel()
    return sp.diags(np.where(count > 0, 1.0 / np.maximum(count, 1.0), 0.0)) @ A


def cell_average_of_nodes(model, nodal: np.ndarray) -> np.ndarray:
    """Mean of the four corner values of each active cell, for a nodal (ny+1, nx+1) field."""
    return nodal.ravel()[model.cell_nodes].mean(axis=1)
