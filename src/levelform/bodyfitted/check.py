"""Body-fitted re-analysis of an exported outline: what you export is what was checked.

The optimizer works on a fixed square grid, where the outline's edge cuts through cells.
Here the exported outline itself is meshed with triangles that follow its edges (Netgen,
LGPL-2.1, through its Python package ``netgen-mesher``), then solved in plane stress with
quadratic triangles (scikit-fem). Supports and loads of the problem are applied to the
real outline; anything that falls off it is reported, never dropped silently.

Lengths are in the problem's length unit, forces in its force unit, stresses in force /
length^2 (``problem.units.stress``). The report is a concept-design aid, not a code check.
"""
from __future__ import annotations

import dataclasses
import math
import time
from dataclasses import dataclass, field
from typing import Optional

import numpy as np
import shapely
import shapely.ops
from shapely.geometry import LineString, Point, Polygon
from shapely.geometry.polygon import orient

from ..fem.model import resolve_settings, uses_pad
from ..geometry.shapes import domain_polygon, item_geometry, polygon_parts
from ..linalg import sparse_lu
from ..spec import Problem, ProblemError

# Share by which the body-fitted compliance may differ from the grid's before a warning.
GRID_DIFFERENCE_WARN = 0.05
# Tolerance, as a share of the mesh size, for "lies on the outline edge / on the segment".
ON_EDGE = 1e-3
# Largest mesh the check will build (triangles); beyond it the user is asked for a coarser size.
MAX_ELEMENTS = 2_000_000
# Elements per ring perimeter at least: small holes get finer elements around them.
RING_DIVISIONS = 32
# Sub-triangles per edge of the reference triangle for the pad-load quadrature (m^2 points).
PAD_QUADRATURE = 10


@dataclass(frozen=True)
class Verification:
    """Result of one body-fitted check. Positions are (x, y) in model coordinates.

    ``ok`` is False when a support or load had to be reported in ``problems`` (it lies off
    the outline, or the outline cannot carry it); the figures then describe the outline as
    it was loaded, not the problem as stated. Figures are None when nothing could be solved.
    Arrays: ``points`` (n, 2) nodes (mesh vertices first, then mid-edge nodes for order 2),
    ``triangles`` (n_el, 3 or 6) node numbers (corners counter-clockwise, then the mid-edge
    nodes of edges 0-1, 1-2, 2-0), ``displacement`` (n, 2, n_cases), ``von_mises`` (n,)
    the nodal envelope over cases, ``element_von_mises`` (n_el,) at element centres.
    """

    ok: bool
    compliance: Optional[float]
    case_compliance: dict
    max_von_mises: Optional[float]
    max_von_mises_at: Optional[tuple]
    max_von_mises_case: Optional[str]
    max_displacement: Optional[float]
    max_displacement_at: Optional[tuple]
    max_displacement_case: Optional[str]
    mesh_size: float
    elements: int
    nodes: int
    vertices: int
    order: int
    area: float
    grid_compliance: Optional[float]
    relative_difference: Optional[float]
    warnings: tuple
    problems: tuple
    cases: dict  # name -> {"weight", "compliance", "max_von_mises", ...}
    mesher: str
    seconds: float
    points: np.ndarray = field(repr=False, compare=False)
    triangles: np.ndarray = field(repr=False, compare=False)
    displacement: np.ndarray = field(repr=False, compare=False)
    von_mises: np.ndarray = field(repr=False, compare=False)
    element_von_mises: np.ndarray = field(repr=False, compare=False)
    case_names: tuple = ()

    def summary(self) -> dict:
        """Every scalar and list field (no mesh arrays), as plain values."""
        skip = {"points", "triangles", "displacement", "von_mises", "element_von_mises"}
        return {f.name: getattr(self, f.name) for f in dataclasses.fields(self) if f.name not in skip}


# --------------------------------------------------------------------------- geometry

def _outline_polygons(outline) -> list[Polygon]:
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


def _rings(poly: Polygon):
    return [poly.exterior] + list(poly.interiors)


