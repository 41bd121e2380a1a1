"""One linear-elastic analysis of a design on the fixed grid, for any method.

A design is a stiffness scale per active cell (1 = solid, the ersatz ratio = void);
all load cases share one factorization.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..timing import phase
from .assembly import make_assembler
from .model import Model
from .solvers import make_solver


@dataclass(frozen=True)
class State:
    displacement: np.ndarray  # (n_dof, n_cases), zero at supported dofs
    case_compliance: np.ndarray  # (n_cases,)
    compliance: float  # weighted sum over cases
    cell_energy: np.ndarray  # (n_cells, n_cases): u_e^T K_solid u_e, energy of the cell as if solid


class PlateSystem:
    """Assembles and solves the plate on ``model`` for a cell stiffness scale.

    Parameters
    ----------
    model : levelform.fem.model.Model
    physics : a levelform.physics object (default: the model's own, from its problem)
    precise : hold an iterative solver to a tight residual (fem.solvers.make_solver)
    """

    def __init__(self, model: Model, physics=None, precise: bool = False):
        self.model = model
        self.physics = model.physics if physics is None else physics
        if self.physics.dofs_per_node != model.dofs_per_node:
            raise ValueError(f"the model has {model.dofs_per_node} unknowns per node, the physics "
                             f"{self.physics.name!r} {self.physics.dofs_per_node}")
        self.KE = self.physics.element_matrix()
        self.assembler = make_assembler(model, self.KE)
        self.solver = make_solver(model.settings.solver, model.n_free, model=model, KE=self.KE, precise=precise)
        self._last = None
        self.solves = 0
        self.clock = None  # a timing.PhaseClock to time assembly, solve and energies

    def analyse(self, scale: np.ndarray) -> State:
        m = self.model
        with phase(self.clock, "assembly"):
            # the matrix is not kept past this analysis, so its storage may be reused
            K = self.assembler.matrix(scale, reuse=True)
        with phase(self.clock, "solve"):
            # the cell scale factors go along: a solver that builds coarse grids from them uses them
            Uf = self.solver.solve(K, m.forces, x0=self._last, scale=scale)
        Uf = Uf.reshape(m.n_free, -1)
        if not np.all(np.isfinite(Uf)):
            raise FloatingPointError("the finite-element solution is not finite")
        self._last = Uf
        self.solves += 1
        with phase(self.clock, "sensitivity"):
            U = np.zeros((m.n_dof, Uf.shape[1]))
            U[m.free >= 0] = Uf
            case_c = np.einsum("ic,ic->c", m.forces, Uf)
            energy = np.empty((m.edofs.shape[0], U.shape[1]))
            for c in range(U.shape[1]):  # per case: a gather and one (n_cells, k) @ (k, k) product
                ue = U[:, c][m.edofs]
                energy[:, c] = np.einsum("ei,ei->e", ue @ self.KE, ue)
        return State(
            displacement=U,
            case_compliance=case_c,
            compliance=float(case_c @ m.case_weights),
            cell_energy=energy,
        )

    def energy_density(self, state: State) -> np.ndarray:
        """Weighted strain-energy density of each cell as if solid (force/length^2)."""
        return self.physics.energy_density(state.cell_energy, self.model.case_weights, self.model.grid.h)

    def hole_sensitivity(self, state: State) -> np.ndarray:
        """Topological derivative of the weighted compliance per unit hole area at each cell
        centre (the physics' formula, from the solid stress of each cell): opening a small
        hole of area a raises compliance by about a * t * value."""
        h = self.model.grid.h
        U = state.displacement
        g = np.zeros(self.model.edofs.shape[0])
        for c, w in enumerate(self.model.case_weights):
            g += w * self.physics.topological_derivative(self.physics.centre_stress(U[:, c][self.model.edofs], h))
        return g
