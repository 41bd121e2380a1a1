"""Panel patterns in the problem file: ``[pattern]``, ``[[bolt]]``, a ``border`` frame,
the cutting ``process`` and ``edge_distance``, ``[export]``; and the checks that the
outline, its holes and the keep regions fit the pattern (docs/patterns.md).

A pattern is imposed by construction on the grid, so the checks here are geometric: the
outline (with its holes and the bolts' holes) and every keep region must map onto
themselves under each map of the pattern; loads and supports may differ.
"""
from __future__ import annotations

import math

import shapely
from shapely import affinity
from shapely.geometry import Point, Polygon, box

from ..geometry.shapes import CIRCLE_QUAD_SEGS, region_geometry
from ..spec import Bolt, Export, Pattern, Region, Support
from .messages import add_error, number_text, point_text, show
from .values import check_keys, read_choice, read_number, read_vector

__all__ = ["MIRRORS", "PROCESSES", "ROTATIONS", "apply_bolts", "check_pattern", "parse_bolts",
           "parse_export", "parse_pattern", "process_defaults", "PATTERN_KEYS", "BOLT_KEYS"]

PATTERN_KEYS = ("mirror", "mirror_at", "rotate", "repeat")
MIRRORS = ("left-right", "top-bottom", "both")
ROTATIONS = (2, 4)
BOLT_KEYS = ("at", "diameter", "ring", "fix")
EXPORT_KEYS = ("arc_tolerance",)
MAX_TILES = 400

# Defaults of a cutting process as multiples of the sheet thickness: (smallest member,
# smallest hole, edge distance). Common practice for sheet cutting, no single source
# (docs/patterns.md); each is overridden by the limit given in the file.
PROCESSES = {
    "laser": (1.5, 1.0, 1.5),
    "waterjet": (1.5, 1.0, 1.5),
    "punch": (1.5, 2.0, 1.5),
}


def parse_pattern(data, errs):
    """The ``[pattern]`` table as a dict of what parsed (None when absent or all bad)."""
    if "pattern" not in data:
        return None
    t = data["pattern"]
    if not isinstance(t, dict):
        add_error(errs, "pattern", f"expected a [pattern] table, got {show(t)}")
        return None
    check_keys(t, PATTERN_KEYS, "pattern", errs)
    out, ok = {}, True
    if "mirror" in t:
        v = read_choice(t["mirror"], "pattern.mirror", errs, MIRRORS, "the mirror lines")
        ok &= v is not None
        out["mirror"] = v
    if "mirror_at" in t:
        v = read_vector(t["mirror_at"], "pattern.mirror_at", errs)
        ok &= v is not None
        out["mirror_at"] = v
    if "rotate" in t:
        v = t["rotate"]
        if isinstance(v, int) and not isinstance(v, bool) and v in ROTATIONS:
            out["rotate"] = v
        else:
            add_error(errs, "pattern.rotate", f"expected 2 or 4 (the fold of the rotational "
                                              f"symmetry), got {show(v)}")
            ok = False
    if "repeat" in t:
        v = t["repeat"]
        good = (isinstance(v, list) and len(v) == 2
                and all(isinstance(n, int) and not isinstance(n, bool) and n >= 1 for n in v))
        if good and v[0] * v[1] < 2:
            add_error(errs, "pattern.repeat", f"[1, 1] is a single tile; give at least two "
                                              f"tiles, for example [3, 2], got {show(v)}")
            ok = False
        elif good and v[0] * v[1] > MAX_TILES:
            add_error(errs, "pattern.repeat", f"at most {MAX_TILES} tiles, got {show(v)}")
            ok = False
        elif not good:
            add_error(errs, "pattern.repeat", f"expected two whole numbers [nx, ny] >= 1 (the "
                                              f"tiles across and up), got {show(v)}")
            ok = False
        else:
            out["repeat"] = (int(v[0]), int(v[1]))
    if "mirror_at" in out and "mirror" not in out and "rotate" not in out:
        add_error(errs, "pattern.mirror_at", "gives the centre of a mirror or a rotation: add "
                                             "mirror = \"left-right\", \"top-bottom\" or \"both\", "
                                             "or rotate = 2 or 4")
        ok = False
    if "mirror_at" in out and "repeat" in out:
        add_error(errs, "pattern.mirror_at", "with repeat, each tile is mirrored or rotated "
                                             "about its own centre; leave mirror_at out")
        ok = False
    if not out and ok:
        add_error(errs, "pattern", "the table is empty; give mirror, rotate or repeat")
        return None
    return out if ok else None