def _point_segment_distance(xy: np.ndarray, a, b) -> np.ndarray:
    """Distance of points xy (n, 2) to the segment a-b."""
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
    """The pad disk as the polygon embedded in the mesh: chords of about the pad's element
    size, at least 24 of them (area within 1.2 % of the disk)."""
    r = settings.pad_radius
    q = max(6, math.ceil(2.0 * math.pi * r / _pad_h(settings, mesh_size) / 4.0))
    return Point(centre).buffer(r, quad_segs=q)


def _plan(problem, material, settings, mesh_size, tol):
    """What the mesher must respect: points to put on the outline edge, lines to embed
    inside, and spots to refine (pads, unpadded interior points)."""
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


def _mesh(polys, hard, inner, refine, mesh_size, tol):
    """Triangulate the outline with Netgen; returns vertices (nv, 2) and triangles (ne, 3),
    counter-clockwise."""
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


# --------------------------------------------------------------------------- analysis

def _fmt(v) -> str:
    return f"{float(v):.4g}"


def _pt(p) -> str:
    return f"({_fmt(p[0])}, {_fmt(p[1])})"


def _reentrant_corners(polys, min_angle=200.0):
    """Outline vertices whose interior angle exceeds ``min_angle`` degrees: (xy, angle)."""
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


