"""What every method does at its end: turn its last design into a levelform.spec.Result."""
from __future__ import annotations

import time

import numpy as np

from ..spec import Result

__all__ = ["build_result"]


def build_result(problem, model, system, name: str, *, outline, phi, cell_design, state,
                 material_fraction: float, history, converged: bool, status: str, settings: dict,
                 t_start: float, crisp_compliance=None, fabrication=None,
                 exported_iteration=None) -> Result:
    """The Result of a run.

    Parameters
    ----------
    problem, model, system : the problem, its grid model and the fem.analysis.PlateSystem used
    name : the method's registry name
    outline : the crisp outline (shapely) the run exports
    phi : nodal level set (ny + 1, nx + 1) whose zero contour is the outline
    cell_design : per active cell, the method's own design (material fraction or density)
    state : the fem.analysis.State of the method's own last design (its compliance figures)
    material_fraction, history, converged, status : as reported
    settings : the resolved settings; the linear solver used (and why, if it differs from
        the one asked for) is added
    t_start : time.perf_counter() at the start of the run
    crisp_compliance : the outline's compliance, for methods whose own design is not crisp
    fabrication : geometry.measure.fabrication_report of the outline, where the method has one
    exported_iteration : the iteration whose design this is, when not the last
    """
    g = model.grid
    dens = np.full(g.ny * g.nx, np.nan)
    dens[model.cells] = cell_design
    solver = system.solver
    return Result(
        problem=problem,
        method=name,
        outline=outline,
        compliance=float(state.compliance),
        material_fraction=float(material_fraction),
        iterations=len(history),
        converged=converged,
        status=status,
        seconds=time.perf_counter() - t_start,
        history=tuple(history),
        settings={**settings, "solver_used": solver.name, **({"solver_note": solver.note} if solver.note else {})},
        grid=g,
        phi=phi,
        density=dens.reshape(g.ny, g.nx),
        case_compliance={k: float(v) for k, v in zip(model.case_names, state.case_compliance)},
        crisp_compliance=None if crisp_compliance is None else float(crisp_compliance),
        fabrication={} if fabrication is None else fabrication,
        exported_iteration=len(history) if exported_iteration is None else int(exported_iteration),
    )