class BoltList(list):
    """The bolts that parsed; ``complete`` is False when one did not."""

    complete = True


def parse_bolts(data, units, errs, fixes):
    """The ``[[bolt]]`` tables as a BoltList of Bolt (the bad ones left out); ``fixes`` are
    the accepted fixed directions."""
    items = BoltList()
    if "bolt" not in data:
        return items
    v = data["bolt"]
    if isinstance(v, dict):
        add_error(errs, "bolt", "expected [[bolt]] tables (an array of tables), got a single "
                                "table; write [[bolt]] instead of [bolt]")
        items.complete = False
        return items
    if not isinstance(v, list):
        add_error(errs, "bolt", f"expected [[bolt]] tables (an array of tables), got {show(v)}")
        items.complete = False
        return items
    lu = units.length
    for i, t in enumerate(v, 1):
        path = f"bolt[{i}]"
        if not isinstance(t, dict):
            add_error(errs, path, f"expected a table, got {show(t)}")
            items.complete = False
            continue
        check_keys(t, BOLT_KEYS, path, errs)
        at = None
        if "at" in t:
            at = read_vector(t["at"], f"{path}.at", errs)
        else:
            add_error(errs, f"{path}.at", "missing; expected the bolt's centre [x, y]")
        sizes = {}
        for key, what in (("diameter", "the hole's diameter"), ("ring", "the width of the solid ring")):
            if key not in t:
                add_error(errs, f"{path}.{key}", f"missing; expected {what}, a length in {lu}")
                sizes[key] = None
                continue
            x = read_number(t[key], f"{path}.{key}", errs, f"{what}, a length in {lu}")
            if x is not None and not x > 0:
                add_error(errs, f"{path}.{key}", f"must be > 0 {lu}, got {number_text(x)}")
                x = None
            sizes[key] = x
        fix = "xy"
        if "fix" in t:
            fix = read_choice(t["fix"], f"{path}.fix", errs, fixes, "the fixed directions")
        if at is None or None in sizes.values() or fix is None:
            items.complete = False
            continue
        items.append(Bolt(at=at, diameter=sizes["diameter"], ring=sizes["ring"], fix=fix, key=path))
    return items


def bolt_hole(b: Bolt) -> Polygon:
    return Point(b.at).buffer(0.5 * b.diameter, quad_segs=CIRCLE_QUAD_SEGS)


def apply_bolts(bolts, outline_shape, domain_shape, units, errs):
    """Check the bolts against the outline and each other; returns (hole rings, regions,
    supports) that stand for them: a domain hole, a keep-solid ring, a support on the rim."""
    lu = units.length
    rings, regions, supports = [], [], []
    placed = []
    for b in bolts:
        r = 0.5 * b.diameter
        hole = bolt_hole(b)
        outer = Point(b.at).buffer(r + b.ring, quad_segs=CIRCLE_QUAD_SEGS)
        bad = False
        if outline_shape is not None:
            if not outline_shape.contains(Point(b.at)):
                add_error(errs, f"{b.key}.at", f"{point_text(b.at)} lies outside domain.outline; a "
                                               "bolt goes inside the plate")
                bad = True
            elif domain_shape is not None and not domain_shape.contains(hole):
                add_error(errs, f"{b.key}.at", f"the hole of diameter {number_text(b.diameter)} {lu} at "
                                               f"{point_text(b.at)} is not wholly inside the domain "
                                               "(it crosses the outline or a hole of domain.holes)")
                bad = True
            elif domain_shape is not None and not domain_shape.buffer(1e-9 * r).contains(outer):
                d = outer.difference(domain_shape).area
                add_error(errs, f"{b.key}.ring", f"the ring of width {number_text(b.ring)} {lu} leaves the "
                                                 f"domain ({number_text(d)} {lu}^2 outside it); move the bolt "
                                                 "inward or narrow the ring")
                bad = True
        for other, o_hole, o_outer in placed:
            if hole.intersects(o_outer) or outer.intersects(o_hole):
                add_error(errs, b.key, f"the bolt at {point_text(b.at)} overlaps {other.key} at "
                                       f"{point_text(other.at)}: a hole meets the other's ring; move "
                                       "them apart or make the rings narrower")
                bad = True
                break
        placed.append((b, hole, outer))
        if bad:
            continue
        rings.append(tuple(hole.exterior.coords)[:-1])
        cx, cy = b.at
        regions.append(Region(keep="solid", kind="circle", where=(cx, cy, r + b.ring), key=f"{b.key}.ring"))
        supports.append(Support(kind="circle", where=(cx, cy, r), fix=b.fix, pad=False, key=b.key))
    return rings, regions, supports


