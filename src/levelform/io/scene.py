"""What the exporters share: the result's polygons, units and number formatting."""
from __future__ import annotations

import math

import numpy as np
from shapely.geometry import Polygon

from ..geometry.shapes import domain_polygon, keep_regions, polygon_parts
from ..spec import Result

# --------------------------------------------------------------------------- helpers

def coordinate_text(v: float) -> str:
    """10 significant digits, no negative zero: stable text for coordinates."""
    s = f"{float(v):.10g}"
    return "0" if s in ("-0", "0") else s


def round_coordinate(v: float) -> float:
    return float(coordinate_text(v))


def coordinate_rings(poly: Polygon):
    return [np.asarray(poly.exterior.coords)] + [np.asarray(r.coords) for r in poly.interiors]


def length_unit(problem) -> str:
    return str(problem.units.length)


def drawing_inputs(result: Result):
    """Shared drawing inputs: domain, material polygons, keep regions, glyph size."""
    problem = result.problem
    domain = domain_polygon(problem)
    material = polygon_parts(result.outline)
    solid, empty = keep_regions(problem)
    minx, miny, maxx, maxy = domain.bounds
    size = math.hypot(maxx - minx, maxy - miny)
    return domain, material, solid, empty, size


def unit_vector(v):
    v = np.asarray(v, dtype=float)
    n = float(np.hypot(*v))
    return v / n if n > 0 else None
