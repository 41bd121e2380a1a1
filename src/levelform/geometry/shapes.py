"""Shapely geometry of the problem: the domain, keep regions, polygon parts."""
from __future__ import annotations

import shapely
from shapely.geometry import LineString, MultiPolygon, Point, Polygon, box
from shapely.geometry.polygon import orient

from ..spec import Load, ProblemError, Region, Support

__all__ = ["CIRCLE_QUAD_SEGS", "domain_polygon", "item_geometry", "keep_regions", "region_geometry"]

# Segments per quarter circle for circular keep regions; 32 keeps the polygon area within
# 0.07 % of pi r^2 (area of an inscribed regular 128-gon: (n/2) sin(2 pi/n) r^2).
CIRCLE_QUAD_SEGS = 32


def polygon_parts(geom) -> list[Polygon]:
    """Every non-empty Polygon inside ``geom`` (Polygon, MultiPolygon or collection)."""
    if geom is None or geom.is_empty:
        return []
    if isinstance(geom, Polygon):
        return [geom]
    if hasattr(geom, "geoms"):
        out: list[Polygon] = []
        for g in geom.geoms:
            out.extend(polygon_parts(g))
        return out
    return []  # points and lines carry no area


def oriented_multipolygon(polygons) -> MultiPolygon:
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


def item_geometry(item: Support | Load):
    """The place of a support or load as shapely geometry.

    Parameters
    ----------
    item : Support or Load
        Its ``kind`` is "point" (``where`` = (x, y)), "segment" (``where`` = two points)
        or "box" (``where`` = (x0, y0, x1, y1), supports only).

    Returns
    -------
    Point, LineString or Polygon
        The point, the segment, or the box as a counter-clockwise rectangle.
    """
    if item.kind == "point":
        return Point(item.where)
    if item.kind == "segment":
        return LineString(item.where)
    if item.kind == "circle":
        cx, cy, r = item.where
        return Point(cx, cy).buffer(r, quad_segs=CIRCLE_QUAD_SEGS)
    return box(*item.where)


def region_geometry(region: Region, oriented: bool = True) -> Polygon:
    """The polygon of one keep region.

    Parameters
    ----------
    region : Region
        A circle (cx, cy, r), drawn with ``CIRCLE_QUAD_SEGS`` segments per quarter, a box
        (x0, y0, x1, y1) or a polygon ((x, y), ...).
    oriented : bool, optional
        True (default): the outer ring counter-clockwise (RFC 7946). False: the ring as
        built (a circle then runs clockwise, a polygon as the user listed it). The area is
        the same either way, but areas of intersections and unions may differ in the last
        bit, so the problem checks, written against the shape as built, pass False.

    Returns
    -------
    Polygon

    Raises
    ------
    ProblemError
        Naming ``region.key`` for a radius <= 0, an empty box, a polygon that is not
        simple, an unknown kind or coordinates that are not numbers.
    """
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
        elif region.kind == "border":  # a band of width w inside the outline (and round holes)
            width, outline, holes = w
            plate = Polygon(outline, list(holes))
            geom = plate.difference(plate.buffer(-float(width), join_style="mitre"))
            if geom.geom_type != "Polygon" or geom.is_empty:
                geom = shapely.union_all([g for g in polygon_parts(geom)])
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
    return orient(geom, sign=1.0) if oriented else geom


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
