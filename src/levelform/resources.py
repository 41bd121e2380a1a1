"""Up-front memory estimate for a grid, so a too-large problem is refused before solving."""
from __future__ import annotations

import math
import os


def estimate_memory_bytes(n_cells: int) -> int:
    """Rough peak memory of one level-set run on ``n_cells`` active cells.

    The sparse direct factor dominates: for a 2D grid under a fill-reducing ordering the
    factor holds about c * n_dof * log2(n_dof) entries. The constant was fitted to runs
    measured with ``benchmarks/`` (see docs/performance.md); the rest is the matrix
    (18 entries per row), the assembly map and a few dozen nodal and cell arrays.
    """
    n = max(int(n_cells), 1)
    n_dof = 2 * n
    factor_entries = 12.0 * n_dof * max(math.log2(n_dof), 1.0)
    matrix_entries = 18.0 * n_dof * 2  # the matrix and the assembly map
    arrays = 60.0 * n
    base = 150e6  # the interpreter and the imported libraries
    return int(base + 12.0 * factor_entries + 12.0 * matrix_entries + 8.0 * arrays)


def available_memory_bytes() -> int:
    """Memory this process may use: MemAvailable from /proc/meminfo, else physical memory."""
    try:
        with open("/proc/meminfo") as f:
            for line in f:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    try:
        return int(os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES"))
    except (ValueError, OSError, AttributeError):
        return 8 * 1024**3
