"""The outline of a level-set design: the zero contour as valid, oriented polygons."""
from __future__ import annotations

import numpy as np
import shapely
from shapely.geometry import MultiPolygon, Polygon

from ..spec import GridInfo
from .shapes import oriented_multipolygon, polygon_parts

# Outline simplification tolerance, in cells.
SIMPLIFY = 0.05


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
        for p in polygon_parts(poly):
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
    pieces = [p for p in polygon_parts(clipped) if p.area >= min_area]
    # Sort so the output does not depend on contour traversal order.
    pieces.sort(key=lambda p: (p.bounds[0], p.bounds[1], -p.area))
    return oriented_multipolygon(pieces)