def verify_outline(problem: Problem, outline, *, mesh_size=None, order: int = 2,
                   grid_compliance=None) -> Verification:
    """Mesh ``outline`` (model coordinates) body-fitted, solve every load case of
    ``problem`` on it and report compliance, peak von Mises stress and displacement.

    ``mesh_size`` defaults to the problem's cell size (finer around small holes and pads).
    ``grid_compliance`` (the optimizer's figure) adds ``relative_difference`` and a warning
    when the two differ by more than 5 %. Raises ProblemError for bad arguments; supports
    and loads that do not fit the outline go into ``problems`` (and ``ok`` is False).
    """
    from skfem import Basis, ElementTriP1, ElementTriP2, ElementVector, MeshTri, asm
    from skfem.models.elasticity import linear_elasticity

    start = time.perf_counter()
    if order not in (1, 2):
        raise ProblemError(f"order: must be 1 (linear) or 2 (quadratic) triangles, got {order!r}")
    settings = resolve_settings(problem)
    domain = domain_polygon(problem)
    polys = _outline_polygons(outline)
    material = shapely.union_all(polys)
    if mesh_size is None:
        mesh_size = float(problem.domain.cell)
    try:
        mesh_size = float(mesh_size)
    except (TypeError, ValueError):
        raise ProblemError(f"mesh_size: must be a positive length, got {mesh_size!r}") from None
    if not (math.isfinite(mesh_size) and mesh_size > 0.0):
        raise ProblemError(f"mesh_size: must be a positive length, got {mesh_size!r}")
    estimate = 2.5 * material.area / (0.433 * mesh_size**2)
    if estimate > MAX_ELEMENTS:
        floor = math.sqrt(2.5 * material.area / (0.433 * MAX_ELEMENTS))
        raise ProblemError(
            f"mesh_size: {mesh_size:.4g} would give about {estimate:.3g} triangles; use at least {floor:.3g}")
    if grid_compliance is not None:
        try:
            grid_compliance = float(grid_compliance)
        except (TypeError, ValueError):
            raise ProblemError(f"grid_compliance: must be a number, got {grid_compliance!r}") from None

    unit = problem.units.length
    tol = ON_EDGE * mesh_size
    warnings, problems = [], []
    beyond = material.difference(domain.buffer(tol)).area
    if beyond > 1e-6 * material.area:
        warnings.append(f"the outline reaches {beyond:.4g} {unit}^2 beyond the problem's domain: "
                        "is it the outline of this problem?")

    hard, inner, refine = _plan(problem, material, settings, mesh_size, tol)
    try:
        p, t = _mesh(polys, hard, inner, refine, mesh_size, tol)
    except ProblemError:
        if not inner:
            raise
        # Embedded lines (interior segments, pad and box edges) can trip the mesher when
        # they run a hair away from the outline edge; mesh without them and say so.
        p, t = _mesh(polys, hard, [], refine, mesh_size, tol)
        warnings.append("the mesher could not follow the support and load lines inside the outline; "
                        "they were left out of the mesh, so pads and boxes are approximated by the nodes inside them")
    mesh = MeshTri(p.T.copy(), t.T.copy())

    E, nu, thick = problem.material.E, problem.material.nu, problem.material.thickness
    scalar = ElementTriP2() if order == 2 else ElementTriP1()
    elem = ElementVector(scalar)
    basis = Basis(mesh, elem, intorder=2 * order)
    sbasis = Basis(mesh, scalar)
    nodes_xy = sbasis.doflocs.T.copy()  # node k has dofs 2k (x) and 2k+1 (y)
    n_nodes = nodes_xy.shape[0]

    # Plane stress: Lame's lambda* = E nu / (1 - nu^2), mu = E / (2 (1 + nu)).
    K = asm(linear_elasticity(E * nu / (1.0 - nu**2), E / (2.0 * (1.0 + nu))), basis) * thick
    K = K.tocsr()

    case_names = tuple(c.name for c in problem.cases)
    weights = np.array([c.weight for c in problem.cases], float)
    fit = _Fit(mesh=mesh, nodes_xy=nodes_xy, material=material, settings=settings,
               mesh_size=mesh_size, tol=tol, unit=unit, order=order)
    fixed = _held_dofs(fit, problem.supports, problems)
    F, load_dofs = _nodal_forces(fit, elem, problem, case_names, problems, warnings)
    _hold_loose_pieces(fit, sbasis, fixed, F, load_dofs, problems, warnings)
    for ld, d in load_dofs:
        if d.size and np.all(fixed[d]):
            warnings.append(f"{ld.key}: acts on supported nodes only, so it does no work")

    ne = mesh.nelements
    U = np.zeros_like(F)
    vm_nodes = np.zeros((n_nodes, len(case_names)))
    vm_elem = np.zeros((ne, len(case_names)))
    result, cases = dict.fromkeys(_FIGURES), {}
    result["case_compliance"] = {}
    if not np.any(F[~fixed]):
        problems.append("load: no load acts on free material, so nothing deforms")
    else:
        U = _solve(K, F, fixed)
        vm_nodes, vm_elem = _von_mises(mesh, elem, scalar, U, E, nu)
        result, cases = _figures(F, U, vm_nodes, nodes_xy, case_names, weights)
        warnings.extend(_peak_warnings(problem, settings, polys, result["max_von_mises_at"], mesh_size))

    rel = None
    if grid_compliance is not None and result["compliance"] is not None and grid_compliance != 0.0:
        rel = (result["compliance"] - grid_compliance) / abs(grid_compliance)
        if abs(rel) > GRID_DIFFERENCE_WARN:
            warnings.append(f"compliance differs from the grid result by {100 * rel:+.1f}% "
                            f"(over {100 * GRID_DIFFERENCE_WARN:.0f}%)")

    n_local = 6 if order == 2 else 3
    return Verification(
        ok=not problems,
        **result,
        mesh_size=mesh_size,
        elements=int(ne),
        nodes=int(n_nodes),
        vertices=int(mesh.nvertices),
        order=int(order),
        area=float(material.area),
        grid_compliance=grid_compliance,
        relative_difference=rel,
        warnings=tuple(warnings),
        problems=tuple(problems),
        cases=cases,
        mesher=_mesher_name(),
        seconds=time.perf_counter() - start,
        points=nodes_xy,
        triangles=sbasis.element_dofs[:n_local].T.copy(),
        displacement=np.stack([U[0::2], U[1::2]], axis=1),
        von_mises=vm_nodes.max(axis=1) if vm_nodes.size else np.zeros(n_nodes),
        element_von_mises=vm_elem.max(axis=1) if vm_elem.size else np.zeros(ne),
        case_names=case_names,
    )


_FIGURES = ("compliance", "case_compliance", "max_von_mises", "max_von_mises_at", "max_von_mises_case",
            "max_displacement", "max_displacement_at", "max_displacement_case")


@dataclass(frozen=True)
class _Fit:
    """The meshed outline and what placing supports and loads on it needs. Node k (a mesh
    vertex for k < number of vertices, else a mid-edge node) has dofs 2k (x) and 2k+1 (y)."""

    mesh: object
    nodes_xy: np.ndarray
    material: object
    settings: object
    mesh_size: float
    tol: float
    unit: str
    order: int


def _nearest_vertex(fit: _Fit, xy) -> int:
    p = fit.mesh.p
    return int(np.argmin(np.hypot(p[0] - xy[0], p[1] - xy[1])))


