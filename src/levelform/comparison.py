"""A fair comparison of optimization methods on one problem.

Every method optimizes the same problem; then the crisp outline each one returns is
analysed by one and the same analysis (:func:`evaluate_crisp`): a grid twice as fine as the
problem's, each cell's stiffness scaled by the exact area share of the cell that the
outline covers, void at the ersatz ratio ``ERSATZ``. So no method is judged by its own
figure, which for density-based methods describes a grey design nobody can cut.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from functools import partial

import numpy as np
import shapely

from .fem.analysis import PlateSystem
from .fem.model import build_model, resolve_settings
from .geometry.measure import fabrication_report, outline_metrics
from .geometry.shapes import domain_polygon
from .io.comparison_files import (  # noqa: F401  (the writers, importable from here too)
    FIELDS,
    comparison_csv,
    comparison_record,
    problem_record,
    write_comparison,
)
from .methods.registry import method_names
from .spec import GridInfo, Problem, ProblemError

# Stiffness ratio of void to solid in the common analysis. Small enough that void carries
# no load worth speaking of (void cells add at most about ERSATZ relative stiffness), large
# enough that a floating piece of material keeps the direct solve well posed.
ERSATZ = 1e-6
REFINE = 2
DEFAULT_METHODS = method_names()  # every registered method

# The per-method scalar fields, in table order (FIELDS), live with the writers in
# io/comparison_files.py.


@dataclass(frozen=True)
class Comparison:
    """The outcome of :func:`compare_methods`.

    ``rows`` maps method name -> plain per-method figures (keys of ``FIELDS`` plus
    ``case_compliance``); ``results`` keeps each method's Result for figures;
    ``evaluation`` describes the common analysis (grid_cell, ersatz, refine).
    """

    problem: Problem
    methods: tuple
    rows: dict
    results: dict
    evaluation: dict
    truss: object = None  # the levelform.truss.TrussResult of the reference, None if not computed


# --------------------------------------------------------------------------- evaluation

def cell_boxes(grid: GridInfo, cells: np.ndarray) -> np.ndarray:
    """shapely boxes of the cells with flat indices ``cells`` (j * nx + i)."""
    j, i = np.divmod(np.asarray(cells, dtype=np.int64), grid.nx)
    x0 = grid.x0 + grid.h * i
    y0 = grid.y0 + grid.h * j
    return shapely.box(x0, y0, x0 + grid.h, y0 + grid.h)


def area_fractions(grid: GridInfo, cells: np.ndarray, outline) -> np.ndarray:
    """Exact share of each cell's area covered by ``outline`` (a shapely area geometry).

    Only cells the outline's boundary touches are intersected polygon by polygon; every
    other cell lies wholly inside or wholly outside, told apart by its centre.
    """
    cells = np.asarray(cells, dtype=np.int64)
    out = np.zeros(cells.size)
    if outline is None or outline.is_empty or cells.size == 0:
        return out
    h = grid.h
    boxes = cell_boxes(grid, cells)
    boundary = outline.boundary
    shapely.prepare(boundary)
    cut = shapely.intersects(boundary, boxes)
    j, i = np.divmod(cells[~cut], grid.nx)
    shapely.prepare(outline)
    out[~cut] = shapely.contains_xy(outline, grid.x0 + h * (i + 0.5), grid.y0 + h * (j + 0.5))
    if cut.any():
        out[cut] = shapely.area(shapely.intersection(boxes[cut], outline)) / (h * h)
    return np.clip(out, 0.0, 1.0)


def evaluate_crisp(problem: Problem, outline, refine: int = REFINE, ersatz: float = ERSATZ) -> dict:
    """Compliance of a crisp ``outline`` by the common analysis.

    The grid has cells of ``problem.domain.cell / refine`` over the same domain; each active
    cell's stiffness scale is ``ersatz + (1 - ersatz) * (area share covered by outline)``;
    one linear solve, by the solver "auto" picks for that grid held to a relative residual
    of 1e-10 (whatever ``method.solver`` says, so every method's outline meets the very
    same computation). Returns plain values: compliance
    (weighted over the load cases), case_compliance, material_fraction (outline area /
    domain area), grid_cell, ersatz, refine, n_cells.
    """
    if int(refine) != refine or refine < 1:
        raise ProblemError([f"refine: must be a whole number >= 1, got {refine!r}"])
    refine = int(refine)
    cell = problem.domain.cell / refine
    # The pads belong to the problem as the methods ran it: keep their radius, which the
    # default ties to the problem's own cell on coarse grids, rather than resolve it anew.
    fine = dataclasses.replace(
        problem,
        domain=dataclasses.replace(problem.domain, cell=cell),
        method=dataclasses.replace(problem.method, solver="auto", pad_radius=resolve_settings(problem).pad_radius),
    )
    model = build_model(fine)
    frac = area_fractions(model.grid, model.cells, outline)
    scale = ersatz + (1.0 - ersatz) * frac
    system = PlateSystem(model, precise=True)
    state = system.analyse(scale)
    domain = domain_polygon(problem)
    area = 0.0 if outline is None or outline.is_empty else float(outline.area)
    return {
        "compliance": float(state.compliance),
        "case_compliance": {n: float(v) for n, v in zip(model.case_names, state.case_compliance)},
        "material_fraction": area / domain.area,
        "grid_cell": float(cell),
        "ersatz": float(ersatz),
        "refine": refine,
        "n_cells": model.n_cells,
        "solver": system.solver.name,
    }


def _bodyfitted(problem, outline, grid_compliance):
    """(compliance, ok) from the body-fitted check ``levelform.verify.verify_outline``, or
    (None, None) when that module, its ``verify_outline`` or a package it needs is missing.
    ``ok`` is False when a support or load lies partly off the outline (for example a
    clamped edge the design leaves bare); the compliance is then that of the outline as
    it is held and loaded, which is what the grid analysis sees too."""
    try:
        from .bodyfitted.check import verify_outline

        out = verify_outline(problem, outline, grid_compliance=grid_compliance)
    except ImportError:
        return None, None
    if isinstance(out, dict):
        comp, ok = out.get("compliance"), out.get("ok")
    else:
        comp, ok = getattr(out, "compliance", out), getattr(out, "ok", None)
    return (None if comp is None else float(comp)), (None if ok is None else bool(ok))


# --------------------------------------------------------------------------- truss reference

def truss_evaluation(problem: Problem, spacing=None):
    """The truss ground-structure reference for a comparison: (TrussResult or None, record).

    The record holds ``truss_compliance`` (the weighted sum of the cases' references; the
    case's own for one case), ``truss_case_compliance``, ``truss_spacing``, ``truss_nodes``,
    ``truss_seconds`` and ``truss_note``: None when the reference was computed, else why not
    (too large, no truss can carry the loads, ...). It never raises for a problem it cannot
    serve: the comparison goes on without it."""
    from .truss import truss_reference

    record = {"truss_compliance": None, "truss_case_compliance": None, "truss_spacing": None,
              "truss_nodes": None, "truss_seconds": None, "truss_note": None}
    try:
        ref = truss_reference(problem, spacing=spacing)
    except ProblemError as exc:
        record["truss_note"] = "truss reference not computed: " + "; ".join(exc.problems)
        return None, record
    record.update(truss_compliance=ref.compliance, truss_case_compliance=ref.case_compliance,
                  truss_spacing=ref.spacing, truss_nodes=ref.nodes, truss_seconds=ref.seconds)
    unfinished = [c for c in ref.cases if c.status != "optimal"]
    notes = list(ref.notes) + [f"load case {c.name!r}: {c.status}; W is within "
                               f"{100 * (c.W / c.W_lower - 1):.2g} % of the ground structure's optimum"
                               for c in unfinished]
    record["truss_note"] = "; ".join(notes) if notes else None
    return ref, record


# --------------------------------------------------------------------------- comparison

def check_methods(methods, key: str = "methods") -> tuple:
    """Method names as a tuple without repeats, from a sequence or one comma-separated
    string; raises ProblemError naming ``key`` for an empty list or an unknown name."""
    from .methods import METHODS

    if isinstance(methods, str):
        methods = methods.split(",")
    names = tuple(dict.fromkeys(m.strip() for m in methods if m and m.strip()))
    valid = ", ".join(sorted(METHODS))
    if not names:
        raise ProblemError([f"{key}: no method given; valid: {valid}"])
    bad = [m for m in names if m not in METHODS]
    if bad:
        raise ProblemError([f"{key}: unknown method {m!r}; valid: {valid}" for m in bad])
    return names


def compare_methods(problem: Problem, methods=DEFAULT_METHODS, progress=None,
                    refine: int = REFINE, truss: bool = True) -> Comparison:
    """Run each method in ``methods`` (names in ``levelform.methods.METHODS``, or one
    comma-separated string) on ``problem`` and evaluate every crisp outline by
    :func:`evaluate_crisp`.

    ``progress``, if given, is called as ``progress(method_name, iteration_record)``.
    ``ratio_to_levelset`` is each crisp compliance over the level-set one (None when
    "levelset" is not among the methods). ``ratio_to_truss`` is each crisp compliance over
    the truss ground-structure reference (:func:`truss_evaluation`; None when ``truss`` is
    False or the reference could not be computed, and the evaluation's ``truss_note`` says
    why). Raises ProblemError for an unknown method name.
    """
    from .methods import optimize

    names = check_methods(methods)
    domain = domain_polygon(problem)
    rows, results = {}, {}
    evaluation = None
    for name in names:
        p = dataclasses.replace(problem, method=dataclasses.replace(problem.method, name=name))
        result = optimize(p, progress=None if progress is None else partial(progress, name))
        ev = evaluate_crisp(problem, result.outline, refine=refine)
        evaluation = {k: ev[k] for k in ("grid_cell", "ersatz", "refine", "n_cells", "solver")}
        metrics = outline_metrics(result.outline, domain)
        limits = fabrication_report(result.outline, domain, problem.fabrication)["limits"]
        body, body_ok = _bodyfitted(problem, result.outline, ev["compliance"])
        rows[name] = {
            "method": name,
            "crisp_compliance": ev["compliance"],
            "ratio_to_levelset": None,
            "truss_compliance": None,
            "ratio_to_truss": None,
            "bodyfitted_compliance": body,
            "bodyfitted_ok": body_ok,
            "own_compliance": float(result.compliance),
            "own_crisp_compliance": (None if result.crisp_compliance is None
                                     else float(result.crisp_compliance)),
            "material_fraction": ev["material_fraction"],
            "own_material_fraction": float(result.material_fraction),
            "outline_area": metrics["area"],
            "outline_length": metrics["outline_length"],
            "holes": metrics["holes"],
            "pieces": metrics["pieces"],
            "smallest_member_width": metrics["smallest_member_width"],
            "iterations": int(result.iterations),
            "seconds": float(result.seconds),
            "converged": bool(result.converged),
            "status": str(result.status),
            # Whether the outline meets every [fabrication] limit (None: none asked for), and
            # the measured value of each; only the level set shapes its design to them.
            "limits_met": (all(v["met"] for v in limits.values()) if limits else None),
            "limits": {k: v["measured"] for k, v in limits.items()},
            "case_compliance": ev["case_compliance"],
        }
        results[name] = result
    if "levelset" in rows:
        ref = rows["levelset"]["crisp_compliance"]
        for row in rows.values():
            row["ratio_to_levelset"] = row["crisp_compliance"] / ref if ref > 0 else None
    ref, record = truss_evaluation(problem) if truss else (None, {"truss_note": "truss reference not asked for"})
    evaluation = {**evaluation, **record}
    tc = record.get("truss_compliance")
    for row in rows.values():
        row["truss_compliance"] = tc
        row["ratio_to_truss"] = row["crisp_compliance"] / tc if tc else None
    return Comparison(problem=problem, methods=names, rows=rows, results=results,
                      evaluation=evaluation, truss=ref)
