"""Checks across the sections of a problem, run once every section is read: loads belong to
declared cases; supports and loads touch the domain; the supports hold the part against
rigid-body motion; keep regions do not contradict each other, the supports, the loads or
the goal, nor cut a load off from every support; the grid resolves the domain and fits
into memory.

Each check adds its messages to ``errs``; none raises.
"""
from __future__ import annotations

import math
import re

import numpy as np
from shapely.ops import unary_union

from .. import resources
from ..geometry.shapes import item_geometry, region_geometry
from ..physics import PlaneStress, restrained_modes, restrained_rank
from ..spec import LoadCase, Support
from .messages import add_error, number_text, point_text, show

__all__ = ["MIN_CELLS_ACROSS", "check_cases", "check_grid", "check_load_paths",
           "check_placement", "check_regions", "check_rigid_body"]

MIN_CELLS_ACROSS = 4


def check_cases(data, declared, loads, errs):
    """The load cases of the problem, the declared ones checked against the loads.

    Without ``[[case]]`` tables every distinct ``case`` name of the loads is a case of
    weight 1. With them, case names must be unique, every load must name a declared case
    and every declared case must have a load (checked only when all loads parsed).

    Parameters
    ----------
    data : dict
        The whole parsed file (to tell a load's given ``case`` from the default).
    declared : list of LoadCase
        The ``[[case]]`` tables that parsed.
    loads : list of Load
        The loads that parsed; ``loads.complete`` is False when some did not.
    errs : list of str
        Messages so far; each problem found is added.

    Returns
    -------
    list of LoadCase
    """
    if "case" not in data or data["case"] == []:
        names = list(dict.fromkeys(ld.case for ld in loads))
        return [LoadCase(name=n, weight=1.0) for n in names]
    raw = data["case"] if isinstance(data["case"], list) else []
    seen = {}
    for i, t in enumerate(raw, 1):
        name = t.get("name") if isinstance(t, dict) else None
        if not isinstance(name, str) or not name.strip():
            continue
        if name in seen:
            add_error(errs, f"case[{i}].name", f'case "{name}" is already declared in '
                                               f"case[{seen[name]}]; case names must be unique")
        else:
            seen[name] = i
    if not seen:
        return list(declared)
    names = ", ".join(f'"{n}"' for n in seen)
    for ld in loads:
        if ld.case not in seen:
            given = "case" in _raw_item(data, ld.key)
            what = (f'case "{ld.case}" is not declared' if given
                    else f'no case given, so the load belongs to case "{ld.case}", which '
                         "is not declared")
            add_error(errs, f"{ld.key}.case" if given else ld.key,
                      f"{what}; declared [[case]] names: {names}")
    used = {ld.case for ld in loads}
    if getattr(loads, "complete", True):
        for n, i in seen.items():
            if n not in used:
                add_error(errs, f"case[{i}]", f'case "{n}" has no loads; add loads with '
                                              f'case = "{n}" or remove the case')
    return list(declared)


def _raw_item(data, key):
    m = re.fullmatch(r"(\w+)\[(\d+)\]", key)
    arr = data.get(m[1]) if m else None
    try:
        t = arr[int(m[2]) - 1]
    except (TypeError, IndexError):
        return {}
    return t if isinstance(t, dict) else {}


def check_placement(supports, loads, domain, cell, units, errs):
    """Every support and load must touch the domain.

    A point must lie within cell/2 of the domain (its holes count as outside), a segment
    wholly within cell/2 of it, a box must touch it.

    Parameters
    ----------
    supports, loads : list of Support, list of Load
    domain : shapely Polygon
        The domain with its holes.
    cell : float
        The grid cell size.
    units : Units
        For the messages.
    errs : list of str
        Messages so far; each problem found is added.

    Returns
    -------
    bool
        Whether every support touches the domain.
    """
    lu = units.length
    x0, y0, x1, y1 = domain.bounds
    tol = max(0.5 * cell, 1e-9 * max(x1 - x0, y1 - y0))  # never below rounding noise
    grown = None
    supports_ok = True
    for item in list(supports) + list(loads):
        before = len(errs)
        path = f"{item.key}.{item.kind}"
        geom = item_geometry(item)
        if item.kind == "point":
            d = domain.distance(geom)
            if d > tol:
                add_error(errs, path, f"{point_text(item.where)} lies {number_text(d)} {lu} outside "
                                      f"the domain; a point must be within cell/2 = "
                                      f"{number_text(tol)} {lu} of it (holes count as outside)")
        elif item.kind == "segment":
            if grown is None:
                grown = domain.buffer(tol)
            if not (domain.covers(geom) or grown.covers(geom)):
                out = geom.difference(domain).length
                add_error(errs, path, f"{number_text(out)} {lu} of the segment's "
                                      f"{number_text(geom.length)} {lu} lie outside the domain; "
                                      f"the whole segment must be within "
                                      f"cell/2 = {number_text(tol)} {lu} of it")
        elif not geom.intersects(domain):
            add_error(errs, path, f"the {item.kind} {show(list(item.where))} does not touch the domain")
        if isinstance(item, Support) and len(errs) > before:
            supports_ok = False
    return supports_ok


