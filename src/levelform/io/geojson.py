"""The outline as GeoJSON in planar model coordinates."""
from __future__ import annotations

import json
import re

from shapely.geometry import Polygon

from ..geometry.shapes import polygon_parts
from ..spec import Result
from .scene import coordinate_rings, drawing_inputs, length_unit, round_coordinate

# --------------------------------------------------------------------------- GeoJSON

def _geojson_polygon(poly: Polygon):
    return [[[round_coordinate(x), round_coordinate(y)] for x, y in ring[:, :2]] for ring in coordinate_rings(poly)]


def outline_geojson(result: Result) -> str:
    """GeoJSON FeatureCollection: the material MultiPolygon, the domain and keep regions.

    Coordinates are planar model coordinates in the problem's length unit, not WGS84
    longitude/latitude; each feature says so in its properties. Rings follow RFC 7946
    (outer counter-clockwise), numbers carry 10 significant digits.
    """
    from shapely.geometry.polygon import orient

    domain, material, solid, empty, _ = drawing_inputs(result)
    unit = length_unit(result.problem)
    crs_note = f"planar model coordinates in {unit}, not WGS84"

    def feature(role, polys, extra=None):
        props = {"role": role, "units": unit, "crs": crs_note}
        props.update(extra or {})
        return {
            "type": "Feature",
            "properties": props,
            "geometry": {"type": "MultiPolygon",
                         "coordinates": [_geojson_polygon(orient(p, 1.0)) for p in polys]},
        }

    features = [
        feature("material", material, {"name": str(result.problem.name),
                                        "area": round_coordinate(sum(p.area for p in material))}),
        feature("domain", [domain], {"area": round_coordinate(domain.area)}),
    ]
    if not solid.is_empty:
        features.append(feature("keep_solid", polygon_parts(solid)))
    if not empty.is_empty:
        features.append(feature("keep_empty", polygon_parts(empty)))
    doc = {"type": "FeatureCollection", "features": features}
    text = json.dumps(doc, indent=2, allow_nan=False, ensure_ascii=False)
    # One coordinate pair per line instead of one number per line.
    text = re.sub(r"\[\s+(-?[0-9][0-9.eE+-]*),\s+(-?[0-9][0-9.eE+-]*)\s+\]", r"[\1, \2]", text)
    return text + "\n"
