"""Level-set operations on the fixed grid: cut-cell areas, upwind Hamilton-Jacobi steps,
Helmholtz smoothing, reinitialization and morphology (operators), compiled loops (kernels)."""