def _segment_facets(fit: _Fit, a, b) -> np.ndarray:
    """Element edges lying on the segment a-b (both ends within the on-edge tolerance)."""
    on = _point_segment_distance(fit.mesh.p.T, a, b) <= 2.0 * fit.tol
    f = fit.mesh.facets
    return np.flatnonzero(on[f[0]] & on[f[1]])


def _facet_length(fit: _Fit, facets) -> float:
    ends = fit.mesh.p[:, fit.mesh.facets[:, facets]]  # (2, 2, n)
    return float(np.sum(np.hypot(*(ends[:, 1] - ends[:, 0]))))


def _facet_nodes(fit: _Fit, facets) -> np.ndarray:
    """Nodes of the given element edges: their ends and, for order 2, their mid-edge nodes
    (scikit-fem numbers the mid-edge node of edge f as n_vertices + f)."""
    nodes = np.unique(fit.mesh.facets[:, facets])
    if fit.order == 2:
        nodes = np.union1d(nodes, fit.mesh.nvertices + np.asarray(facets))
    return nodes.astype(np.int64)


def _off_message(fit: _Fit, item, what) -> str:
    d = fit.material.distance(item_geometry(item))
    return (f"{item.key}: the {what} {_where(item)} lies outside the exported outline "
            f"(nearest material {d:.3g} {fit.unit} away)")


def _held_dofs(fit: _Fit, supports, problems) -> np.ndarray:
    """Fixed dofs (bool per dof) of the supports, by the rules of the grid model applied to
    the meshed outline; a support that finds no material goes into ``problems``."""
    xy = fit.nodes_xy
    fixed = np.zeros(2 * len(xy), bool)
    for s in supports:
        nodes = np.zeros(0, np.int64)
        if s.kind == "point":
            inside = fit.material.distance(Point(s.where)) <= fit.tol
            if uses_pad(s, fit.settings):
                pad = pad_polygon(s.where, fit.settings, fit.mesh_size).buffer(fit.tol, quad_segs=2)
                nodes = np.flatnonzero(shapely.contains_xy(pad, xy[:, 0], xy[:, 1]))
            if nodes.size == 0 and inside:
                nodes = np.array([_nearest_vertex(fit, s.where)])
            if not inside:
                applied = (f"held over the {nodes.size} node(s) of its pad on the material" if nodes.size
                           else "not applied")
                problems.append(_off_message(fit, s, "point") + f"; {applied}")
        elif s.kind == "segment":
            (a, b) = s.where
            facets = _segment_facets(fit, a, b)
            if facets.size:
                nodes = _facet_nodes(fit, facets)
            else:  # the segment may touch the material at a single vertex
                nodes = np.flatnonzero(_point_segment_distance(fit.mesh.p.T, a, b) <= 2.0 * fit.tol)
            # A support only offers a place to hold the part: material on some of it is enough.
            if nodes.size == 0:
                problems.append(_off_message(fit, s, "segment") + "; not applied")
        else:
            x0, y0, x1, y1 = s.where
            e = fit.tol
            nodes = np.flatnonzero((xy[:, 0] >= x0 - e) & (xy[:, 0] <= x1 + e)
                                   & (xy[:, 1] >= y0 - e) & (xy[:, 1] <= y1 + e))
            if nodes.size == 0:
                if fit.material.intersects(item_geometry(s)):
                    nodes = np.array([_nearest_vertex(fit, ((x0 + x1) / 2, (y0 + y1) / 2))])
                else:
                    problems.append(_off_message(fit, s, "box") + "; not applied")
        if "x" in s.fix:
            fixed[2 * nodes] = True
        if "y" in s.fix:
            fixed[2 * nodes + 1] = True
    return fixed


