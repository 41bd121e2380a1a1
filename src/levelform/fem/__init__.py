"""Finite elements on the fixed grid: the model (cells, nodes, dofs, supports, loads, keep
regions), element matrices, assembly, linear solvers (direct, PARDISO, geometric multigrid)
and one analysis of a design."""
