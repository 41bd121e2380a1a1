"""One linear-elastic analysis of a design on the fixed grid, for any method.

A design is a stiffness scale per active cell (1 = solid, the ersatz ratio = void);
all load cases share one factorization.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..timing import phase
from .assembly import Assembler
from .elements import centre_strain_operator, elasticity_matrix, element_stiffness
from .model import Model
from .solvers import make_solver


@dataclass(frozen=True)
class State:
    displacement: np.ndarray  # (n_dof, n_cases), zero at supported dofs
    case_compliance: np.ndarray  # (n_cases,)
    compliance: float  # weighted sum over cases
    cell_energy: np.ndarray  # (n_cells, n_cases): u_e^T K_solid u_e, energy of the cell as if solid


class PlateSystem:
    """Assembles and solves the plate on ``model`` for a cell stiffness scale; ``precise``
    holds an iterative solver to a tight residual (fem.make_solver)."""

    def __init__(self, model: Model, E: float, nu: float, thickness: float, precise: bool = False):
        self.model = model
        self.E, self.nu, self.t = E, nu, thickness
        self.KE = element_stiffness(E, nu, thickness)
        from .multigrid import GridMultigrid, LatticeAssembler

        try:  # the same matrices as fem.Assembler for a fraction of its memory and set-up time
            self.assembler = LatticeAssembler(model, self.KE)
        except ValueError:  # dofs not numbered in grid order
            self.assembler = Assembler(model.edofs, model.free, model.n_free, self.KE)
        self.solver = make_solver(model.settings.solver, model.n_free, model=model, KE=self.KE, precise=precise)
        # The multigrid solver builds its coarse grids from the cell scale factors.
        self._pass_scale = isinstance(self.solver, GridMultigrid)
        self._reuse = isinstance(self.assembler, LatticeAssembler)
        self._last = None
        self.solves = 0
        self.clock = None  # a timing.PhaseClock to time assembly, solve and energies

    def analyse(self, scale: np.ndarray) -> State:
        m = self.model
        with phase(self.clock, "assembly"):
            # the matrix is not kept past this analysis, so its storage is reused
            K = self.assembler.matrix(scale, reuse=True) if self._reuse else self.assembler.matrix(scale)
        extra = {"scale": scale} if self._pass_scale else {}
        with phase(self.clock, "solve"):
            Uf = self.solver.solve(K, m.forces, x0=self._last, **extra)
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
            for c in range(U.shape[1]):  # per case: a gather and one (n_cells, 8) @ (8, 8) product
                ue = U[:, c][m.edofs]
                energy[:, c] = np.einsum("ei,ei->e", ue @ self.KE, ue)
        return State(
            displacement=U,
            case_compliance=case_c,
            compliance=float(case_c @ m.case_weights),
            cell_energy=energy,
        )

    def energy_density(self, state: State) -> np.ndarray:
        """Weighted strain-energy density sigma:eps of each cell as if solid (force/length^2)."""
        h = self.model.grid.h
        return state.cell_energy @ self.model.case_weights / (self.t * h * h)

    def hole_sensitivity(self, state: State) -> np.ndarray:
        """Topological derivative of the weighted compliance per unit hole area at each cell
        centre, (4 s:s - (tr s)^2) / E in plane stress (Novotny and Sokolowski 2013;
        Allaire et al. 2005): opening a small hole of area a raises compliance by about
        a * t * value. Uses the solid stress of each cell."""
        h = self.model.grid.h
        B0 = centre_strain_operator(h)
        D = elasticity_matrix(self.E, self.nu)
        DB = (D @ B0).T  # (8, 3): cell dofs -> centre stress
        U = state.displacement
        g = np.zeros(self.model.edofs.shape[0])
        for c, w in enumerate(self.model.case_weights):
            s = U[:, c][self.model.edofs] @ DB  # (n_cells, 3)
            ss = s[:, 0] ** 2 + s[:, 1] ** 2 + 2.0 * s[:, 2] ** 2
            tr = s[:, 0] + s[:, 1]
            g += w * ((4.0 * ss - tr**2) / self.E)
        return g