def _nodal_forces(fit: _Fit, elem, problem, case_names, problems, warnings):
    """Consistent nodal forces (n_dof, n_cases) of the loads and, per load, the dofs it
    touches; loads that miss the outline, wholly or in part, go into ``problems``."""
    from skfem import FacetBasis, LinearForm, asm

    n_dof = 2 * len(fit.nodes_xy)
    F = np.zeros((n_dof, len(case_names)))
    load_dofs = []
    for ld in problem.loads:
        fvec = np.zeros(n_dof)
        if ld.kind == "point":
            inside = fit.material.distance(Point(ld.where)) <= fit.tol
            padded = uses_pad(ld, fit.settings)
            spread = padded and _pad_forces(fit.mesh, elem, ld.force,
                                            pad_polygon(ld.where, fit.settings, fit.mesh_size), fvec)
            if not spread and inside:
                k = _nearest_vertex(fit, ld.where)
                fvec[2 * k] += ld.force[0]
                fvec[2 * k + 1] += ld.force[1]
            if not inside:
                applied = "spread over the part of its pad on the material" if spread else "not applied"
                problems.append(_off_message(fit, ld, "point") + f"; {applied}")
            elif not padded:
                warnings.append(f"{ld.key}: a point force without a pad; the compliance and stress next to it "
                                "grow without bound as the mesh is refined, so compare figures at like mesh sizes")
        else:
            (a, b) = ld.where
            length = math.dist(a, b)
            facets = _segment_facets(fit, a, b)
            if facets.size:
                fb = FacetBasis(fit.mesh, elem, facets=facets, intorder=2 * fit.order)
                fx, fy = float(ld.force[0]), float(ld.force[1])
                fvec += asm(LinearForm(lambda v, w: fx * v[0] + fy * v[1]), fb)
                off = length - _facet_length(fit, facets)
                if off > max(1e-3 * length, 10.0 * fit.tol):
                    lost = off * math.hypot(*ld.force)
                    problems.append(f"{ld.key}: {off:.3g} of the segment's {length:.3g} {fit.unit} lie off the "
                                    f"exported outline edge; the load there ({lost:.3g} {problem.units.force}) "
                                    "is not applied")
            else:
                problems.append(_off_message(fit, ld, "segment") + "; not applied")
        F[:, case_names.index(ld.case)] += fvec
        load_dofs.append((ld, np.flatnonzero(fvec)))
    return F, load_dofs


def _hold_loose_pieces(fit: _Fit, sbasis, fixed, F, load_dofs, problems, warnings) -> None:
    """Pieces of the mesh (joined through element edges) need supports against all three
    rigid-body motions. A loose piece is held in place (``fixed`` is updated) so the rest
    can be solved; a warning says so, or a problem when the piece carries a load."""
    from scipy.sparse import coo_matrix, csgraph

    mesh, xy = fit.mesh, fit.nodes_xy
    f2t = mesh.f2t
    shared = np.all(f2t >= 0, axis=0)
    ne = mesh.nelements
    graph = coo_matrix((np.ones(int(shared.sum())), (f2t[0, shared], f2t[1, shared])), shape=(ne, ne))
    n_comp, comp = csgraph.connected_components(graph, directed=False)
    edofs = sbasis.element_dofs  # (n_local, ne) node numbers
    node_comp = np.zeros(len(xy), np.int64)
    node_comp[edofs.ravel()] = np.repeat(comp[None, :], edofs.shape[0], axis=0).ravel()
    loaded = np.any(F != 0.0, axis=1)
    for k in range(n_comp):
        nodes = np.flatnonzero(node_comp == k)
        centre = xy[nodes].mean(axis=0)
        scale = max(float(np.ptp(xy[nodes], axis=0).max()), fit.mesh_size)
        hx = nodes[fixed[2 * nodes]]
        hy = nodes[fixed[2 * nodes + 1]]
        # Rows of the constraints on (x translation, y translation, rotation).
        C = np.vstack([np.column_stack([np.ones(hx.size), np.zeros(hx.size), -(xy[hx, 1] - centre[1]) / scale]),
                       np.column_stack([np.zeros(hy.size), np.ones(hy.size), (xy[hy, 0] - centre[0]) / scale])])
        rank = int(np.linalg.matrix_rank(C, tol=1e-9)) if C.size else 0
        if rank == 3:
            continue
        dofs = np.concatenate([2 * nodes, 2 * nodes + 1])
        piece = f"the piece of the outline around {_pt(centre)}" if n_comp > 1 else "the outline"
        if np.any(loaded[dofs] & ~fixed[dofs]):
            keys = ", ".join(ld.key for ld, d in load_dofs if np.isin(d, dofs).any())
            problems.append(f"support: the supports leave a rigid-body motion of {piece} free (rank {rank} "
                            f"of 3), so it cannot carry {keys}; add or move a support")
        else:
            warnings.append(f"{piece} carries no load and is not held by the supports (rank {rank} of 3); "
                            "it is held in place for this check")
        fixed[dofs] = True


