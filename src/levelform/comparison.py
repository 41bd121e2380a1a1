"""A fair comparison of optimization methods on one problem.

Every method optimizes the same problem; then the crisp outline each one returns is
analysed by one and the same analysis (:func:`evaluate_crisp`): a grid twice as fine as the
problem's, each cell's stiffness scaled by the exact area share of the cell that the
outline covers, void at the ersatz ratio ``ERSATZ``. So no method is judged by its own
figure, which for density-based methods describes a grey design nobody can cut.
"""
from __future__ import annotations

import csv
import dataclasses
import io
from dataclasses import dataclass
from functools import partial
from pathlib import Path

import numpy as np
import shapely

from .methods.registry import method_names
from .fem.analysis import PlateSystem
from .fem.model import build_model
from .geometry.measure import outline_metrics
from .geometry.shapes import domain_polygon
from .spec import CAUTION, GridInfo, Problem, ProblemError

# Stiffness ratio of void to solid in the common analysis. Small enough that void carries
# no load worth speaking of (void cells add at most about ERSATZ relative stiffness), large
# enough that a floating piece of material keeps the direct solve well posed.
ERSATZ = 1e-6
REFINE = 2
DEFAULT_METHODS = method_names()  # every registered method

# Per-method scalar fields, in table order; comparison.csv has these columns (plus one
# crisp compliance column per load case when there are several).
FIELDS = (
    "method",
    "crisp_compliance",
    "ratio_to_levelset",
    "bodyfitted_compliance",
    "bodyfitted_ok",
    "own_compliance",
    "own_crisp_compliance",
    "material_fraction",
    "own_material_fraction",
    "outline_area",
    "outline_length",
    "holes",
    "pieces",
    "smallest_member_width",
    "iterations",
    "seconds",
    "converged",
    "status",
)


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
    fine = dataclasses.replace(
        problem,
        domain=dataclasses.replace(problem.domain, cell=cell),
        method=dataclasses.replace(problem.method, solver="auto"),
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
                    refine: int = REFINE) -> Comparison:
    """Run each method in ``methods`` (names in ``levelform.methods.METHODS``, or one
    comma-separated string) on ``problem`` and evaluate every crisp outline by
    :func:`evaluate_crisp`.

    ``progress``, if given, is called as ``progress(method_name, iteration_record)``.
    ``ratio_to_levelset`` is each crisp compliance over the level-set one (None when
    "levelset" is not among the methods). Raises ProblemError for an unknown method name.
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
        body, body_ok = _bodyfitted(problem, result.outline, ev["compliance"])
        rows[name] = {
            "method": name,
            "crisp_compliance": ev["compliance"],
            "ratio_to_levelset": None,
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
            "case_compliance": ev["case_compliance"],
        }
        results[name] = result
    if "levelset" in rows:
        ref = rows["levelset"]["crisp_compliance"]
        for row in rows.values():
            row["ratio_to_levelset"] = row["crisp_compliance"] / ref if ref > 0 else None
    return Comparison(problem=problem, methods=names, rows=rows, results=results,
                      evaluation=evaluation)


# --------------------------------------------------------------------------- records

def problem_record(problem: Problem) -> dict:
    """The problem's identity and units, as written into comparison.json."""
    from .io.export import units_record

    domain = domain_polygon(problem)
    return {
        "name": problem.name,
        "source": problem.source,
        "goal_material": problem.goal.material,
        "domain_area": domain.area,
        "cell": problem.domain.cell,
        "load_cases": {c.name: c.weight for c in problem.cases},
        "units": units_record(problem.units),
    }


def comparison_record(comparison: Comparison) -> dict:
    """The content of comparison.json (plain values)."""
    from .io.export import software_record

    return {
        "methods": {m: dict(comparison.rows[m]) for m in comparison.methods},
        "problem": problem_record(comparison.problem),
        "evaluation": dict(comparison.evaluation),
        "caution": CAUTION,
        "software": software_record(),
    }


def _cell(v) -> str:
    if v is None:
        return ""
    if isinstance(v, float):
        return repr(v) if np.isfinite(v) else ""
    return str(v)


