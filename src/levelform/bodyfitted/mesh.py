"""The triangle mesh of an exported outline, following its edges.

The outline is checked and split into counter-clockwise polygons, the places where
supports and loads must find element edges or vertices are planned, and Netgen (LGPL-2.1,
through its Python package ``netgen-mesher``) triangulates it. Lengths are in the
problem's length unit.
"""
from __future__ import annotations

import math

import numpy as np
import shapely
import shapely.ops
from shapely.geometry import LineString, Point, Polygon
from shapely.geometry.polygon import orient

from ..fem.model import uses_pad
from ..geometry.shapes import item_geometry, polygon_parts
from ..spec import ProblemError

__all__ = [
    "MAX_ELEMENTS",
    "RING_DIVISIONS",
    "check_element_count",
    "mesh_outline",
    "mesher_name",
    "outline_polygons",
    "pad_polygon",
    "plan_mesh",
    "point_segment_distance",
    "reentrant_corners",
]

# Largest mesh the check will build (triangles); beyond it the user is asked for a coarser size.
MAX_ELEMENTS = 2_000_000
# Elements per ring perimeter at least: small holes get finer elements around them.
RING_DIVISIONS = 32


def outline_polygons(outline) -> list[Polygon]:
    """The pieces of an outline, checked, as counter-clockwise polygons.

    Parameters
    ----------
    outline : shapely Polygon or MultiPolygon in model coordinates.

    Returns
    -------
    list of Polygon
        The pieces with area, exterior counter-clockwise and holes clockwise.

    Raises
    ------
    ProblemError
        If the outline is not a shapely geometry, is empty, has an invalid piece or
        pieces that overlap.
    """
    if outline is None or not hasattr(outline, "geom_type"):
        raise ProblemError("outline: expected a shapely Polygon or MultiPolygon")
    polys = [orient(p, 1.0) for p in polygon_parts(outline) if p.area > 0.0]
    if not polys:
        raise ProblemError("outline: the outline is empty (no area to analyse)")
    for k, p in enumerate(polys):
        if not p.is_valid:
            raise ProblemError(f"outline: piece {k} is not a valid polygon ({shapely.is_valid_reason(p)})")
    merged = shapely.union_all(polys)
    if abs(merged.area - sum(p.area for p in polys)) > 1e-9 * merged.area:
        raise ProblemError("outline: pieces overlap; pass one valid (Multi)Polygon")
    return polys


def check_element_count(area: float, mesh_size: float) -> None:
    """Refuse a mesh size that would give more than :data:`MAX_ELEMENTS` triangles.

    Parameters
    ----------
    area : area of the outline (length^2).
    mesh_size : element size asked for (length).

    Raises
    ------
    ProblemError
        Naming ``mesh_size`` and the smallest size allowed for this area.
    """
    estimate = 2.5 * area / (0.433 * mesh_size**2)
    if estimate > MAX_ELEMENTS:
        floor = math.sqrt(2.5 * area / (0.433 * MAX_ELEMENTS))
        raise ProblemError(
            f"mesh_size: {mesh_size:.4g} would give about {estimate:.3g} triangles; use at least {floor:.3g}")


def _rings(poly: Polygon):
    return [poly.exterior] + list(poly.interiors)


def point_segment_distance(xy: np.ndarray, a, b) -> np.ndarray:
    """Distance of points to a segment.

    Parameters
    ----------
    xy : (n, 2) points.
    a, b : (x, y) ends of the segment (may coincide).

    Returns
    -------
    ndarray
        (n,) distances.
    """
    a = np.asarray(a, float)
    d = np.asarray(b, float) - a
    L2 = float(d @ d)
    if L2 == 0.0:
        return np.hypot(xy[:, 0] - a[0], xy[:, 1] - a[1])
    t = np.clip(((xy - a) @ d) / L2, 0.0, 1.0)
    q = a + t[:, None] * d
    return np.hypot(xy[:, 0] - q[:, 0], xy[:, 1] - q[:, 1])