def border_region(width: float, outline, holes, key: str) -> Region:
    """A keep-solid band of ``width`` inside the outline (and round ``holes``)."""
    return Region(keep="solid", kind="border", where=(float(width), tuple(outline), tuple(holes)), key=key)


def parse_export(data, units, errs) -> Export:
    if "export" not in data:
        return Export()
    t = data["export"]
    if not isinstance(t, dict):
        add_error(errs, "export", f"expected an [export] table, got {show(t)}")
        return Export()
    check_keys(t, EXPORT_KEYS, "export", errs)
    tol = None
    if "arc_tolerance" in t:
        tol = read_number(t["arc_tolerance"], "export.arc_tolerance", errs, f"a length in {units.length}")
        if tol is not None and not tol > 0:
            add_error(errs, "export.arc_tolerance", f"must be > 0 {units.length}, got {number_text(tol)}")
            tol = None
    return Export(arc_tolerance=tol)


def process_defaults(process, thickness):
    """(min_member, min_hole, edge_distance) defaults of a process for a sheet thickness."""
    m, hl, e = PROCESSES[process]
    return m * thickness, hl * thickness, e * thickness


# ----------------------------------------------------------------------------- checks


def _tiled_area(bounds, widths):
    x0, y0, x1, y1 = bounds
    w = max(widths, default=0.0)
    return (x0 + w, y0 + w, x1 - w, y1 - w)


def pattern_maps(pattern: Pattern):
    """The pattern's generating maps as (name, key, function geometry -> geometry), each on
    the tiled area (with repeat, the mirror and rotation of the first tile; the
    translations by one tile)."""
    maps = []
    x0, y0, x1, y1 = pattern.tiled
    if pattern.repeat:
        nx, ny = pattern.repeat
        tx, ty = (x1 - x0) / nx, (y1 - y0) / ny
        cx, cy = x0 + 0.5 * tx, y0 + 0.5 * ty
        if nx > 1:
            maps.append(("the repeat across", "pattern.repeat", lambda g: affinity.translate(g, tx, 0.0)))
        if ny > 1:
            maps.append(("the repeat up", "pattern.repeat", lambda g: affinity.translate(g, 0.0, ty)))
    else:
        cx, cy = pattern.centre
    if pattern.mirror in ("left-right", "both"):
        maps.append((f"the mirror about x = {number_text(cx)}", "pattern.mirror",
                     lambda g: affinity.scale(g, -1.0, 1.0, origin=(cx, cy))))
    if pattern.mirror in ("top-bottom", "both"):
        maps.append((f"the mirror about y = {number_text(cy)}", "pattern.mirror",
                     lambda g: affinity.scale(g, 1.0, -1.0, origin=(cx, cy))))
    if pattern.rotate:
        angle = 360.0 / pattern.rotate
        maps.append((f"the {pattern.rotate}-fold rotation about {point_text((cx, cy))}", "pattern.rotate",
                     lambda g: affinity.rotate(g, angle, origin=(cx, cy))))
    return maps


def _first_tile(pattern: Pattern):
    x0, y0, x1, y1 = pattern.tiled
    if not pattern.repeat:
        return box(x0, y0, x1, y1)
    nx, ny = pattern.repeat
    return box(x0, y0, x0 + (x1 - x0) / nx, y0 + (y1 - y0) / ny)


def _mismatch(geom, image, window) -> float:
    """Area of what ``geom`` and its ``image`` disagree on inside ``window``."""
    a = geom.intersection(window)
    b = image.intersection(window)
    return float(a.symmetric_difference(b).area)


def _invariant(geom, pattern, tol) -> list:
    """The maps (name, key) under which ``geom`` (within the tiled area) is not invariant."""
    P = box(*pattern.tiled)
    tile = _first_tile(pattern)
    bad = []
    for name, key, f in pattern_maps(pattern):
        translation = name.startswith("the repeat")
        if translation:  # compare where both the part and its image lie in the tiled area
            window = P.intersection(f(P))
            part = geom.intersection(P)
        else:
            window = tile
            part = geom.intersection(tile)
        if _mismatch(part, f(part), window) > tol:
            bad.append((name, key))
    return bad


