"""Reading an outline back from GeoJSON or DXF (one edited in CAD, say)."""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import shapely
import shapely.ops
from shapely.geometry import MultiPolygon, Polygon
from shapely.geometry.polygon import orient

from ..geometry.shapes import _polygons
from ..spec import ProblemError

# --------------------------------------------------------------------------- reading

def read_outline(path):
    """The material outline stored in a GeoJSON or DXF file, as an oriented MultiPolygon.

    GeoJSON: the feature whose ``role`` is "material" (as levelform writes it), else the
    union of every Polygon/MultiPolygon in the file. DXF: closed LWPOLYLINE, POLYLINE and
    CIRCLE entities on layers OUTLINE and HOLES (as levelform writes them), else every
    closed one; rings nested inside an odd number of others become holes. Raises
    ProblemError naming the file for anything unreadable.
    """
    path = Path(path)
    if not path.is_file():
        raise ProblemError(f"{path}: no such file")
    suffix = path.suffix.lower()
    if suffix in (".geojson", ".json"):
        geom = _read_geojson(path)
    elif suffix == ".dxf":
        geom = _read_dxf(path)
    else:
        raise ProblemError(f"{path}: unknown outline format {path.suffix!r}; use .geojson or .dxf")
    polys = [orient(p, 1.0) for p in _polygons(geom) if p.area > 0.0]
    if not polys:
        raise ProblemError(f"{path}: holds no outline with area")
    return MultiPolygon(polys)


def _read_geojson(path: Path):
    from shapely.geometry import shape

    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise ProblemError(f"{path}: not a readable GeoJSON file ({exc})") from None
    if not isinstance(doc, dict) or "type" not in doc:
        raise ProblemError(f"{path}: not a GeoJSON object (no \"type\")")
    if doc["type"] == "FeatureCollection":
        feats = doc.get("features")
        if not isinstance(feats, list):
            raise ProblemError(f"{path}: FeatureCollection without a \"features\" list")
    elif doc["type"] == "Feature":
        feats = [doc]
    else:
        feats = [{"type": "Feature", "properties": {}, "geometry": doc}]
    areal = [f for f in feats if isinstance(f, dict) and isinstance(f.get("geometry"), dict)
             and f["geometry"].get("type") in ("Polygon", "MultiPolygon")]
    chosen = [f for f in areal if (f.get("properties") or {}).get("role") == "material"] or areal
    if not chosen:
        raise ProblemError(f"{path}: no Polygon or MultiPolygon geometry found")
    geoms = []
    for k, f in enumerate(chosen):
        try:
            g = shape(f["geometry"])
        except Exception as exc:  # shapely raises several types for malformed coordinates
            raise ProblemError(f"{path}: feature {k} has malformed coordinates ({exc})") from None
        if not g.is_valid:
            raise ProblemError(f"{path}: feature {k} is not a valid polygon ({shapely.is_valid_reason(g)})")
        geoms.append(g)
    return shapely.union_all(geoms)


def _read_dxf(path: Path):
    import ezdxf
    from ezdxf import path as dxf_path

    try:
        doc = ezdxf.readfile(str(path))
    except (OSError, ezdxf.DXFError, UnicodeDecodeError) as exc:
        raise ProblemError(f"{path}: not a readable DXF file ({exc})") from None
    msp = doc.modelspace()

    def closed(e):
        t = e.dxftype()
        if t == "CIRCLE":
            return True
        if t == "LWPOLYLINE":
            return bool(e.closed)
        if t == "POLYLINE":
            return bool(e.is_closed) and not (e.is_polygon_mesh or e.is_poly_face_mesh)
        return False

    ents = [e for e in msp.query("LWPOLYLINE POLYLINE CIRCLE") if closed(e)]
    ours = [e for e in ents if e.dxf.layer.upper() in ("OUTLINE", "HOLES")]
    ents = ours or ents
    if not ents:
        raise ProblemError(f"{path}: no closed polyline found (expected layers OUTLINE and HOLES)")
    from ezdxf import bbox

    ext = bbox.extents(ents)
    size = float(max(ext.size.x, ext.size.y)) if ext.has_data else 1.0
    polys = []
    for e in ents:  # arcs (bulges, circles) flattened to 1e-4 of the drawing size
        try:
            pts = np.array([(p.x, p.y) for p in dxf_path.make_path(e).flattening(1e-4 * size, segments=16)])
        except Exception as exc:  # ezdxf path errors on broken entities
            raise ProblemError(f"{path}: entity {e.dxf.handle} on layer {e.dxf.layer} cannot be read ({exc})") from None
        poly = Polygon(pts) if len(pts) >= 3 else Polygon()
        if poly.is_empty or poly.area <= 0.0 or not poly.is_valid:
            reason = shapely.is_valid_reason(poly) if len(pts) >= 3 else "too few points"
            raise ProblemError(f"{path}: closed polyline {e.dxf.handle} on layer {e.dxf.layer} is not a simple "
                               f"ring ({reason})")
        polys.append(poly)
    # Nesting depth by containment: even depth -> material, odd -> hole of its parent.
    order = sorted(range(len(polys)), key=lambda k: -polys[k].area)
    depth, parent = {}, {}
    for pos, k in enumerate(order):
        rep = polys[k].representative_point()
        cands = [j for j in order[:pos] if polys[j].contains(rep)]
        parent[k] = min(cands, key=lambda j: polys[j].area) if cands else None
        depth[k] = 0 if parent[k] is None else depth[parent[k]] + 1
    shells = []
    for k in order:
        if depth[k] % 2 == 0:
            holes = [polys[j].exterior.coords for j in order if parent[j] == k]
            shell = Polygon(polys[k].exterior.coords, holes)
            if not shell.is_valid:
                raise ProblemError(f"{path}: the rings do not form a valid outline "
                                   f"({shapely.is_valid_reason(shell)})")
            shells.append(shell)
    return shapely.union_all(shells)
