"""The one sparse LU factorization levelform uses for symmetric matrices (SuperLU)."""
from __future__ import annotations

import scipy.sparse as sp
import scipy.sparse.linalg as spla

__all__ = ["sparse_lu"]


def sparse_lu(A):
    """SuperLU factorization of a symmetric sparse matrix ``A``.

    A symmetric minimum-degree ordering (on A^T + A) with diagonal pivoting and SuperLU's
    symmetric mode: for the symmetric positive definite systems here it keeps the fill of
    a Cholesky factor and needs no row interchanges. Returns the object whose ``solve(b)``
    solves A x = b for one or several right-hand sides.
    """
    return spla.splu(sp.csc_matrix(A), permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0,
                     options={"SymmetricMode": True})
