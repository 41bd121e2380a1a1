"""Reading an outline back from GeoJSON or DXF (one edited in CAD, say)."""
from __future__ import annotations

import json
import math
from collections import Counter
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import shapely
import shapely.ops
from shapely.geometry import MultiPolygon, Polygon
from shapely.geometry.polygon import orient

from ..geometry.shapes import polygon_parts
from ..spec import ProblemError

# Pieces of a drawing are joined end to end when their ends lie within JOIN of each other,
# and curves (arcs, circles, bulges, splines) become chords within FLATTEN of the curve;
# both as shares of the drawing's size (the larger side of the box around what is read).
JOIN = 1e-5
FLATTEN = 1e-4
# DXF entity types read as outline edges; every other type is reported as ignored.
DXF_CURVES = ("LINE", "ARC", "CIRCLE", "ELLIPSE", "SPLINE", "LWPOLYLINE", "POLYLINE")
# Layers levelform writes the outline on; a file that uses them is read from them only.
OWN_LAYERS = ("OUTLINE", "HOLES")
# Open chains, branch points and the like named one by one before the rest are counted.
LISTED = 5


@dataclass(frozen=True)
class OutlineRead:
    """An outline read from a file and what the reading made of the file.

    ``outline`` is the oriented MultiPolygon; ``pieces`` and ``holes`` count its solid
    pieces and their holes; ``read`` says in one line what was read (from which
    entities or features); ``warnings`` list what was not read (entity types ignored,
    chains of lines left open, rings drawn twice), each with a count and a location.
    """

    outline: MultiPolygon
    pieces: int
    holes: int
    read: str
    warnings: tuple = ()


# --------------------------------------------------------------------------- reading

def read_outline(path):
    """The material outline stored in a GeoJSON or DXF file, as an oriented MultiPolygon.

    The same as ``read_outline_report(path).outline``; see :func:`read_outline_report`
    for what is read and for the messages about what is not.
    """
    return read_outline_report(path).outline


def read_outline_report(path) -> OutlineRead:
    """Read the material outline of a GeoJSON or DXF file and say what was read.

    Parameters
    ----------
    path : str or path-like
        A ``.geojson``/``.json`` or ``.dxf`` file.

    Returns
    -------
    OutlineRead
        The oriented MultiPolygon, its counts of pieces and holes, a line saying what was
        read and warnings about what was not.

    Notes
    -----
    GeoJSON: the feature whose ``role`` is "material" (as levelform writes it), else the
    union of every Polygon/MultiPolygon in the file.

    DXF: LINE, ARC, CIRCLE, ELLIPSE, SPLINE, LWPOLYLINE and POLYLINE entities on layers
    OUTLINE and HOLES when the file has an OUTLINE layer in use (as levelform writes it),
    else on every layer. Closed entities are rings by themselves; open ones are joined
    end to end, where their ends lie within ``JOIN`` of the drawing's size, into chains,
    and a chain that comes back to its start is a ring. Curves become chords within
    ``FLATTEN`` of the drawing's size. Rings nested inside an even number of others are
    solid, inside an odd number holes (a circle drawn in a plate is a hole, a ring drawn
    in that hole an island). Chains left open, other entity types and rings drawn twice
    are reported in ``warnings``.

    Raises
    ------
    ProblemError
        Naming the file, for anything unreadable: a missing file, an unknown format, a
        malformed file, a ring that crosses itself, or a file with no closed outline in it.
    """
    path = Path(path)
    if not path.is_file():
        raise ProblemError(f"{path}: no such file")
    suffix = path.suffix.lower()
    if suffix in (".geojson", ".json"):
        geom, source, warnings = _read_geojson(path)
    elif suffix == ".dxf":
        geom, source, warnings = _read_dxf(path)
    else:
        raise ProblemError(f"{path}: unknown outline format {path.suffix!r}; use .geojson or .dxf")
    polys = [orient(p, 1.0) for p in polygon_parts(geom) if p.area > 0.0]
    if not polys:
        raise ProblemError(f"{path}: holds no outline with area")
    holes = sum(len(p.interiors) for p in polys)
    read = (f"{path.name}: read {source}: {_count(len(polys), 'solid piece')} with "
            f"{_count(holes, 'hole')}")
    return OutlineRead(outline=MultiPolygon(polys), pieces=len(polys), holes=holes, read=read,
                       warnings=tuple(f"{path.name}: {w}" for w in warnings))