def _solve(K, F, fixed) -> np.ndarray:
    """Displacements (n_dof, n_cases), zero at fixed dofs; one factorization for all cases."""
    free = ~fixed
    U = np.zeros_like(F)
    try:
        lu = sparse_lu(K[free][:, free].tocsc())
        Uf = lu.solve(F[free])
    except RuntimeError as exc:
        raise ProblemError(f"support: the outline is not held against every rigid-body motion ({exc})") from None
    if not np.all(np.isfinite(Uf)):
        raise ProblemError("support: the solution is not finite; the outline is not held firmly enough")
    U[free] = Uf
    return U


def _figures(F, U, vm_nodes, xy, case_names, weights):
    """Compliance per case and weighted, peak stress and displacement with their places."""
    case_c = np.einsum("ic,ic->c", F, U)
    mag = np.hypot(U[0::2], U[1::2])  # (n_nodes, n_cases)
    cases = {}
    for c, name in enumerate(case_names):
        kv, kd = int(np.argmax(vm_nodes[:, c])), int(np.argmax(mag[:, c]))
        cases[name] = {"weight": float(weights[c]), "compliance": float(case_c[c]),
                       "max_von_mises": float(vm_nodes[kv, c]), "max_von_mises_at": _xy(xy[kv]),
                       "max_displacement": float(mag[kd, c]), "max_displacement_at": _xy(xy[kd])}
    kv, cv = np.unravel_index(int(np.argmax(vm_nodes)), vm_nodes.shape)
    kd, cd = np.unravel_index(int(np.argmax(mag)), mag.shape)
    result = dict(
        compliance=float(case_c @ weights),
        case_compliance={n: float(v) for n, v in zip(case_names, case_c)},
        max_von_mises=float(vm_nodes[kv, cv]), max_von_mises_at=_xy(xy[kv]), max_von_mises_case=case_names[cv],
        max_displacement=float(mag[kd, cd]), max_displacement_at=_xy(xy[kd]), max_displacement_case=case_names[cd])
    return result, cases


def _xy(p) -> tuple:
    return (float(p[0]), float(p[1]))


def _where(item) -> str:
    if item.kind == "point":
        return _pt(item.where)
    if item.kind == "segment":
        return f"{_pt(item.where[0])}-{_pt(item.where[1])}"
    return "(" + ", ".join(_fmt(v) for v in item.where) + ")"


def _mesher_name() -> str:
    try:
        from importlib.metadata import version

        return f"netgen-mesher {version('netgen-mesher')}"
    except Exception:  # metadata missing in unusual installs
        return "netgen-mesher"


def _pad_forces(mesh, elem, force, pad: Polygon, fvec) -> bool:
    """Add to ``fvec`` the consistent nodal forces of ``force`` spread uniformly over the pad
    polygon intersected with the meshed outline: the integral of each shape function over
    it. The pad is embedded in the mesh, so elements lie inside or outside it; a centroid
    rule on m x m sub-triangles of each element near it still copes with any element the
    embedding missed. The same rule gives the area, so the forces sum exactly to the load.
    False if the pad misses the mesh."""
    from skfem import Basis, Functional, LinearForm, asm

    minx, miny, maxx, maxy = pad.bounds
    cx, cy, r = 0.5 * (minx + maxx), 0.5 * (miny + maxy), 0.5 * max(maxx - minx, maxy - miny)
    m = PAD_QUADRATURE
    pts = mesh.p[:, mesh.t]  # (2, 3, ne)
    reach = np.max(np.hypot(pts[0] - pts[0].mean(axis=0), pts[1] - pts[1].mean(axis=0)), axis=0)
    cen = pts.mean(axis=1)
    near = np.flatnonzero(np.hypot(cen[0] - cx, cen[1] - cy) <= r + reach)
    if near.size == 0:
        return False
    # Centroids of the m^2 sub-triangles of the reference triangle (0,0), (1,0), (0,1).
    X, W = [], []
    for i in range(m):
        for j in range(m - i):
            X.append(((i + 1 / 3) / m, (j + 1 / 3) / m))
            if i + j < m - 1:
                X.append(((i + 2 / 3) / m, (j + 2 / 3) / m))
    X = np.array(X).T
    W = np.full(X.shape[1], 0.5 / X.shape[1])
    b = Basis(mesh, elem, elements=near, quadrature=(X, W))

    def chi(x):
        return shapely.contains_xy(pad, x[0], x[1]).astype(float)

    area = float(asm(Functional(lambda w: chi(w.x)), b))
    if area <= 0.0:
        return False
    fx, fy = float(force[0]) / area, float(force[1]) / area
    fvec += asm(LinearForm(lambda v, w: chi(w.x) * (fx * v[0] + fy * v[1])), b)
    return True


