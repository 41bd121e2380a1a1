"""Everything a run writes: history, summary, and the one call that writes all files."""
from __future__ import annotations

import csv
import dataclasses
import io
from pathlib import Path

from ..geometry.measure import outline_metrics
from ..geometry.shapes import domain_polygon
from ..spec import CAUTION, IterationRecord, ProblemError, Result
from .atomic import atomic_write_bytes, json_text, jsonable
from .dxf import outline_dxf
from .figures import design_png, history_png
from .geojson import outline_geojson
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


def software_record() -> dict:
    """Which program wrote a record: the ``software`` entry of every JSON file written.

    Returns
    -------
    dict
        ``{"name": "levelform", "version": levelform.__version__}``.
    """
    from ..version import __version__

    return {"name": "levelform", "version": str(__version__)}


def units_record(units) -> dict:
    """The units of a problem as written into summary.json, verify.json and comparison.json.

    Parameters
    ----------
    units : levelform.spec.Units

    Returns
    -------
    dict
        ``length``, ``force``, ``stress`` (force/length^2) and ``compliance``
        (force*length), each a unit name.
    """
    return {"length": units.length, "force": units.force, "stress": units.stress,
            "compliance": units.compliance}


def summary(result: Result) -> dict:
    """The summary record written to summary.json (plain JSON values)."""
    problem = result.problem
    domain = domain_polygon(problem)
    metrics = outline_metrics(result.outline, domain)
    g = result.grid
    data = {
        "compliance": result.compliance,
        "material_fraction": result.material_fraction,
        "target_material_fraction": problem.goal.material,
        "iterations": result.iterations,
        "exported_iteration": result.iterations if result.exported_iteration is None else result.exported_iteration,
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
        "units": units_record(problem.units),
        "settings": dict(result.settings or {}),
        "grid": {"nx": g.nx, "ny": g.ny, "h": g.h, "x0": g.x0, "y0": g.y0},
        "case_compliance": dict(result.case_compliance or {}),
        "method": result.method,
        "problem": {"name": problem.name, "source": problem.source},
        "software": software_record(),
        "caution": CAUTION,
    }
    return jsonable(data)


# --------------------------------------------------------------------------- all

def export(result: Result, outdir, *, overwrite: bool = False) -> dict[str, Path]:
    """Write every output file of ``result`` into ``outdir`` (created if missing).

    Parameters
    ----------
    result : Result
        What an optimization returned.
    outdir : str or path-like
        The folder to write into. A folder that already holds anything is refused unless
        ``overwrite`` is true, so an earlier run's results are never replaced by accident.
    overwrite : bool, default False
        Write into a non-empty folder, replacing levelform's files there (those in
        :data:`FILES`); other files in it are left alone.

    Returns
    -------
    dict of str to Path
        {file name: path} of every file written.

    Raises
    ------
    ProblemError
        ``outdir`` is not empty and ``overwrite`` is false, or it exists and is not a
        folder; nothing is written then.

    All files are rendered in memory first, then each is written atomically, so a
    rendering error writes nothing and a disk error never leaves a partial file.
    """
    outdir = Path(outdir)
    if outdir.exists() and not outdir.is_dir():
        raise ProblemError(f"outdir: {outdir} exists and is not a folder")
    if not overwrite and outdir.is_dir() and any(outdir.iterdir()):
        raise ProblemError(f"outdir: the folder {outdir} is not empty; pass overwrite=True to replace "
                           "its results, or choose another folder")
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
