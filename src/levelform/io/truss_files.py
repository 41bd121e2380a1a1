"""What the truss reference writes: truss.json, truss.dxf and truss.png."""
from __future__ import annotations

import io
import math
from pathlib import Path

import numpy as np

from ..geometry.shapes import domain_polygon, keep_regions, polygon_parts
from ..spec import CAUTION, ProblemError
from .atomic import atomic_write_bytes, json_text
from .dxf import dxf_bytes, dxf_document, dxf_polyline, dxf_supports_and_loads, fixed_dxf_metadata
from .figures import (
    COLOR_DOMAIN,
    COLOR_DOMAIN_FILL,
    COLOR_KEEP_EMPTY,
    COLOR_LOAD,
    COLOR_SUPPORT,
    load_arrows,
    new_figure,
    png_bytes,
    polygon_path,
    support_glyphs,
)
from .scene import coordinate_rings, round_coordinate

__all__ = ["FILES", "truss_record", "truss_dxf", "truss_png", "truss_figure", "write_truss"]

FILES = ("truss.json", "truss.dxf", "truss.png")

# Bars in tension and in compression: our own two colours, and their DXF colour numbers.
COLOR_TENSION = "#b5523b"
COLOR_COMPRESSION = "#2f5d8a"
DXF_TRUSS_LAYERS = {"TRUSS_BARS": 7, "DOMAIN": 8, "KEEP_EMPTY": 30, "SUPPORTS": 5, "LOADS": 1}
DXF_TENSION, DXF_COMPRESSION = 1, 5


def _bars(case) -> list:
    return [{"start": [float(a[0]), float(a[1])], "end": [float(b[0]), float(b[1])],
             "length": float(math.hypot(*(b - a))), "force": float(q), "area": float(s)}
            for a, b, q, s in zip(case.start, case.end, case.force, case.area)]


def _case_record(case, caution_words: str) -> dict:
    return {
        "name": case.name,
        "weight": case.weight,
        "W": case.W,
        "W_lower_bound": case.W_lower,
        "compliance": case.compliance,
        "status": case.status,
        "rounds": case.rounds,
        "bars_in_final_lp": case.bars_in_lp,
        "max_virtual_strain": case.max_virtual_strain,
        "bars_kept": len(case.force),
        "bars": _bars(case),
        "reference": caution_words,
    }


def truss_record(result) -> dict:
    """The content of truss.json (plain values). With one load case the top-level
    ``compliance``, ``W`` and ``bars`` are that case's; with several, ``compliance`` is the
    weighted sum of the cases' references and ``W`` and ``bars`` are null (see ``cases``)."""
    from .comparison_files import problem_record
    from .export import software_record

    p = result.problem
    one = len(result.cases) == 1
    cases = [_case_record(c, f"the stiffest truss for load case {c.name!r} alone, of volume "
                             f"{result.volume:.6g} {p.units.length}^3") for c in result.cases]
    return {
        "compliance": result.compliance,
        "case_compliance": result.case_compliance,
        "W": result.cases[0].W if one else None,
        "bars": cases[0]["bars"] if one else None,
        "volume": result.volume,
        "E": result.E,
        "spacing": result.spacing,
        "spacing_is_default": result.spacing_default,
        "ground_structure": {
            "nodes": result.nodes,
            "candidate_bars_possible": result.node_pairs,
            "bars_in_final_lp": max(c.bars_in_lp for c in result.cases),
        },
        "status": "optimal" if all(c.status == "optimal" for c in result.cases)
                  else "; ".join(f"{c.name}: {c.status}" for c in result.cases),
        "cases": cases,
        "notes": list(result.notes),
        "seconds": result.seconds,
        "problem": problem_record(p),
        "caution": CAUTION,
        "software": software_record(),
        "version": software_record()["version"],
    }


def _widths(result, case):
    """In-plane width of each bar as a strip of the plate: area / thickness."""
    return case.area / result.problem.material.thickness


def truss_dxf(result) -> bytes:
    """DXF R2010: every kept bar of every case as a two-point LWPOLYLINE on layer
    TRUSS_BARS whose constant width is its area over the plate thickness (the width of a
    strip of the plate with that area), red in tension and blue in compression; the domain,
    keep-empty regions, supports and loads on their own layers."""
    p = result.problem
    domain = domain_polygon(p)
    _, empty = keep_regions(p)
    minx, miny, maxx, maxy = domain.bounds
    s = 0.03 * math.hypot(maxx - minx, maxy - miny)
    variables = [("PROBLEM", str(p.name)),
                 ("CONTENT", "truss ground-structure reference; bar width = area / thickness"),
                 ("CAUTION", CAUTION)]
    with fixed_dxf_metadata():
        doc, msp = dxf_document(str(p.units.length), variables, DXF_TRUSS_LAYERS)
        for r in coordinate_rings(domain):
            dxf_polyline(msp, r, "DOMAIN", True)
        for part in polygon_parts(empty):
            for r in coordinate_rings(part):
                dxf_polyline(msp, r, "KEEP_EMPTY", True)
        for case in result.cases:
            for a, b, q, w in zip(case.start, case.end, case.force, _widths(result, case)):
                e = dxf_polyline(msp, [a, b], "TRUSS_BARS", False,
                                 color=DXF_TENSION if q > 0 else DXF_COMPRESSION)
                e.dxf.const_width = round_coordinate(w)
        dxf_supports_and_loads(msp, p, domain, s, labels=False)
        return dxf_bytes(doc)