def _count(n: int, word: str, plural: str = "") -> str:
    return f"{n} {word if n == 1 else (plural or word + 's')}"


def _pt(xy) -> str:
    return f"({float(xy[0]):.6g}, {float(xy[1]):.6g})"


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
    warnings = []
    other = Counter(f"{f['geometry'].get('type')} feature" if isinstance(f, dict) and isinstance(f.get("geometry"), dict)
                    else "feature without geometry" for f in feats if not any(f is a for a in areal))
    for kind, n in sorted(other.items()):
        warnings.append(f"ignored {n} {kind}{'' if n == 1 else '(s)'}: not an area")
    if len(chosen) < len(areal):
        roles = sorted({str((f.get("properties") or {}).get("role")) for f in areal if not any(f is c for c in chosen)})
        source = f"the material feature (not the {', '.join(roles)} {'feature' if len(roles) == 1 else 'features'})"
    else:
        source = _count(len(chosen), "polygon feature")
    geoms = []
    for k, f in enumerate(chosen):
        try:
            g = shape(f["geometry"])
        except Exception as exc:  # shapely raises several types for malformed coordinates
            raise ProblemError(f"{path}: feature {k} has malformed coordinates ({exc})") from None
        if not g.is_valid:
            raise ProblemError(f"{path}: feature {k} is not a valid polygon ({shapely.is_valid_reason(g)})")
        geoms.append(g)
    return shapely.union_all(geoms), source, warnings