def _support_points(s, bounds):
    """Points whose fixed directions stand for support ``s`` in the rigid-body check."""
    if s.kind == "point":
        return [s.where]
    if s.kind == "segment":
        return list(s.where)
    if s.kind == "circle":
        cx, cy, r = s.where
        return [(cx + r, cy), (cx, cy + r), (cx - r, cy), (cx, cy - r)]
    x0, y0, x1, y1 = s.where
    if bounds is not None:
        x0, y0 = max(x0, bounds[0]), max(y0, bounds[1])
        x1, y1 = min(x1, bounds[2]), min(y1, bounds[3])
        if x1 < x0 or y1 < y0:
            return []
    return [(x0, y0), (x1, y0), (x1, y1), (x0, y1)]


def check_rigid_body(supports, domain, bounds, errs):
    """Refuse a support set that lets the plate slide or turn as a rigid body.

    A plane rigid motion is u = a (1, 0) + b (0, 1) + c (-y, x). Fixing x at (x, y)
    imposes a - c y = 0, fixing y imposes b + c x = 0; the supports hold the plate
    when these rows have rank 3. Coordinates are shifted and scaled by the domain size
    so the rank tolerance is relative to it. A segment stands for its two ends, a box for
    its corners (clipped to the domain's bounds). The message names what is left free:
    sliding in x or y, or rotation about a point.

    Parameters
    ----------
    supports : list of Support
        Checked only when every support parsed (``supports.complete``).
    domain : shapely Polygon or None
        The domain; None when it did not parse.
    bounds : tuple of float or None
        (xmin, ymin, xmax, ymax) of the outline points, used when ``domain`` is None.
    errs : list of str
        Messages so far; each problem found is added.
    """
    if not supports or not getattr(supports, "complete", True):
        return
    if domain is not None:
        bounds = domain.bounds
    pts = [p for s in supports for p in _support_points(s, bounds)]
    if bounds is None:
        if not pts:
            return
        a = np.asarray(pts)
        bounds = (a[:, 0].min(), a[:, 1].min(), a[:, 0].max(), a[:, 1].max())
    xc, yc = 0.5 * (bounds[0] + bounds[2]), 0.5 * (bounds[1] + bounds[3])
    size = max(bounds[2] - bounds[0], bounds[3] - bounds[1])
    size = size if size > 0 else 1.0
    xy, comp = [], []
    for s in supports:
        for x, y in _support_points(s, bounds):
            for k in PlaneStress.fixed_components(s.fix):
                xy.append(((x - xc) / size, (y - yc) / size))
                comp.append(k)
    if not comp:
        return
    A = restrained_modes(PlaneStress, np.asarray(xy), np.asarray(comp))  # rows: fixed directions
    tol = 1e-9 * max(1.0, math.sqrt(A.shape[0]))
    rank = restrained_rank(PlaneStress, np.asarray(xy), np.asarray(comp), tol=tol)
    if rank >= PlaneStress.n_rigid_modes:
        return
    has_x = 0 in comp
    if rank == 2:
        v = np.linalg.svd(A)[2][-1]
        a, b, c = v
        if abs(c) > 1e-9 * np.abs(v).sum():
            digits = 6 - math.floor(math.log10(size))  # drop rounding noise
            centre = (round(xc - b / c * size, digits) + 0.0,
                      round(yc + a / c * size, digits) + 0.0)
            free = f"rotate about {point_text(centre)}"
        else:
            free = "slide in x" if not has_x else "slide in y"
    else:
        slide = "slide in y" if has_x else "slide in x"
        free = f"{slide} and to rotate"
    add_error(errs, "support", f"the supports leave the part free to {free}; add supports or "
                               "fixed directions so that sliding in x, sliding in y and rotation "
                               'are all stopped (for example fix = "xy" at two separate points)')


def check_regions(regions, supports, loads, domain, goal, units, errs):
    """Keep regions must not contradict each other, the supports, the loads or the goal.

    A keep-empty region must not overlap a keep-solid one nor cover a support or load;
    every region must overlap the domain; the keep-solid regions must fill less, the
    keep-empty ones leave more of the domain than ``goal.material``.

    Parameters
    ----------
    regions : list of Region
    supports, loads : list of Support, list of Load
    domain : shapely Polygon or None
        None when the domain did not parse (the checks against it are skipped).
    goal : Goal or None
    units : Units
        For the messages.
    errs : list of str
        Messages so far; each problem found is added.
    """
    if not regions:
        return
    lu = units.length
    shapes = [(r, region_geometry(r, oriented=False)) for r in regions]
    solids = [(r, g) for r, g in shapes if r.keep == "solid"]
    empties = [(r, g) for r, g in shapes if r.keep == "empty"]
    for re_, ge in empties:
        for rs, gs in solids:
            overlap = ge.intersection(gs).area
            if overlap > 1e-9 * min(ge.area, gs.area):
                add_error(errs, re_.key, f"this keep-empty region overlaps the keep-solid region "
                                         f"{rs.key} (by {number_text(overlap)} {lu}^2); a spot "
                                         "cannot be both")
        for item in list(supports) + list(loads):
            geom = item_geometry(item)
            if ge.relate_pattern(geom, "T********"):
                what = "support" if isinstance(item, Support) else "load"
                add_error(errs, re_.key, f"this keep-empty region covers {what} {item.key}; "
                                         f"a {what} needs material under it")
    if domain is None:
        return
    for r, g in shapes:
        if not g.intersection(domain).area > 0:
            add_error(errs, r.key, "the region lies outside the domain, so it has no effect; "
                                   "check its coordinates")
    if goal is None:
        return
    total = domain.area
    target = goal.material
    if solids:
        solid = unary_union([g for _, g in solids]).intersection(domain).area / total
        if solid >= target:
            add_error(errs, "goal.material", f"the keep-solid regions alone fill {solid:.1%} of "
                                             f"the domain, not less than the target {target:.1%}; "
                                             "raise goal.material or shrink the regions")
    if empties:
        left = domain.difference(unary_union([g for _, g in empties])).area / total
        if left <= target:
            add_error(errs, "goal.material", f"the keep-empty regions leave only {left:.1%} of the "
                                             f"domain, not more than the target {target:.1%}; "
                                             "lower goal.material or shrink the regions")


