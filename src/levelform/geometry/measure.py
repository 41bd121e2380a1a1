"""Measurements of an outline: area, length, holes, members, corners and fabrication limits."""
from __future__ import annotations

import math

import numpy as np
import shapely
from shapely.geometry import MultiPolygon, Polygon

from .shapes import polygon_parts

# Share of the area an opening may remove and still count as "keeping" the shape.
OPENING_LOSS = 0.005


def _coincides(a: Polygon, b: Polygon, share: float = 0.9) -> bool:
    inter = a.intersection(b).area
    return inter > share * max(a.area, b.area)


def design_holes(geom, domain: Polygon | None = None) -> list[Polygon]:
    """The openings the design made: the interior rings of ``geom`` that are no hole of
    the domain itself.

    Parameters
    ----------
    geom : Polygon, MultiPolygon or geometry collection
        The outline.
    domain : Polygon, optional
        The design domain with its own holes. An interior ring of ``geom`` is the domain's
        hole when the two overlap by more than 90 % of the larger area.

    Returns
    -------
    list of Polygon
        One polygon per design hole, in the order of the outline's rings.
    """
    domain_holes = [Polygon(r) for r in domain.interiors] if domain is not None else []
    out = []
    for p in polygon_parts(geom):
        for ring in p.interiors:
            hp = Polygon(ring)
            if not any(_coincides(hp, dh) for dh in domain_holes):
                out.append(hp)
    return out


def outline_holes(geom, domain: Polygon | None = None) -> int:
    """The number of holes in an outline, the domain's own holes not counted.

    This is the one count of holes that is reported (the command line, summary.json,
    the comparison); see :func:`design_holes` for what counts.

    Parameters
    ----------
    geom : Polygon, MultiPolygon or geometry collection
        The outline.
    domain : Polygon, optional
        The design domain with its own holes.

    Returns
    -------
    int
    """
    return len(design_holes(geom, domain))


def outline_metrics(geom, domain: Polygon, tol=None) -> dict:
    """Size and fabrication figures of an outline.

    ``area``; ``outline_length`` (all rings, holes included, so it is the cut length);
    ``holes`` (see :func:`outline_holes`: the domain's own holes do not count);
    ``pieces`` (separate polygons); ``smallest_member_width`` (see
    :func:`smallest_member_width`).
    """
    polys = polygon_parts(geom)
    return {
        "area": float(sum(p.area for p in polys)),
        "outline_length": float(sum(p.length for p in polys)),
        "holes": outline_holes(geom, domain),
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
    for piece in polygon_parts(removed):
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
    polys = polygon_parts(geom)
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
    widths = []
    for hp in design_holes(geom, domain):
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
    for p in polygon_parts(geom):
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