def _read_dxf(path: Path):
    """(geometry, what was read, warnings) of a DXF file; see :func:`read_outline_report`."""
    import ezdxf
    from ezdxf import bbox

    try:
        doc = ezdxf.readfile(str(path))
    except (OSError, ezdxf.DXFError, UnicodeDecodeError) as exc:
        raise ProblemError(f"{path}: not a readable DXF file ({exc})") from None
    entities = list(doc.modelspace())

    def curve(e) -> bool:
        t = e.dxftype()
        if t == "POLYLINE":
            return not (e.is_polygon_mesh or e.is_poly_face_mesh)
        return t in DXF_CURVES

    own = any(curve(e) and e.dxf.layer.upper() == "OUTLINE" for e in entities)
    considered = [e for e in entities if e.dxf.layer.upper() in OWN_LAYERS] if own else entities
    chosen = [e for e in considered if curve(e)]
    ignored = [e for e in considered if not curve(e)]
    ext = bbox.extents(chosen) if chosen else None
    size = float(max(ext.size.x, ext.size.y)) if ext is not None and ext.has_data else 0.0
    size = size if size > 0.0 else 1.0
    tol = JOIN * size

    rings, chains, degenerate = [], [], []  # rings: (points, [entities]); chains: (points, entity)
    for e in chosen:
        try:
            pts = _flatten(e, FLATTEN * size)
        except Exception as exc:  # ezdxf raises several types on broken entities
            raise ProblemError(f"{path}: {_entity(e)} cannot be read ({exc})") from None
        if len(pts):
            pts = pts[np.concatenate([[True], np.any(pts[1:] != pts[:-1], axis=1)])]
        if len(pts) < 2:
            degenerate.append(e)
        elif math.dist(pts[0], pts[-1]) <= tol:
            if len(pts) >= 4:  # three distinct corners at least
                pts[-1] = pts[0]
                rings.append((pts, [e]))
            else:
                degenerate.append(e)
        else:
            chains.append((pts, e))
    joined, open_chains, branches = _join_chains(chains, tol)
    rings.extend(joined)

    warnings = _ignored_warnings(ignored, degenerate, bbox)
    for pts, ents in open_chains[:LISTED]:
        what = (_entity(ents[0]) if len(ents) == 1 else
                f"a chain of {len(ents)} pieces ({_types(ents)}, layer {ents[0].dxf.layer})")
        warnings.append(f"{what} from {_pt(pts[0])} to {_pt(pts[-1])} was left open: its ends lie "
                        f"{math.dist(pts[0], pts[-1]):.3g} apart, and pieces are joined only where their ends "
                        f"lie within {tol:.3g}; close it in CAD")
    if len(open_chains) > LISTED:
        warnings.append(f"... and {_count(len(open_chains) - LISTED, 'more open chain')} left open")
    for xy, n in branches[:LISTED]:
        warnings.append(f"{n} pieces meet at {_pt(xy)}: an outline edge needs exactly two there, so the "
                        "chains through it were not joined")
    if len(branches) > LISTED:
        warnings.append(f"... and {_count(len(branches) - LISTED, 'more branch point')}")

    if not rings:
        found = ", ".join(f"{_count(n, t + ' entity', t + ' entities')}"
                          for t, n in sorted(Counter(e.dxftype() for e in considered).items())) or "nothing"
        where = " on layers OUTLINE and HOLES" if own else ""
        raise ProblemError([f"{path}: no closed outline found{where} (read {found}); draw the outline as "
                            "closed polylines, circles, or lines and arcs that meet end to end"]
                           + [f"{path.name}: {w}" for w in warnings])

    polys = []
    for pts, ents in rings:
        poly = Polygon(pts)
        if poly.area <= 0.0 or not poly.is_valid:
            reason = shapely.is_valid_reason(poly) if poly.area > 0.0 else "no area"
            raise ProblemError(f"{path}: the ring of {_describe(ents)} near {_pt(pts[0])} is not a simple ring "
                               f"({reason})")
        polys.append((poly, ents))

    # Nesting depth by containment: even depth -> material, odd -> hole of its parent.
    order = sorted(range(len(polys)), key=lambda k: -polys[k][0].area)
    depth, parent, twice = {}, {}, []
    for pos, k in enumerate(order):
        poly = polys[k][0]
        rep = poly.representative_point()
        cands = [j for j in order[:pos] if j not in twice and polys[j][0].contains(rep)]
        same = [j for j in cands if polys[j][0].symmetric_difference(poly).area <= tol * poly.length]
        if same:
            twice.append(k)
            warnings.append(f"the ring of {_describe(polys[k][1])} near {_pt(poly.exterior.coords[0])} repeats "
                            f"the ring of {_describe(polys[same[0]][1])}: read once")
            continue
        parent[k] = min(cands, key=lambda j: polys[j][0].area) if cands else None
        depth[k] = 0 if parent[k] is None else depth[parent[k]] + 1
    shells = []
    for k in order:
        if k in depth and depth[k] % 2 == 0:
            holes = [polys[j][0].exterior.coords for j in order if parent.get(j) == k]
            shell = Polygon(polys[k][0].exterior.coords, holes)
            if not shell.is_valid:
                raise ProblemError(f"{path}: the rings do not form a valid outline "
                                   f"({shapely.is_valid_reason(shell)})")
            shells.append(shell)
    used = [e for k in depth for e in polys[k][1]]
    source = f"{_count(len(depth), 'closed ring')} from {_types(used)}"
    if own:
        rest = [e for e in entities if e.dxf.layer.upper() not in OWN_LAYERS]
        if rest:
            layers = ", ".join(sorted({e.dxf.layer for e in rest}))
            source += (f" on layers OUTLINE and HOLES ({_count(len(rest), 'entity', 'entities')} on layers "
                       f"{layers} are drawing aids, not read)")
    return shapely.union_all(shells), source, warnings