def check_load_paths(regions, supports, loads, domain, errs):
    """Keep-empty regions must not cut a load off from every support.

    The domain less the keep-empty regions falls into pieces; a load that touches only
    pieces that no support touches cannot be carried by any design.

    Parameters
    ----------
    regions : list of Region
    supports, loads : list of Support, list of Load
    domain : shapely Polygon
    errs : list of str
        Messages so far; each problem found is added.
    """
    empties = [region_geometry(r, oriented=False) for r in regions if r.keep == "empty"]
    if not empties or not supports or not loads:
        return
    free = domain.difference(unary_union(empties))
    pieces = list(getattr(free, "geoms", [free]))
    held = {k for k, piece in enumerate(pieces)
            if any(piece.intersects(item_geometry(s)) for s in supports)}
    for ld in loads:
        shape = item_geometry(ld)
        touched = {k for k, piece in enumerate(pieces) if piece.intersects(shape)}
        if touched and not touched & held:
            add_error(errs, ld.key, "the keep-empty regions cut this load off from every support: "
                                    "no material could carry it; move or shrink the regions")


def _round_sig(x, up):
    """``x`` rounded up or down to 3 significant digits."""
    step = 10.0 ** (math.floor(math.log10(x)) - 2)
    n = math.ceil(x / step) if up else math.floor(x / step)
    return float(f"{n * step:.3g}")


def check_grid(domain, cell, units, errs):
    """The grid must resolve the domain and fit into memory.

    The cell must give at least ``MIN_CELLS_ACROSS`` cells across the narrower side of the
    domain's bounds, and the memory estimate of the grid
    (``levelform.resources.estimate_memory_bytes``) must not exceed
    ``levelform.resources.available_memory_bytes()``. Each message proposes a cell size
    that would pass (rounded to 3 significant digits).

    Parameters
    ----------
    domain : shapely Polygon
    cell : float
        The grid cell size.
    units : Units
        For the messages.
    errs : list of str
        Messages so far; each problem found is added.
    """
    lu = units.length
    x0, y0, x1, y1 = domain.bounds
    narrow = min(x1 - x0, y1 - y0)
    across = narrow / cell
    if across < MIN_CELLS_ACROSS:
        largest = _round_sig(narrow / MIN_CELLS_ACROSS, up=False)
        add_error(errs, "domain.cell", f"a cell of {number_text(cell)} {lu} gives only "
                                       f"{across:.3g} cells across the domain's narrower side "
                                       f"({number_text(narrow)} {lu}); use a cell of at most "
                                       f"{number_text(largest)} {lu} (at least "
                                       f"{MIN_CELLS_ACROSS} cells across)")
        return
    area = domain.area
    wanted = area / cell / cell  # may be inf for absurdly small cells; that is fine
    n_cells = min(wanted, 1e15)  # beyond this the estimate only grows
    need = resources.estimate_memory_bytes(int(math.ceil(n_cells)))
    have = resources.available_memory_bytes()
    if need <= have:
        return
    gib = 1024.0**3
    if resources.estimate_memory_bytes(1) > have:
        add_error(errs, "domain.cell", f"only {have / gib:.2f} GiB of memory is available, too "
                                       "little for any grid")
        return
    lo, hi = 1, int(math.ceil(n_cells))  # estimate(lo) fits, estimate(hi) does not
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if resources.estimate_memory_bytes(mid) <= have:
            lo = mid
        else:
            hi = mid
    smallest = _round_sig(math.sqrt(area / lo), up=True)
    count = "more than 1e+15" if wanted > 1e15 else f"about {wanted:.3g}"
    add_error(errs, "domain.cell", f"a cell of {number_text(cell)} {lu} gives {count} cells, "
                                   f"estimated to need {need / gib:.1f} GiB of memory, but "
                                   f"{have / gib:.1f} GiB is available; use a cell of at least "
                                   f"{number_text(smallest)} {lu}")
