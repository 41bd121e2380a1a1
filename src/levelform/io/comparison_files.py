"""What a comparison writes: comparison.json, comparison.csv, comparison.png and report.html."""
from __future__ import annotations

import csv
import io
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from ..geometry.shapes import domain_polygon
from ..spec import CAUTION, Problem, ProblemError

if TYPE_CHECKING:
    from ..comparison import Comparison

__all__ = ["FIELDS", "case_ratio", "comparison_csv", "comparison_record", "problem_record", "write_comparison"]


# --------------------------------------------------------------------------- records

# Per-method scalar fields, in table order; comparison.csv has these columns (plus one
# crisp compliance column per load case when there are several).
FIELDS = (
    "method",
    "crisp_compliance",
    "ratio_to_levelset",
    "truss_compliance",
    "ratio_to_truss",
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
    "limits_met",
)


def problem_record(problem: Problem) -> dict:
    """The problem's identity and units, as written into comparison.json."""
    from .export import units_record

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
    from .export import software_record

    return {
        "methods": {m: dict(comparison.rows[m]) for m in comparison.methods},
        "problem": problem_record(comparison.problem),
        "evaluation": dict(comparison.evaluation),
        "caution": CAUTION,
        "software": software_record(),
    }


def case_ratio(row: dict, reference: dict, case: str):
    """One load case's crisp compliance over that case's truss reference, or None."""
    c, r = row["case_compliance"].get(case), (reference or {}).get(case)
    return c / r if c is not None and r else None


def _cell(v) -> str:
    if v is None:
        return ""
    if isinstance(v, float):
        return repr(v) if np.isfinite(v) else ""
    return str(v)


def comparison_csv(comparison: Comparison) -> str:
    """One row per method, header first: the FIELDS, then, with several load cases, one
    ``crisp_compliance[CASE]`` column per case and, when the truss reference was computed,
    one ``ratio_to_truss[CASE]`` column per case (the case's crisp compliance over the
    case's own reference)."""
    cases = [c.name for c in comparison.problem.cases]
    extra = [f"crisp_compliance[{c}]" for c in cases] if len(cases) > 1 else []
    ref = (comparison.evaluation or {}).get("truss_case_compliance") or {}
    ratio_cols = [f"ratio_to_truss[{c}]" for c in cases] if len(cases) > 1 and ref else []
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(list(FIELDS) + extra + ratio_cols)
    for m in comparison.methods:
        row = comparison.rows[m]
        w.writerow([_cell(row[f]) for f in FIELDS]
                   + [_cell(row["case_compliance"].get(c)) for c in cases if extra]
                   + [_cell(case_ratio(row, ref, c)) for c in cases if ratio_cols])
    return buf.getvalue()


def write_comparison(comparison: Comparison, outdir) -> dict[str, Path]:
    """Write comparison.json, comparison.csv, comparison.png and report.html into
    ``outdir`` (created if missing). Everything is rendered in memory first and each file
    written atomically, so a failure leaves no half-written file. Returns {name: path}."""
    from .atomic import atomic_write_bytes, json_text
    from .figures import comparison_png
    from .report import report_html

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