def _von_mises(mesh, elem, scalar, U, E, nu):
    """Plane-stress von Mises stress sqrt(sx^2 - sx sy + sy^2 + 3 txy^2) at every node,
    averaged over the elements that share it, and at element centres; (n_nodes, n_cases)
    and (n_el, n_cases). Stresses are evaluated at the element's own nodes."""
    from skfem import Basis

    X = np.asarray(scalar.doflocs, float).T  # reference node positions, in local dof order
    b = Basis(mesh, elem, quadrature=(X, np.full(X.shape[1], 0.5 / X.shape[1])))
    sb = Basis(mesh, scalar)
    ed = sb.element_dofs  # (n_local, ne)
    n_nodes = sb.N
    cnt = np.bincount(ed.ravel(), minlength=n_nodes).astype(float)
    c = E / (1.0 - nu**2)
    G = E / (2.0 * (1.0 + nu))
    vm_n, vm_e = [], []
    for k in range(U.shape[1]):
        grad = b.interpolate(U[:, k]).grad  # (2, 2, ne, n_local)
        exx, eyy, gxy = grad[0, 0], grad[1, 1], grad[0, 1] + grad[1, 0]
        sx, sy, txy = c * (exx + nu * eyy), c * (eyy + nu * exx), G * gxy  # (ne, n_local)
        avg = [np.bincount(ed.T.ravel(), weights=s.ravel(), minlength=n_nodes) / cnt for s in (sx, sy, txy)]
        vm_n.append(_vm(*avg))
        vm_e.append(_vm(sx.mean(axis=1), sy.mean(axis=1), txy.mean(axis=1)))
    return np.column_stack(vm_n), np.column_stack(vm_e)


def _vm(sx, sy, txy):
    return np.sqrt(np.maximum(sx**2 - sx * sy + sy**2 + 3.0 * txy**2, 0.0))


def _peak_warnings(problem, settings, polys, at, mesh_size) -> list[str]:
    """Peaks whose value depends on the mesh: next to a point support or point load, or at
    a re-entrant corner of the outline (where the elastic stress is singular)."""
    out = []
    x, y = at
    reach = settings.pad_radius + 2.0 * mesh_size
    for item in list(problem.supports) + list(problem.loads):
        if item.kind == "point" and math.hypot(x - item.where[0], y - item.where[1]) <= reach:
            out.append(f"the peak von Mises stress lies at {item.key} {_pt(item.where)}: a concentrated "
                       "support or load; its value depends on the mesh and the pad size, read it as indicative")
            return out
    for s in problem.supports:
        ends = list(s.where) if s.kind == "segment" else (
            [(s.where[0], s.where[1]), (s.where[2], s.where[1]), (s.where[2], s.where[3]), (s.where[0], s.where[3])]
            if s.kind == "box" else [])
        for e in ends:
            if math.hypot(x - e[0], y - e[1]) <= 2.0 * mesh_size:
                out.append(f"the peak von Mises stress lies at an end of {s.key} {_pt(e)}, where a held edge meets "
                           "a free one and the elastic stress is singular: it grows as the mesh is refined; read it "
                           "as indicative")
                return out
    for xy, angle in _reentrant_corners(polys):
        if math.hypot(x - xy[0], y - xy[1]) <= 2.0 * mesh_size:
            out.append(f"the peak von Mises stress lies at a re-entrant corner {_pt(xy)} (interior angle "
                       f"{angle:.0f} deg) where the elastic stress is singular: it grows as the mesh is refined; "
                       "round the corner or read the figure as indicative")
            break
    return out