def _flatten(e, sagitta: float) -> np.ndarray:
    """Points (n, 2) along a DXF curve in world coordinates. Arcs (ARC, CIRCLE and the
    bulges of polylines) become chords whose points lie on the arc and which stray from it
    by at most ``sagitta``; ellipses and splines by ezdxf's flattening to that distance."""
    t = e.dxftype()
    if t == "LINE":
        pts = [e.dxf.start, e.dxf.end]
    elif t in ("CIRCLE", "ARC", "ELLIPSE", "SPLINE"):
        pts = list(e.flattening(sagitta))
    else:  # LWPOLYLINE, POLYLINE: corners with bulges, in the entity's own plane (OCS)
        from ezdxf.math import Vec3

        if t == "LWPOLYLINE":
            verts = [(float(x), float(y), float(b)) for x, y, b in e.get_points("xyb")]
            closed, z, ocs = bool(e.closed), float(e.dxf.elevation), e.ocs()
        else:
            verts = [(v.dxf.location.x, v.dxf.location.y, float(v.dxf.get("bulge", 0.0))) for v in e.vertices]
            closed = bool(e.is_closed)
            z, ocs = (float(e.dxf.elevation.z), e.ocs()) if e.is_2d_polyline else (0.0, None)
            if ocs is None:  # a 3D polyline: world coordinates, no bulges
                verts = [(x, y, 0.0) for x, y, _ in verts]
        if closed and len(verts) > 1:
            verts = verts + [verts[0]]
        plane = [verts[0][:2]] if verts else []
        for (x0, y0, bulge), (x1, y1, _) in zip(verts[:-1], verts[1:]):
            plane.extend(_bulge_points((x0, y0), (x1, y1), bulge, sagitta))
        pts = [Vec3(x, y, z) for x, y in plane]
        if ocs is not None:
            pts = list(ocs.points_to_wcs(pts))
    return np.array([(float(p[0]), float(p[1])) for p in pts]).reshape(-1, 2)


def _bulge_points(a, b, bulge: float, sagitta: float) -> list:
    """Points after ``a`` up to ``b`` along a polyline segment: ``b`` alone for a straight
    one, else on its arc (the bulge is tan(sweep / 4), positive counter-clockwise, as the
    DXF reference defines it), no chord straying more than ``sagitta`` from the arc."""
    chord = math.dist(a, b)
    if bulge == 0.0 or chord == 0.0:
        return [b]
    sweep = 4.0 * math.atan(bulge)
    radius = chord / (2.0 * abs(math.sin(sweep / 2.0)))
    # Centre: from the chord's midpoint along its left normal (for a counter-clockwise arc)
    # by r cos(sweep / 2), signed by the bulge.
    mx, my = (a[0] + b[0]) / 2.0, (a[1] + b[1]) / 2.0
    nx, ny = -(b[1] - a[1]) / chord, (b[0] - a[0]) / chord
    off = radius * math.cos(sweep / 2.0) * math.copysign(1.0, bulge)
    cx, cy = mx + off * nx, my + off * ny
    step = 2.0 * math.acos(max(-1.0, 1.0 - sagitta / radius)) if sagitta < radius else math.pi / 2.0
    n = max(1, math.ceil(abs(sweep) / max(step, 1e-9)))
    start = math.atan2(a[1] - cy, a[0] - cx)
    pts = [(cx + radius * math.cos(start + sweep * k / n), cy + radius * math.sin(start + sweep * k / n))
           for k in range(1, n)]
    return pts + [b]


def _entity(e) -> str:
    return f"{e.dxftype()} {e.dxf.handle} on layer {e.dxf.layer}"


def _types(ents) -> str:
    """'4 LINE, 1 CIRCLE': entity counts by type."""
    return ", ".join(f"{n} {t}" for t, n in sorted(Counter(e.dxftype() for e in ents).items()))