def comparison_csv(comparison: Comparison) -> str:
    """One row per method, header first: the FIELDS, then, with several load cases, one
    ``crisp_compliance[CASE]`` column per case."""
    cases = [c.name for c in comparison.problem.cases]
    extra = [f"crisp_compliance[{c}]" for c in cases] if len(cases) > 1 else []
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(list(FIELDS) + extra)
    for m in comparison.methods:
        row = comparison.rows[m]
        w.writerow([_cell(row[f]) for f in FIELDS]
                   + [_cell(row["case_compliance"].get(c)) for c in cases if extra])
    return buf.getvalue()


def comparison_png(comparison: Comparison) -> bytes:
    """Side by side, one panel per method: the crisp outline over the domain, titled with
    the method and its crisp compliance; the caution line at the bottom."""
    from matplotlib.patches import PathPatch

    from .geometry.shapes import _polygons
    from .io.figures import COLOR_DOMAIN, COLOR_DOMAIN_FILL, COLOR_MATERIAL, _figure, _mpl_path, _png_bytes

    problem = comparison.problem
    domain = domain_polygon(problem)
    minx, miny, maxx, maxy = domain.bounds
    w, h = max(maxx - minx, 1e-12), max(maxy - miny, 1e-12)
    n = len(comparison.methods)
    # Sizes in inches: a panel at most 4 wide and 4.5 tall (at least 2.6 wide, room for
    # the title), then side margin, gap, title band and caution band.
    panel_w = min(4.0, max(2.6, 4.5 * w / h))
    panel_h = min(max(panel_w * h / w, 1.2), 6.0)
    side, gap, top, foot = 0.2, 0.15, 0.75, 0.45
    fig_w, fig_h = panel_w * n + gap * (n - 1) + 2 * side, panel_h + top + foot
    fig = _figure(fig_w, fig_h)
    unit = problem.units.compliance
    pad = 0.03 * max(w, h)
    for k, m in enumerate(comparison.methods):
        ax = fig.add_axes(((side + k * (panel_w + gap)) / fig_w, foot / fig_h,
                           panel_w / fig_w, panel_h / fig_h))
        ax.add_patch(PathPatch(_mpl_path([domain]), facecolor=COLOR_DOMAIN_FILL,
                               edgecolor=COLOR_DOMAIN, lw=0.8, zorder=1))
        mp = _mpl_path(_polygons(comparison.results[m].outline))
        if mp is not None:
            ax.add_patch(PathPatch(mp, facecolor=COLOR_MATERIAL, edgecolor="none", zorder=2))
        ax.set_xlim(minx - pad, maxx + pad)
        ax.set_ylim(miny - pad, maxy + pad)
        ax.set_aspect("equal", adjustable="box")
        ax.set_xticks([])
        ax.set_yticks([])
        for spine in ax.spines.values():
            spine.set_visible(False)
        row = comparison.rows[m]
        ax.set_title(f"{m}\ncrisp compliance {row['crisp_compliance']:.5g} {unit}\n"
                     f"material {row['material_fraction']:.3f}", fontsize=9)
    fig.text(0.5, 0.05 / fig_h, "Crisp outlines analysed alike on one grid. " + CAUTION,
             ha="center", va="bottom", fontsize=6.5, color="#5c677d", wrap=True)
    return _png_bytes(fig, dpi=120)


def write_comparison(comparison: Comparison, outdir) -> dict[str, Path]:
    """Write comparison.json, comparison.csv, comparison.png and report.html into
    ``outdir`` (created if missing). Everything is rendered in memory first and each file
    written atomically, so a failure leaves no half-written file. Returns {name: path}."""
    from .io.atomic import atomic_write_bytes, json_text
    from .io.report import report_html

    overview = comparison_png(comparison)
    rendered = {
        "comparison.json": json_text(comparison_record(comparison)).encode("utf-8"),
        "comparison.csv": comparison_csv(comparison).encode("utf-8"),
        "comparison.png": overview,
        "report.html": report_html(comparison, overview_png=overview).encode("utf-8"),
    }
    outdir = Path(outdir)
    if outdir.exists() and not outdir.is_dir():
        raise ProblemError([f"outdir: {outdir} exists and is not a folder"])
    outdir.mkdir(parents=True, exist_ok=True)
    return {name: atomic_write_bytes(outdir / name, data) for name, data in rendered.items()}
