"""Plane geometry of a problem and of a design: domain, keep regions, outlines, metrics.

Pure functions over shapely geometry and numpy arrays; nothing here reads or writes files.
Outlines come from filled contours of the nodal level set (phi < 0 is material), clipped
to the exact domain polygon, so edges follow the zero level between nodes instead of the
cell staircase.
"""
from __future__ import annotations

import math

import numpy as np
import shapely
from shapely.geometry import MultiPolygon, Point, Polygon, box
from shapely.geometry.polygon import orient

from .spec import GridInfo, ProblemError, Region

# Segments per quarter circle for circular keep regions; 32 keeps the polygon area within
# 0.07 % of pi r^2 (area of an inscribed regular 128-gon: (n/2) sin(2 pi/n) r^2).
CIRCLE_QUAD_SEGS = 32

# Outline simplification tolerance, in cells.
SIMPLIFY = 0.05

# Share of the area an opening may remove and still count as "keeping" the shape.
OPENING_LOSS = 0.005


def _polygons(geom) -> list[Polygon]:
    """Every non-empty Polygon inside ``geom`` (Polygon, MultiPolygon or collection)."""
    if geom is None or geom.is_empty:
        return []
    if isinstance(geom, Polygon):
        return [geom]
    if hasattr(geom, "geoms"):
        out: list[Polygon] = []
        for g in geom.geoms:
            out.extend(_polygons(g))
        return out
    return []  # points and lines carry no area


def _oriented(polygons) -> MultiPolygon:
    """MultiPolygon with outer rings counter-clockwise, holes clockwise (RFC 7946)."""
    return MultiPolygon([orient(p, sign=1.0) for p in polygons])


def domain_polygon(problem) -> Polygon:
    """The design domain as an oriented polygon with its holes.

    Raises ProblemError naming ``domain.outline`` or ``domain.holes`` if the rings
    do not form a valid polygon (self-crossing outline, hole outside, ...).
    """
    dom = problem.domain
    if len(dom.outline) < 3:
        raise ProblemError("domain.outline: needs at least 3 points")
    outer = Polygon(dom.outline)
    if not outer.is_valid or outer.area <= 0.0:
        reason = shapely.is_valid_reason(outer)
        raise ProblemError(f"domain.outline: not a simple polygon ({reason})")
    for k, hole in enumerate(dom.holes):
        hp = Polygon(hole)
        if len(hole) < 3 or not hp.is_valid or hp.area <= 0.0:
            raise ProblemError(f"domain.holes[{k}]: not a simple polygon")
        if not outer.contains(hp):
            raise ProblemError(f"domain.holes[{k}]: must lie inside domain.outline")
    poly = Polygon(dom.outline, list(dom.holes))
    if not poly.is_valid:
        reason = shapely.is_valid_reason(poly)
        raise ProblemError(f"domain.holes: holes overlap or touch ({reason})")
    return orient(poly, sign=1.0)


def region_geometry(region: Region) -> Polygon:
    """The polygon of one keep region: circle (cx, cy, r), box (x0, y0, x1, y1) or polygon."""
    w = region.where
    try:
        if region.kind == "circle":
            cx, cy, r = (float(v) for v in w)
            if not r > 0.0:
                raise ProblemError(f"{region.key}: circle radius must be > 0, got {r}")
            geom = Point(cx, cy).buffer(r, quad_segs=CIRCLE_QUAD_SEGS)
        elif region.kind == "box":
            x0, y0, x1, y1 = (float(v) for v in w)
            if not (x1 > x0 and y1 > y0):
                raise ProblemError(
                    f"{region.key}: box needs x0 < x1 and y0 < y1, got {tuple(w)}")
            geom = box(x0, y0, x1, y1)
        elif region.kind == "polygon":
            geom = Polygon([(float(x), float(y)) for x, y in w])
            if not geom.is_valid or geom.area <= 0.0:
                raise ProblemError(f"{region.key}: polygon is not simple or has no area")
        else:
            raise ProblemError(
                f"{region.key}: unknown kind {region.kind!r} (use circle, box or polygon)")
    except (TypeError, ValueError) as exc:
        if isinstance(exc, ProblemError):
            raise
        raise ProblemError(f"{region.key}: bad coordinates {w!r} for a {region.kind}") from exc
    return orient(geom, sign=1.0)


def keep_regions(problem):
    """Union of the keep-solid and of the keep-empty regions, each clipped to the domain.

    Returns ``(solid, empty)``; either is an empty Polygon when there is no such region.
    """
    domain = domain_polygon(problem)
    solid = [region_geometry(r) for r in problem.regions if r.keep == "solid"]
    empty = [region_geometry(r) for r in problem.regions if r.keep == "empty"]

    def _union(geoms):
        if not geoms:
            return Polygon()
        return shapely.intersection(shapely.union_all(geoms), domain)

    return _union(solid), _union(empty)


def _drop_small_holes(poly: Polygon, min_area: float) -> Polygon:
    holes = [r for r in poly.interiors if Polygon(r).area >= min_area]
    return Polygon(poly.exterior, holes)