def truss_figure(result):
    """One panel per load case: the domain, supports and loads, and the kept bars with a
    line width in proportion to their area (red tension, blue compression)."""
    from matplotlib.collections import LineCollection
    from matplotlib.lines import Line2D
    from matplotlib.patches import PathPatch

    p = result.problem
    domain = domain_polygon(p)
    _, empty = keep_regions(p)
    minx, miny, maxx, maxy = domain.bounds
    w, h = max(maxx - minx, 1e-12), max(maxy - miny, 1e-12)
    s = 0.03 * math.hypot(w, h)
    k = len(result.cases)
    panel_w = 7.0 if k == 1 else 5.0
    fig_h = min(max(panel_w * h / w + 1.6, 3.0), 9.0)
    fig = new_figure(panel_w * k + 0.6, fig_h)
    top = max(a.max() for c in result.cases for a in [c.area] if a.size) if any(c.area.size for c in result.cases) else 1.0
    u = p.units
    for n, case in enumerate(result.cases):
        ax = fig.add_axes((0.04 + n * 0.96 / k, 0.14, 0.96 / k - 0.05, 0.74))
        ax.add_patch(PathPatch(polygon_path([domain]), facecolor=COLOR_DOMAIN_FILL, edgecolor=COLOR_DOMAIN,
                               lw=0.8, zorder=1))
        pe = polygon_path(polygon_parts(empty))
        if pe is not None:
            ax.add_patch(PathPatch(pe, facecolor="none", edgecolor=COLOR_KEEP_EMPTY, hatch="xxx", lw=0.8, zorder=2))
        segs = np.stack([case.start, case.end], axis=1)
        colors = [COLOR_TENSION if q > 0 else COLOR_COMPRESSION for q in case.force]
        ax.add_collection(LineCollection(segs, colors=colors, linewidths=0.4 + 4.0 * case.area / top,
                                         capstyle="round", zorder=3))
        for sup in p.supports:
            closed, opens, _ = support_glyphs(sup, s, domain)
            for c in closed:
                ax.fill(c[:, 0], c[:, 1], facecolor="white", edgecolor=COLOR_SUPPORT, lw=1.0, zorder=4)
            if opens:
                ax.add_collection(LineCollection(opens, colors=COLOR_SUPPORT, lw=1.0, zorder=4))
        for load in p.loads:
            if load.case != case.name:
                continue
            t, hd = load_arrows(load, 3.5 * s)
            if len(t):
                d = hd - t
                ax.quiver(t[:, 0], t[:, 1], d[:, 0], d[:, 1], angles="xy", scale_units="xy", scale=1.0,
                          color=COLOR_LOAD, width=0.004, zorder=5)
        pad = 5.0 * s
        ax.set_xlim(minx - pad, maxx + pad)
        ax.set_ylim(miny - pad, maxy + pad)
        ax.set_aspect("equal", adjustable="box")
        ax.set_xlabel(f"x [{u.length}]")
        title = f"{p.name}" if k == 1 else f"load case {case.name}"
        ax.set_title(f"{title}: W {case.W:.5g} {u.force}*{u.length}, compliance {case.compliance:.5g} "
                     f"{u.compliance}", fontsize=8)
    fig.legend(handles=[Line2D([], [], color=COLOR_TENSION, lw=2, label="tension"),
                        Line2D([], [], color=COLOR_COMPRESSION, lw=2, label="compression")],
               loc="upper right", fontsize=8, frameon=False, ncol=2)
    fig.text(0.02, 0.955, f"Truss reference: {result.nodes} nodes {result.spacing:.4g} {u.length} apart; "
             f"volume {result.volume:.5g} {u.length}^3; line width in proportion to bar area",
             fontsize=8, color="#22303a")
    fig.text(0.5, 0.015, CAUTION, ha="center", va="bottom", fontsize=7, color="#5c677d")
    return fig


def truss_png(result) -> bytes:
    return png_bytes(truss_figure(result))


def write_truss(result, outdir) -> dict[str, Path]:
    """Write truss.json, truss.dxf and truss.png into ``outdir`` (created if missing); each
    is rendered in memory first and written atomically. Returns {name: path}."""
    rendered = {
        "truss.json": json_text(truss_record(result)).encode("utf-8"),
        "truss.dxf": truss_dxf(result),
        "truss.png": truss_png(result),
    }
    outdir = Path(outdir)
    if outdir.exists() and not outdir.is_dir():
        raise ProblemError([f"-o: {outdir} exists and is not a folder"])
    outdir.mkdir(parents=True, exist_ok=True)
    return {name: atomic_write_bytes(outdir / name, data) for name, data in rendered.items()}