def _describe(ents) -> str:
    return _entity(ents[0]) if len(ents) == 1 else f"{_types(ents)} (the first {_entity(ents[0])})"


def _ignored_warnings(ignored, degenerate, bbox) -> list[str]:
    """One warning per ignored entity type, and one for pieces of no length, each with
    the count and the place of the first."""
    def near(e) -> str:
        try:
            ext = bbox.extents([e])
            if ext.has_data:
                return f" near {_pt(ext.center)}"
        except Exception:  # ezdxf cannot box every entity type
            pass
        return ""

    out = []
    by_type: dict = {}
    for e in ignored:
        t = e.dxftype() + (" (mesh)" if e.dxftype() == "POLYLINE" else "")
        by_type.setdefault(t, []).append(e)
    for t, ents in sorted(by_type.items()):
        why = ("block references are not expanded: explode them in CAD to have their lines read"
               if t == "INSERT" else "not outline geometry")
        out.append(f"ignored {_count(len(ents), t + ' entity', t + ' entities')} ({why}); the first is "
                   f"{ents[0].dxf.handle} on layer {ents[0].dxf.layer}{near(ents[0])}")
    if degenerate:
        out.append(f"ignored {_count(len(degenerate), 'piece')} of no length or area ({_types(degenerate)}); "
                   f"the first is {_entity(degenerate[0])}{near(degenerate[0])}")
    return out


def _join_chains(chains, tol):
    """Join open pieces end to end where their ends lie within ``tol``.

    ``chains`` holds (points, entity) pairs. Returns (rings, open chains, branch points):
    rings and open chains as (points, [entities]) in drawing order, branch points as
    (xy, number of pieces meeting there) where more than two pieces meet.
    """
    if not chains:
        return [], [], []
    from scipy.sparse import coo_matrix, csgraph
    from scipy.spatial import cKDTree

    ends = np.array([[c[0], c[-1]] for c, _ in chains]).reshape(-1, 2)  # 2k: start of k, 2k+1: its end
    pairs = cKDTree(ends).query_pairs(tol, output_type="ndarray")
    graph = coo_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])), shape=(len(ends), len(ends)))
    _, node = csgraph.connected_components(graph, directed=False)
    degree = np.bincount(node)
    at: dict = {}
    for idx, n in enumerate(node):
        at.setdefault(int(n), []).append(idx)
    used = np.zeros(len(chains), bool)

    def follow(k: int, forward: bool):
        seq = [(k, forward)]
        used[k] = True
        start = node[2 * k + (0 if forward else 1)]
        cur = node[2 * k + (1 if forward else 0)]
        while cur != start and degree[cur] == 2:
            nxt = [i for i in at[int(cur)] if not used[i // 2]]
            if not nxt:
                break
            j, fwd = nxt[0] // 2, nxt[0] % 2 == 0  # entered at its start: walk it forward
            seq.append((j, fwd))
            used[j] = True
            cur = node[2 * j + (1 if fwd else 0)]
        pts = [chains[j][0] if fwd else chains[j][0][::-1] for j, fwd in seq]
        pts = np.concatenate([pts[0]] + [p[1:] for p in pts[1:]])
        return pts, [chains[j][1] for j, _ in seq], cur == start

    rings, opens = [], []

    def keep(pts, ents, closed):
        if closed and len(pts) >= 4:
            pts = pts.copy()
            pts[-1] = pts[0]
            rings.append((pts, ents))
        else:
            opens.append((pts, ents))

    for n in range(len(degree)):  # chains from dead ends and branch points first
        if degree[n] != 2:
            for i in at[n]:
                if not used[i // 2]:
                    keep(*follow(i // 2, i % 2 == 0))
    for k in range(len(chains)):  # what is left runs through two-piece joints only: loops
        if not used[k]:
            keep(*follow(k, True))
    branches = [(ends[at[n][0]], int(degree[n])) for n in range(len(degree)) if degree[n] > 2]
    return rings, opens, branches
