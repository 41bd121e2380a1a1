"""Sparse assembly of the free-dof stiffness from cell matrices scaled per cell."""
from __future__ import annotations

import numpy as np
import scipy.sparse as sp


class Assembler:
    """Assembles K = sum_e s_e K_E over active cells into the free-dof system.

    The sparsity pattern and a map from cell scale factors to the CSC data array are built
    once; ``matrix(s)`` is then one sparse mat-vec and no sorting.
    """

    def __init__(self, edofs: np.ndarray, free_index: np.ndarray, n_free: int, KE: np.ndarray):
        # edofs: (ne, 8) global dofs; free_index: global dof -> free dof number or -1.
        ne = edofs.shape[0]
        fe = free_index[edofs]  # (ne, 8)
        rows = np.repeat(fe, 8, axis=1).ravel()
        cols = np.tile(fe, (1, 8)).ravel()
        vals = np.tile(KE.ravel(), ne)
        cell = np.repeat(np.arange(ne), 64)
        keep = (rows >= 0) & (cols >= 0)
        rows, cols, vals, cell = rows[keep], cols[keep], vals[keep], cell[keep]
        key = cols.astype(np.int64) * n_free + rows  # column-major: CSC order
        uniq, slot = np.unique(key, return_inverse=True)
        self.indices = (uniq % n_free).astype(np.int32)
        col_of = (uniq // n_free).astype(np.int64)
        self.indptr = np.searchsorted(col_of, np.arange(n_free + 1)).astype(np.int32)
        self.map = sp.csr_matrix((vals, (slot, cell)), shape=(uniq.size, ne))
        self.n = n_free

    def matrix(self, scale: np.ndarray, reuse: bool = False) -> sp.csc_matrix:
        """The free-dof stiffness for the cell scale factors (``reuse`` is accepted for the
        assembler interface and has no effect here)."""
        data = self.map @ scale
        return sp.csc_matrix((data, self.indices, self.indptr), shape=(self.n, self.n))


def make_assembler(model, KE: np.ndarray):
    """The assembler for ``model``: the lattice assembler where the grid allows it (it
    builds no per-cell index arrays: a fraction of the memory and set-up time), else the
    general one. Both give the same matrix from ``matrix(scale, reuse=...)``."""
    from .multigrid import LatticeAssembler

    if LatticeAssembler.supports(model):
        try:
            return LatticeAssembler(model, KE)
        except ValueError:  # free dofs not numbered in lattice order
            pass
    return Assembler(model.edofs, model.free, model.n_free, KE)
