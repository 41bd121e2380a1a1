"""Everything a run writes: history, summary, and the one call that writes all files."""
from __future__ import annotations

import csv
import dataclasses
import io
from pathlib import Path

from .atomic import _jsonable, atomic_write_bytes, json_text
from .dxf import outline_dxf
from .figures import design_png, history_png
from .geojson import outline_geojson
from ..geometry.measure import outline_metrics
from ..geometry.shapes import domain_polygon
from ..spec import CAUTION, IterationRecord, Result
from .svg import outline_svg

FILES = ("outline.svg", "outline.dxf", "outline.geojson", "design.png",
         "history.png", "history.csv", "summary.json")


# --------------------------------------------------------------------------- tables

def history_csv(result: Result) -> str:
    """One row per IterationRecord, columns in dataclass field order, header first."""
    names = [f.name for f in dataclasses.fields(IterationRecord)]
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(names)
    for rec in result.history:
        writer.writerow([repr(getattr(rec, n)) if isinstance(getattr(rec, n), float)
                         else getattr(rec, n) for n in names])
    return buf.getvalue()


def _software_version() -> str:
    try:
        from .. import __version__
        return str(__version__)
    except ImportError:
        pass
    try:
        from importlib.metadata import version
        return version("levelform")
    except Exception:  # not installed either
        return "unknown"


def summary(result: Result) -> dict:
    """The summary record written to summary.json (plain JSON values)."""
    problem = result.problem
    domain = domain_polygon(problem)
    metrics = outline_metrics(result.outline, domain)
    g = result.grid
    units = problem.units
    data = {
        "compliance": result.compliance,
        "material_fraction": result.material_fraction,
        "target_material_fraction": problem.goal.material,
        "iterations": result.iterations,
        "converged": bool(result.converged),
        "status": result.status,
        "seconds": result.seconds,
        "outline_area": metrics["area"],
        "outline_length": metrics["outline_length"],
        "holes": metrics["holes"],
        "pieces": metrics["pieces"],
        "smallest_member_width": metrics["smallest_member_width"],
        "crisp_compliance": result.compliance if result.crisp_compliance is None else result.crisp_compliance,
        "fabrication": dict(result.fabrication or {}),
        "domain_area": domain.area,
        "units": {"length": units.length, "force": units.force,
                  "stress": units.stress, "compliance": units.compliance},
        "settings": dict(result.settings or {}),
        "grid": {"nx": g.nx, "ny": g.ny, "h": g.h, "x0": g.x0, "y0": g.y0},
        "case_compliance": dict(result.case_compliance or {}),
        "method": result.method,
        "problem": {"name": problem.name, "source": problem.source},
        "software": {"name": "levelform", "version": _software_version()},
        "caution": CAUTION,
    }
    return _jsonable(data)


# --------------------------------------------------------------------------- all

def export(result: Result, outdir) -> dict[str, Path]:
    """Write every output file of ``result`` into ``outdir`` (created if missing).

    All files are rendered in memory first, then each is written atomically, so a
    rendering error writes nothing and a disk error never leaves a partial file.
    Returns {file name: path}.
    """
    outdir = Path(outdir)
    rendered = {
        "outline.svg": outline_svg(result).encode("utf-8"),
        "outline.dxf": outline_dxf(result),
        "outline.geojson": outline_geojson(result).encode("utf-8"),
        "design.png": design_png(result),
        "history.png": history_png(result),
        "history.csv": history_csv(result).encode("utf-8"),
        "summary.json": json_text(summary(result)).encode("utf-8"),
    }
    outdir.mkdir(parents=True, exist_ok=True)
    return {name: atomic_write_bytes(outdir / name, data) for name, data in rendered.items()}
