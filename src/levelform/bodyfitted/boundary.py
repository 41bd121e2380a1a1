"""Supports and loads of a problem placed on the mesh of an exported outline.

The rules of the grid model (pads, segments, boxes) are applied to the meshed outline:
which unknowns the supports hold, the consistent nodal forces of the loads, and a hold on
pieces of the mesh the supports leave free to move. Whatever falls off the outline is
reported in ``problems``, never dropped silently. Unknowns per node and the rigid-body
rank test come from the physics (:class:`levelform.physics.PlaneStress`).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import shapely
from shapely.geometry import Point, Polygon

from ..fem.model import uses_pad
from ..geometry.shapes import item_geometry
from ..physics import PlaneStress, restrained_rank
from .mesh import pad_polygon, point_segment_distance

__all__ = [
    "PAD_QUADRATURE",
    "OutlineFit",
    "as_xy",
    "format_point",
    "held_dofs",
    "hold_loose_pieces",
    "nodal_forces",
]

# Sub-triangles per edge of the reference triangle for the pad-load quadrature (m^2 points).
PAD_QUADRATURE = 10


@dataclass(frozen=True)
class OutlineFit:
    """The meshed outline and what placing supports and loads on it needs. Node k (a mesh
    vertex for k < number of vertices, else a mid-edge node) has dofs 2k (x) and 2k+1 (y).

    Attributes
    ----------
    mesh : skfem.MeshTri of the outline.
    nodes_xy : (n, 2) node positions (vertices, then mid-edge nodes for order 2).
    material : shapely geometry of the outline.
    settings : resolved settings (pads and pad radius).
    mesh_size, tol : element size and on-edge tolerance (length).
    unit : the length unit, for messages.
    order : 1 or 2, the element order.
    """

    mesh: object
    nodes_xy: np.ndarray
    material: object
    settings: object
    mesh_size: float
    tol: float
    unit: str
    order: int


def _fmt(v) -> str:
    return f"{float(v):.4g}"


def format_point(p) -> str:
    """``(x, y)`` with four significant digits, for messages."""
    return f"({_fmt(p[0])}, {_fmt(p[1])})"


def as_xy(p) -> tuple:
    """A point as a tuple of two Python floats."""
    return (float(p[0]), float(p[1]))


def _where(item) -> str:
    if item.kind == "point":
        return format_point(item.where)
    if item.kind == "segment":
        return f"{format_point(item.where[0])}-{format_point(item.where[1])}"
    return "(" + ", ".join(_fmt(v) for v in item.where) + ")"


def _nearest_vertex(fit: OutlineFit, xy) -> int:
    p = fit.mesh.p
    return int(np.argmin(np.hypot(p[0] - xy[0], p[1] - xy[1])))


def _segment_facets(fit: OutlineFit, a, b) -> np.ndarray:
    """Element edges lying on the segment a-b (both ends within the on-edge tolerance)."""
    on = point_segment_distance(fit.mesh.p.T, a, b) <= 2.0 * fit.tol
    f = fit.mesh.facets
    return np.flatnonzero(on[f[0]] & on[f[1]])


def _facet_length(fit: OutlineFit, facets) -> float:
    ends = fit.mesh.p[:, fit.mesh.facets[:, facets]]  # (2, 2, n)
    return float(np.sum(np.hypot(*(ends[:, 1] - ends[:, 0]))))


def _facet_nodes(fit: OutlineFit, facets) -> np.ndarray:
    """Nodes of the given element edges: their ends and, for order 2, their mid-edge nodes
    (scikit-fem numbers the mid-edge node of edge f as n_vertices + f)."""
    nodes = np.unique(fit.mesh.facets[:, facets])
    if fit.order == 2:
        nodes = np.union1d(nodes, fit.mesh.nvertices + np.asarray(facets))
    return nodes.astype(np.int64)


def _off_message(fit: OutlineFit, item, what) -> str:
    d = fit.material.distance(item_geometry(item))
    return (f"{item.key}: the {what} {_where(item)} lies outside the exported outline "
            f"(nearest material {d:.3g} {fit.unit} away)")


def held_dofs(fit: OutlineFit, supports, problems) -> np.ndarray:
    """The unknowns the supports hold, by the rules of the grid model applied to the mesh.

    Parameters
    ----------
    fit : the meshed outline.
    supports : the problem's supports.
    problems : list; a support that finds no material adds a message to it.

    Returns
    -------
    ndarray
        (n_dof,) bool, True for a held unknown.
    """
    xy = fit.nodes_xy
    per_node = PlaneStress.dofs_per_node
    fixed = np.zeros(per_node * len(xy), bool)
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
                nodes = np.flatnonzero(point_segment_distance(fit.mesh.p.T, a, b) <= 2.0 * fit.tol)
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
        for k in PlaneStress.fixed_components(s.fix):
            fixed[per_node * nodes + k] = True
    return fixed


def nodal_forces(fit: OutlineFit, elem, problem, case_names, problems, warnings):
    """Consistent nodal forces of the loads, per load case.

    Parameters
    ----------
    fit : the meshed outline.
    elem : the scikit-fem vector element of the analysis.
    problem : levelform.spec.Problem (its loads and units).
    case_names : names of the load cases, in column order.
    problems, warnings : lists; a load that misses the outline, wholly or in part, adds
        to ``problems``, a point force without a pad to ``warnings``.

    Returns
    -------
    F : ndarray
        (n_dof, n_cases) nodal forces.
    load_dofs : list of (Load, ndarray)
        Per load, the unknowns it touches.
    """
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


def hold_loose_pieces(fit: OutlineFit, sbasis, fixed, F, load_dofs, problems, warnings) -> None:
    """Hold in place the pieces of the mesh the supports leave free to move.

    Pieces of the mesh (joined through element edges) need supports against every
    rigid-body motion. A loose piece is held in place (``fixed`` is updated) so the rest
    can be solved; a warning says so, or a problem when the piece carries a load.

    Parameters
    ----------
    fit : the meshed outline.
    sbasis : the scikit-fem scalar basis (its element dofs are node numbers).
    fixed : (n_dof,) bool from :func:`held_dofs`; updated in place.
    F, load_dofs : from :func:`nodal_forces`.
    problems, warnings : lists the messages are added to.
    """
    from scipy.sparse import coo_matrix, csgraph

    mesh, xy = fit.mesh, fit.nodes_xy
    per_node, n_modes = PlaneStress.dofs_per_node, PlaneStress.n_rigid_modes
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
        # The held unknowns of the piece, component by component, at positions relative to
        # its centre and size so that the rank test's tolerance (1e-9) is relative to the piece.
        held = [nodes[fixed[per_node * nodes + c]] for c in range(per_node)]
        at = np.concatenate([xy[h] for h in held])
        component = np.concatenate([np.full(h.size, c, np.int64) for c, h in enumerate(held)])
        rank = restrained_rank(PlaneStress, (at - centre) / scale, component)
        if rank == n_modes:
            continue
        dofs = np.concatenate([per_node * nodes + c for c in range(per_node)])
        piece = f"the piece of the outline around {format_point(centre)}" if n_comp > 1 else "the outline"
        if np.any(loaded[dofs] & ~fixed[dofs]):
            keys = ", ".join(ld.key for ld, d in load_dofs if np.isin(d, dofs).any())
            problems.append(f"support: the supports leave a rigid-body motion of {piece} free (rank {rank} "
                            f"of {n_modes}), so it cannot carry {keys}; add or move a support")
        else:
            warnings.append(f"{piece} carries no load and is not held by the supports (rank {rank} of "
                            f"{n_modes}); it is held in place for this check")
        fixed[dofs] = True


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