def check_pattern(raw, domain_shape, regions, cell, bounds, units, errs):
    """Resolve the pattern (its centre and tiled area) and check that the domain and the
    keep regions fit it and that the grid can honour it. Returns a Pattern or None."""
    if raw is None or domain_shape is None:
        return None
    lu = units.length
    widths = [r.where[0] for r in regions if r.kind == "border"]
    x0, y0, x1, y1 = bounds
    tiled = _tiled_area(bounds, widths) if raw.get("repeat") else tuple(bounds)
    if not (tiled[2] > tiled[0] and tiled[3] > tiled[1]):
        add_error(errs, "pattern.repeat", "the frame (border / edge_distance) leaves no area for the tiles")
        return None
    centre = None
    if not raw.get("repeat"):
        centre = raw.get("mirror_at") or (0.5 * (x0 + x1), 0.5 * (y0 + y1))
    pattern = Pattern(mirror=raw.get("mirror"), centre=centre, rotate=raw.get("rotate"),
                      repeat=raw.get("repeat"), tiled=tiled)
    if pattern.rotate == 4:
        tile = _first_tile(pattern).bounds
        w, hgt = tile[2] - tile[0], tile[3] - tile[1]
        if abs(w - hgt) > 1e-9 * max(w, hgt):
            what = "each tile" if pattern.repeat else "the outline's bounding box"
            add_error(errs, "pattern.rotate", f"4-fold rotation needs a square: {what} is "
                                              f"{number_text(w)} x {number_text(hgt)} {lu}")
            return None
    tol = max(1e-9 * domain_shape.area, 1e-4 * cell * cell)
    ok = True
    for name, key in _invariant(domain_shape, pattern, tol):
        add_error(errs, key, f"the outline with its holes does not map onto itself under {name}: a "
                             "pattern needs an outline (with domain.holes and the bolts' holes) that "
                             "each of its maps sends onto itself")
        ok = False
    for keep in ("solid", "empty"):
        items = [(r, region_geometry(r).intersection(domain_shape)) for r in regions if r.keep == keep]
        if not items:
            continue
        union = shapely.union_all([g for _, g in items])
        for name, key in _invariant(union, pattern, tol):
            # name the region whose image is not a keep region
            culprit = None
            f = dict((n, fn) for n, _, fn in pattern_maps(pattern))[name]
            for r, g in items:
                window = box(*tiled) if name.startswith("the repeat") else _first_tile(pattern)
                part = g.intersection(window)
                if part.area and f(part).difference(union).intersection(box(*tiled)).area > tol:
                    culprit = r
                    break
            who = culprit.key if culprit is not None else f"the keep-{keep} regions"
            add_error(errs, who, f"breaks the pattern: its image under {name} is not a keep-{keep} region; "
                                 f"make the regions (and bolts) follow {key}, or move them into the frame")
            ok = False
    if pattern.repeat:
        nx, ny = pattern.repeat
        tx, ty = (tiled[2] - tiled[0]) / nx, (tiled[3] - tiled[1]) / ny
        mx, my = tx / cell, ty / cell
        if abs(mx - round(mx)) > 1e-6 * mx or abs(my - round(my)) > 1e-6 * my or round(mx) < 2 or round(my) < 2:
            hint = _fitting_cell(tx, ty, cell)
            add_error(errs, "pattern.repeat", f"tiles of {number_text(tx)} x {number_text(ty)} {lu} are not "
                                              f"whole numbers of cells of domain.cell = {number_text(cell)} {lu}, "
                                              f"so the tiles cannot be laid cell for cell"
                                              + (f"; use domain.cell = {hint}" if hint else
                                                 "; choose a cell that divides both tile sides"))
            ok = False
    return pattern if ok else None


def _fitting_cell(tx, ty, cell):
    """The largest cell <= ``cell`` (to 3 digits shown) that divides both tile sides, if
    one exists with at most 2000 cells per tile side."""
    start = max(1, math.ceil(tx / cell - 1e-9))
    for m in range(start, 2001):
        c = tx / m
        n = ty / c
        if abs(n - round(n)) <= 1e-6 * n and round(n) >= 2:
            return f"{c:.10g}"
    return None