def _insert_points(coords: np.ndarray, pts: list, tol: float) -> np.ndarray:
    """Ring coordinates (closed, (n+1, 2)) with the points of ``pts`` that lie within tol of
    the ring added as vertices (snapped to an existing vertex closer than tol)."""
    a, b = coords[:-1], coords[1:]
    d = b - a
    L2 = np.einsum("ij,ij->i", d, d)
    inserts: dict[int, list] = {}
    for p in pts:
        p = np.asarray(p, float)
        t = np.clip(np.einsum("ij,ij->i", p - a, d) / np.where(L2 > 0, L2, 1.0), 0.0, 1.0)
        q = a + t[:, None] * d
        dist = np.hypot(*(q - p).T)
        k = int(np.argmin(dist))
        if dist[k] > tol:
            continue
        length = math.sqrt(L2[k])
        if t[k] * length <= tol or (1.0 - t[k]) * length <= tol:
            continue  # an existing vertex already sits there
        inserts.setdefault(k, []).append(float(t[k]))
    if not inserts:
        return coords
    out = []
    for k in range(len(a)):
        out.append(a[k])
        if k in inserts:
            ts = sorted(inserts[k])
            length = math.sqrt(L2[k])
            last = 0.0
            for t in ts:
                if (t - last) * length > tol and (1.0 - t) * length > tol:
                    out.append(a[k] + t * d[k])
                    last = t
    out.append(coords[-1])
    return np.array(out)


def _parts(geom) -> list:
    """LineStrings of a (multi)line result, ignoring points."""
    if geom is None or geom.is_empty:
        return []
    if geom.geom_type == "LineString":
        return [geom]
    if hasattr(geom, "geoms"):
        out = []
        for g in geom.geoms:
            out.extend(_parts(g))
        return out
    return []


def _pad_h(settings, mesh_size) -> float:
    """Element size inside a pad: the mesh size, at most half the pad radius."""
    return min(mesh_size, 0.5 * settings.pad_radius)


def pad_polygon(centre, settings, mesh_size) -> Polygon:
    """The pad disk as the polygon embedded in the mesh.

    Its chords are about the pad's element size long, at least 24 of them (area within
    1.2 % of the disk).

    Parameters
    ----------
    centre : (x, y) of the point support or load.
    settings : resolved settings (``levelform.fem.model.resolve_settings``); reads ``pad_radius``.
    mesh_size : element size of the check (length).

    Returns
    -------
    Polygon
    """
    r = settings.pad_radius
    q = max(6, math.ceil(2.0 * math.pi * r / _pad_h(settings, mesh_size) / 4.0))
    return Point(centre).buffer(r, quad_segs=q)


def plan_mesh(problem, material, settings, mesh_size, tol):
    """What the mesher must respect for the problem's supports and loads.

    Parameters
    ----------
    problem : levelform.spec.Problem
    material : shapely geometry of the outline (the union of its pieces).
    settings : resolved settings (pads and pad radius).
    mesh_size : element size (length).
    tol : on-edge tolerance (length).

    Returns
    -------
    hard : list of (x, y)
        Points to put on the outline edge as vertices.
    inner : list of LineString
        Lines to embed inside the outline (interior segments, pad and box edges), noded.
    refine : list of (x, y, h)
        Spots where elements must be at most h (pads, unpadded interior points).
    """
    boundary = material.boundary
    edge_zone = boundary.buffer(tol, quad_segs=2)
    hard, inner, refine = [], [], []

    def project(p):
        q = shapely.ops.nearest_points(boundary, Point(p))[0]
        return (q.x, q.y)

    def add_line(line):
        on_mat = line.intersection(material)
        for part in _parts(on_mat.intersection(edge_zone)):
            if part.length > 10.0 * tol:
                hard.extend(project(c) for c in (part.coords[0], part.coords[-1]))
        for part in _parts(on_mat.difference(edge_zone)):
            if part.length <= tol:
                continue
            coords = [tuple(c) for c in part.coords]
            for end in (0, -1):
                if boundary.distance(Point(coords[end])) <= 2.0 * tol:
                    coords[end] = project(coords[end])
                    hard.append(coords[end])
            inner.append(LineString(coords))

    for item in list(problem.supports) + list(problem.loads):
        g = item_geometry(item)
        if item.kind == "point":
            p = item.where
            if material.distance(g) <= tol and boundary.distance(g) <= tol:
                hard.append(project(p))
            if uses_pad(item, settings):
                add_line(pad_polygon(p, settings, mesh_size).exterior)
                refine.append((p[0], p[1], _pad_h(settings, mesh_size)))
            elif material.distance(g) <= tol and boundary.distance(g) > tol:
                refine.append((p[0], p[1], 0.25 * mesh_size))  # a vertex close to an interior point
        elif item.kind == "segment":
            add_line(g)
        else:
            add_line(g.exterior)
    if inner:
        noded = shapely.unary_union(inner)
        inner = [p for p in _parts(noded) if p.length > tol]
    return hard, inner, refine