def outline_from_levelset(phi, grid: GridInfo, domain: Polygon, min_hole_area=None) -> MultiPolygon:
    """Material outline {phi < 0} as an oriented MultiPolygon clipped to ``domain``.

    Filled contours (contourpy, marching squares with linear interpolation) give the zero
    level between nodes. NaN nodes (outside the domain) become material with a value just
    below zero, so material reaches past the domain edge while a void node next to them
    keeps its zero crossing practically at the NaN node; clipping by the domain polygon
    then makes the edge exact. Pieces and holes smaller than ``min_hole_area`` (default:
    one cell, h*h) are dropped; holes of the domain itself are always kept.
    """
    import contourpy

    z = np.asarray(phi, dtype=float)
    shape = (grid.ny + 1, grid.nx + 1)
    if z.shape != shape:
        raise ValueError(f"phi has shape {z.shape}, the grid needs {shape}")
    h = float(grid.h)
    min_area = h * h if min_hole_area is None else float(min_hole_area)
    z = np.where(np.isfinite(z), z, -1e-6 * h)
    if not np.any(z < 0.0):
        return MultiPolygon()
    x = grid.x0 + h * np.arange(grid.nx + 1)
    y = grid.y0 + h * np.arange(grid.ny + 1)
    gen = contourpy.contour_generator(x, y, z, fill_type="OuterOffset")
    points, offsets = gen.filled(-np.inf, 0.0)

    raw = []
    for pts, offs in zip(points, offsets):
        rings = [pts[a:b] for a, b in zip(offs[:-1], offs[1:]) if b - a >= 4]
        if not rings:
            continue
        poly = shapely.make_valid(Polygon(rings[0], rings[1:]))
        for p in _polygons(poly):
            p = _drop_small_holes(p, min_area)
            if p.area >= min_area:
                raw.append(p)
    if not raw:
        return MultiPolygon()
    material = shapely.union_all(raw)
    # Drop the near-collinear vertices marching squares leaves (two crossings a hair apart
    # next to a node): a tolerance of SIMPLIFY * h moves no edge by more than that and
    # changes areas by far less than 0.5 %. Done before clipping so the domain's own edges
    # (and its holes) stay exact.
    material = shapely.make_valid(shapely.simplify(material, SIMPLIFY * h, preserve_topology=True))
    clipped = shapely.make_valid(shapely.intersection(material, domain))
    pieces = [p for p in _polygons(clipped) if p.area >= min_area]
    # Sort so the output does not depend on contour traversal order.
    pieces.sort(key=lambda p: (p.bounds[0], p.bounds[1], -p.area))
    return _oriented(pieces)


def _coincides(a: Polygon, b: Polygon, share: float = 0.9) -> bool:
    inter = a.intersection(b).area
    return inter > share * max(a.area, b.area)


def outline_metrics(geom, domain: Polygon, tol=None) -> dict:
    """Size and fabrication figures of an outline.

    ``area``; ``outline_length`` (all rings, holes included, so it is the cut length);
    ``holes`` (interior rings, not counting rings that coincide with a hole of the domain,
    i.e. overlap it by more than 90 % of the larger area); ``pieces`` (separate polygons);
    ``smallest_member_width`` (see :func:`smallest_member_width`).
    """
    polys = _polygons(geom)
    domain_holes = [Polygon(r) for r in domain.interiors] if domain is not None else []
    n_holes = 0
    for p in polys:
        for ring in p.interiors:
            hp = Polygon(ring)
            if not any(_coincides(hp, dh) for dh in domain_holes):
                n_holes += 1
    return {
        "area": float(sum(p.area for p in polys)),
        "outline_length": float(sum(p.length for p in polys)),
        "holes": int(n_holes),
        "pieces": len(polys),
        "smallest_member_width": smallest_member_width(geom, tol),
    }


def _thin_removal(g, r: float) -> bool:
    """True when the opening of ``g`` by a disc of radius r removes a member, not just
    corners: it removes 0.5 % of the area, or some removed piece holds a disc of radius
    r / 2 however small its share. (Rounding a corner of angle
    45 degrees or more removes pieces whose inscribed radius stays under 0.45 r; a member of
    width w < 2 r is removed whole, inscribed radius w / 2.)"""
    opened = g.buffer(-r, quad_segs=8).buffer(r, quad_segs=8)
    removed = g.difference(opened) if not opened.is_empty else g
    if removed.area >= OPENING_LOSS * g.area:  # a short neck: removed in part only
        return True
    for piece in _polygons(removed):
        if piece.area < math.pi * (0.5 * r) ** 2:
            continue
        circle = shapely.maximum_inscribed_circle(piece, tolerance=0.02 * r)
        if circle.length > 0.5 * r:  # the returned line runs from the centre to the edge
            return True
    return False


def smallest_member_width(geom, tol=None) -> float:
    """Width of the thinnest member, by morphological opening with a disc.

    Definition: 2 r*, where r* is the largest disc radius for which the opening
    ``buffer(-r).buffer(r)`` removes no member (see :func:`_thin_removal`): a bar of width
    w survives openings up to r = w / 2 and is removed whole beyond, however small its share
    of the area. The radius is scanned upward in steps of 1.5 (a member of width w is
    detected for every r in (w/2, w), so no step jumps over it), then bisected to ``tol``
    (default: 1/500 of the upper bound). Acute tips sharper than about 40 degrees count as
    thin features. Returns 0.0 for an empty geometry.
    """
    polys = _polygons(geom)
    if not polys:
        return 0.0
    g = MultiPolygon(polys) if len(polys) > 1 else polys[0]
    area = g.area
    if area <= 0.0:
        return 0.0
    # No disc bigger than the area-equivalent disc fits inside any piece.
    top = math.sqrt(area / math.pi)
    if tol is None:
        tol = top / 500.0
    tol_r = max(float(tol) / 2.0, top * 1e-9)
    lo, hi = 0.0, None
    r = top / 1000.0
    while r < top:
        if _thin_removal(g, r):
            hi = r
            break
        lo, r = r, r * 1.5
    if hi is None:
        if not _thin_removal(g, top):
            return 2.0 * top
        hi = top
    while hi - lo > tol_r:
        mid = 0.5 * (lo + hi)
        if _thin_removal(g, mid):
            hi = mid
        else:
            lo = mid
    return 2.0 * lo


def smallest_hole_width(geom, domain=None) -> float | None:
    """Diameter of the largest disc that fits in the smallest hole of the design (holes of
    the domain itself are not design holes and are skipped); None when there is no hole."""
    domain_holes = [Polygon(r) for r in domain.interiors] if domain is not None else []
    widths = []
    for p in _polygons(geom):
        for ring in p.interiors:
            hp = Polygon(ring)
            if any(_coincides(hp, dh) for dh in domain_holes):
                continue
            circle = shapely.maximum_inscribed_circle(hp, tolerance=max(hp.length * 1e-4, 1e-12))
            widths.append(2.0 * circle.length)
    return min(widths) if widths else None


def _ring_corners(coords: np.ndarray):
    """Turning angle (radians, positive = left turn) and circumradius at every vertex of a
    closed ring given without the repeated last point."""
    a = np.roll(coords, 1, axis=0)
    b = coords
    c = np.roll(coords, -1, axis=0)
    u, v = b - a, c - b
    cross = u[:, 0] * v[:, 1] - u[:, 1] * v[:, 0]
    dot = (u * v).sum(axis=1)
    turn = np.arctan2(cross, dot)
    la, lb, lc = np.hypot(*u.T), np.hypot(*v.T), np.hypot(*(c - a).T)
    with np.errstate(divide="ignore", invalid="ignore"):
        radius = la * lb * lc / (2.0 * np.abs(cross))
    return turn, radius


def corner_metrics(geom, domain=None) -> dict:
    """Smoothness figures of an outline: the largest turning angle between consecutive
    segments (degrees) and the smallest inside-corner radius, both over vertices that do not
    lie on the domain boundary (the domain's own corners are the user's). The radius at a
    vertex is that of the circle through it and its two neighbours; an inside corner is a
    right turn (material lies left of every ring in RFC 7946 orientation)."""
    edge = domain.boundary if domain is not None else None
    size = math.sqrt(domain.area) if domain is not None else 1.0
    max_turn, min_radius = 0.0, math.inf
    for p in _polygons(geom):
        for ring in [p.exterior, *p.interiors]:
            xy = np.asarray(ring.coords)[:-1]
            if xy.shape[0] < 3:
                continue
            turn, radius = _ring_corners(xy)
            free = np.ones(xy.shape[0], bool)
            if edge is not None:
                d = shapely.distance(edge, shapely.points(xy[:, 0], xy[:, 1]))
                free = d > 1e-9 * size
            if free.any():
                max_turn = max(max_turn, float(np.degrees(np.abs(turn[free])).max()))
                inside = free & (turn < 0)
                if inside.any():
                    min_radius = min(min_radius, float(np.nanmin(radius[inside])))
    return {
        "max_turning_angle_deg": max_turn,
        "smallest_inside_corner_radius": None if math.isinf(min_radius) else min_radius,
    }


def fabrication_report(geom, domain, fabrication=None) -> dict:
    """Fabrication figures of an outline and, for each limit asked for, whether it is met
    and by what margin (measured minus required, a length; negative when violated)."""
    out = {
        "smallest_member_width": smallest_member_width(geom),
        "smallest_hole": smallest_hole_width(geom, domain),
        **corner_metrics(geom, domain),
    }
    limits = {}
    for key, measured_key in (("min_member", "smallest_member_width"), ("min_hole", "smallest_hole")):
        required = getattr(fabrication, key, None) if fabrication is not None else None
        if required is None:
            continue
        measured = out[measured_key]
        if measured is None:  # no hole at all satisfies any hole limit
            limits[key] = {"required": required, "measured": None, "margin": None, "met": True}
        else:
            limits[key] = {"required": required, "measured": measured, "margin": measured - required,
                           "met": bool(measured >= required * (1.0 - 1e-3))}
    out["limits"] = limits
    return out