def mesh_outline(polys, hard, inner, refine, mesh_size, tol):
    """Triangulate the outline with Netgen.

    Parameters
    ----------
    polys : pieces of the outline (:func:`outline_polygons`).
    hard, inner, refine : what the mesh must respect (:func:`plan_mesh`).
    mesh_size : element size (length); rings get at least :data:`RING_DIVISIONS` elements.
    tol : on-edge tolerance (length).

    Returns
    -------
    p : ndarray
        (nv, 2) vertices.
    t : ndarray
        (ne, 3) triangles, counter-clockwise.

    Raises
    ------
    ProblemError
        If netgen-mesher is missing or cannot mesh the outline.
    """
    try:
        import netgen.meshing as ngm
        from netgen.geom2d import SplineGeometry
    except ImportError as exc:  # pragma: no cover - depends on the installation
        raise ProblemError(
            "verify: the mesher is missing: install the Python package netgen-mesher "
            "(pip install netgen-mesher)") from exc
    ngm.SetMessageImportance(0)
    geo = SplineGeometry()
    index: dict = {}
    ring_pts = []

    def pid(x, y):
        key = (float(x), float(y))
        if key not in index:
            index[key] = geo.AppendPoint(*key)
        return index[key]

    for poly in polys:
        for ring in _rings(poly):
            coords = _insert_points(np.asarray(ring.coords)[:, :2], hard, tol)
            maxh = min(mesh_size, ring.length / RING_DIVISIONS)
            ids = [pid(x, y) for x, y in coords[:-1]]
            ring_pts.append(coords[:-1])
            for a, b in zip(ids, ids[1:] + ids[:1]):
                geo.Append(["line", a, b], leftdomain=1, rightdomain=0, bc="outline", maxh=maxh)
    if inner:
        from scipy.spatial import cKDTree

        allring = np.concatenate(ring_pts)
        tree = cKDTree(allring)
        for line in inner:
            c = np.asarray(line.coords)[:, :2]
            dist, nearest = tree.query(c)
            snap = dist <= 2.0 * tol
            c[snap] = allring[nearest[snap]]
            ids = [pid(x, y) for x, y in c]
            for a, b in zip(ids[:-1], ids[1:]):
                if a != b:
                    geo.Append(["line", a, b], leftdomain=1, rightdomain=1, bc="embedded", maxh=mesh_size)
    mp = ngm.MeshingParameters(maxh=mesh_size)
    for x, y, h in refine:
        mp.RestrictH(float(x), float(y), 0.0, float(h))
    try:
        ngmesh = geo.GenerateMesh(mp=mp)
    except Exception as exc:  # Netgen raises its own exception types
        raise ProblemError(f"outline: the mesher could not mesh the outline ({exc})") from exc
    p = np.asarray(ngmesh.Coordinates(), float)[:, :2]
    els = ngmesh.Elements2D().NumPy()
    t = np.asarray(els["nodes"], np.int64)[:, :3] - 1
    if t.size == 0:
        raise ProblemError("outline: the mesher produced no triangles; use a smaller mesh_size")
    used = np.unique(t)
    renum = np.full(p.shape[0], -1, np.int64)
    renum[used] = np.arange(used.size)
    p, t = p[used], renum[t]
    a, b, c = p[t[:, 0]], p[t[:, 1]], p[t[:, 2]]
    area2 = (b[:, 0] - a[:, 0]) * (c[:, 1] - a[:, 1]) - (b[:, 1] - a[:, 1]) * (c[:, 0] - a[:, 0])
    flip = area2 < 0
    t[flip] = t[flip][:, [0, 2, 1]]
    return p, t


def reentrant_corners(polys, min_angle=200.0):
    """Outline vertices whose interior angle exceeds ``min_angle``.

    Parameters
    ----------
    polys : pieces of the outline (:func:`outline_polygons`, oriented).
    min_angle : interior angle in degrees.

    Returns
    -------
    list of ((x, y), angle)
    """
    out = []
    for poly in polys:
        for k, ring in enumerate(_rings(poly)):
            c = np.asarray(ring.coords)[:-1, :2]
            if len(c) < 3:
                continue
            prev, nxt = np.roll(c, 1, axis=0), np.roll(c, -1, axis=0)
            u, v = c - prev, nxt - c
            turn = np.degrees(np.arctan2(u[:, 0] * v[:, 1] - u[:, 1] * v[:, 0], np.einsum("ij,ij->i", u, v)))
            # Material lies left of every ring (outer CCW, holes CW): a right turn is re-entrant.
            interior = 180.0 - turn
            sel = interior > min_angle
            out.extend(zip(map(tuple, c[sel]), interior[sel]))
    return out


def mesher_name() -> str:
    """The mesher and its version, e.g. ``"netgen-mesher 6.2.2404"``, for the report."""
    try:
        from importlib.metadata import version

        return f"netgen-mesher {version('netgen-mesher')}"
    except Exception:  # metadata missing in unusual installs
        return "netgen-mesher"
