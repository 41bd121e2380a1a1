"""The ground structure: nodes over the domain, which node pairs may carry a bar, and the
problem's supports and loads on those nodes.

Nodes sit on a square lattice of pitch ``spacing`` anchored at the domain's lower-left
bound, plus exact nodes where the problem needs them: at point supports and point loads,
along support and load segments, at the corners of support boxes, and along the domain's
outline and hole rings (so a slanted edge carries nodes too). A bar may join two nodes
when its segment lies in the domain, clear of holes and keep-empty regions, and passes
through no third node (a longer bar through a node is the chain of the shorter ones).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import shapely
from shapely.geometry import LineString, Point

from ..fem.model import nodes_near, segment_weights
from ..geometry.shapes import domain_polygon, item_geometry, region_geometry
from ..physics import physics_of, restrained_rank
from ..spec import Problem, ProblemError

__all__ = ["GroundStructure", "all_bars", "default_spacing", "build_ground_structure", "valid_bars",
           "estimated_nodes", "SPACING_CELLS", "TARGET_NODES"]

# The default spacing is the larger of SPACING_CELLS grid cells and the pitch that puts
# about TARGET_NODES lattice nodes into the domain (docs/truss.md, defaults: measured to
# keep the reference within a few seconds on the examples).
SPACING_CELLS = 3.0
TARGET_NODES = 300
# Relative tolerance (of the domain's size) of every "on the boundary / on a node" test.
GEOMETRY_TOL = 1e-9
# Ring subdivision nodes closer than this share of the spacing to a node already placed
# are left out (they would only add very short bars).
RING_MERGE = 0.3


def default_spacing(problem: Problem) -> float:
    """max(SPACING_CELLS x cell, sqrt(domain area / TARGET_NODES)): a few cells on small
    grids, about TARGET_NODES lattice nodes on large ones."""
    area = domain_polygon(problem).area
    return float(max(SPACING_CELLS * problem.domain.cell, math.sqrt(area / TARGET_NODES)))


def estimated_nodes(problem: Problem, spacing: float) -> int:
    """Nodes a ground structure at ``spacing`` will have, before building it: the
    lattice nodes in the domain (area / spacing^2) plus the ring nodes (perimeter / spacing)."""
    dom = domain_polygon(problem)
    return int(math.ceil(dom.area / spacing**2 + dom.boundary.length / spacing + 1))


@dataclass(frozen=True)
class GroundStructure:
    """Nodes, supports and loads of a ground structure (dof 2 k + c is component c of node k).

    ``lattice`` (n, 2) holds each node's lattice indices, -1 for an off-lattice node;
    ``lattice_node`` maps lattice indices (i, j) to a node number or -1.
    """

    xy: np.ndarray  # (n, 2)
    spacing: float
    origin: tuple
    lattice: np.ndarray  # (n, 2) int64
    lattice_node: np.ndarray  # (ni, nj) int64
    fixed: np.ndarray  # (2 n,) bool
    forces: np.ndarray  # (2 n, n_cases), total forces at the nodes
    case_names: tuple
    case_weights: np.ndarray
    domain: object  # the domain grown by the geometry tolerance, prepared
    empty: object  # union of the keep-empty regions, prepared, or None
    convex: bool  # domain convex with no holes and no keep-empty region: every pair lies inside
    tol: float
    support_rank: int  # rank of the rigid-body modes the supports hold (3 = held)

    @property
    def n_nodes(self) -> int:
        return int(self.xy.shape[0])

    @property
    def node_pairs(self) -> int:
        n = self.n_nodes
        return n * (n - 1) // 2


def _ring_points(coords, step: float) -> np.ndarray:
    """Points along a polyline: its vertices and, on each edge, evenly spaced points at
    most ``step`` apart."""
    c = np.asarray(coords, float)[:, :2]
    out = [c[:1]]
    for a, b in zip(c[:-1], c[1:]):
        k = max(1, int(math.ceil(np.hypot(*(b - a)) / step - 1e-9)))
        t = np.arange(1, k + 1)[:, None] / k
        out.append(a + t * (b - a))
    return np.concatenate(out)


class _NodeSet:
    """Nodes placed so far, with a merge test against the ones already there."""

    def __init__(self, xy: np.ndarray):
        self.xy = [np.asarray(xy, float).reshape(-1, 2)]
        self.n = self.xy[0].shape[0]

    def add(self, pts: np.ndarray, merge: float) -> None:
        from scipy.spatial import cKDTree

        pts = np.asarray(pts, float).reshape(-1, 2)
        if pts.size == 0:
            return
        current = np.concatenate(self.xy)
        keep = []
        tree = cKDTree(current) if current.size else None
        for p in pts:  # few points (rings and items): one at a time keeps them apart too
            if tree is not None and tree.query(p, distance_upper_bound=merge)[0] <= merge:
                continue
            if any(np.hypot(*(p - q)) <= merge for q in keep):
                continue
            keep.append(p)
        if keep:
            self.xy.append(np.array(keep))
            self.n += len(keep)

    def array(self) -> np.ndarray:
        return np.concatenate(self.xy)


def build_ground_structure(problem: Problem, spacing: float) -> GroundStructure:
    """Nodes over the domain at ``spacing`` with the problem's supports and loads on them.

    Raises ProblemError naming the item for a support or load that lies off the domain
    (beyond half a cell, the tolerance the problem reader allows).
    """
    dom = domain_polygon(problem)
    minx, miny, maxx, maxy = dom.bounds
    size = math.hypot(maxx - minx, maxy - miny)
    tol = GEOMETRY_TOL * size
    grown = dom.buffer(tol)
    shapely.prepare(grown)
    empties = [region_geometry(r) for r in problem.regions if r.keep == "empty"]
    empty = shapely.union_all(empties) if empties else None
    if empty is not None:
        shapely.prepare(empty)
    convex = (not dom.interiors and empty is None
              and dom.convex_hull.area <= dom.area * (1.0 + 1e-12))

    def usable(pts):
        pts = np.asarray(pts, float).reshape(-1, 2)
        ok = shapely.contains_xy(grown, pts[:, 0], pts[:, 1]) | shapely.intersects_xy(grown, pts[:, 0], pts[:, 1])
        if empty is not None:
            ok &= ~shapely.intersects_xy(empty, pts[:, 0], pts[:, 1])
        return ok

    s = float(spacing)
    ni = int(math.floor((maxx - minx) / s + 1e-9)) + 1
    nj = int(math.floor((maxy - miny) / s + 1e-9)) + 1
    I, J = np.meshgrid(np.arange(ni), np.arange(nj), indexing="ij")
    I, J = I.ravel(), J.ravel()
    lat_xy = np.column_stack([minx + s * I, miny + s * J])
    ok = usable(lat_xy)
    lat_xy, I, J = lat_xy[ok], I[ok], J[ok]
    nodes = _NodeSet(lat_xy)
    n_lattice = nodes.n
    exact = 1e-6 * s

    # Nodes the supports and loads need, at their exact places.
    for item in list(problem.supports) + list(problem.loads):
        g = item_geometry(item)
        if item.kind == "point":
            pts = np.array([item.where], float)
        elif item.kind == "segment":
            pts = _ring_points(item.where, s)
        else:
            x0, y0, x1, y1 = item.where
            pts = np.array([[x0, y0], [x1, y0], [x1, y1], [x0, y1]], float)
        inside = usable(pts)
        if item.kind != "box" and not inside.all():
            d = float(dom.distance(g)) if item.kind == "point" else float(g.difference(dom).length)
            slack = max(0.5 * problem.domain.cell, tol)
            if d > slack:
                what = "lies" if item.kind == "point" else "has a part of length"
                raise ProblemError([f"{item.key}.{item.kind}: {what} {d:.4g} {problem.units.length} "
                                    "outside the domain, so no truss in the domain can reach it"])
            # within the reader's tolerance: move the point onto the domain's edge
            from shapely.ops import nearest_points

            pts = np.array([nearest_points(dom, Point(p))[0].coords[0] if not k else p
                            for p, k in zip(pts, inside)])
            inside = usable(pts)
        if item.kind == "segment":  # exact ends; between them, the lattice serves where it is near
            ends = np.zeros(len(pts), bool)
            ends[[0, -1]] = True
            nodes.add(pts[inside & ends], exact)
            nodes.add(pts[inside & ~ends], RING_MERGE * s)
        else:
            nodes.add(pts[inside], exact)
    # Nodes along the outline and the holes.
    for ring in [dom.exterior, *dom.interiors]:
        pts = _ring_points(ring.coords, s)
        nodes.add(pts[usable(pts)], RING_MERGE * s)

    xy = nodes.array()
    n = xy.shape[0]
    lattice = np.full((n, 2), -1, np.int64)
    lattice[:n_lattice, 0], lattice[:n_lattice, 1] = I, J
    lattice_node = np.full((ni, nj), -1, np.int64)
    lattice_node[I, J] = np.arange(n_lattice)

    physics = physics_of(problem)
    dpn = physics.dofs_per_node
    fixed = np.zeros(dpn * n, bool)
    near = RING_MERGE * s * (1.0 + 1e-9)  # a segment's nodes: on it, or the lattice node that stood in
    for sup in problem.supports:
        g = item_geometry(sup)
        idx = nodes_near(g, xy, {"point": 0.0, "segment": near, "box": tol}[sup.kind])
        if sup.kind == "point":
            idx = idx[:1]
        for k in physics.fixed_components(sup.fix):
            fixed[dpn * idx + k] = True

    case_names = tuple(c.name for c in problem.cases)
    weights = np.array([c.weight for c in problem.cases], float)
    F = np.zeros((dpn * n, len(case_names)))
    for ld in problem.loads:
        c = case_names.index(ld.case)
        if ld.kind == "point":
            idx, w = nodes_near(Point(ld.where), xy, 0.0)[:1], np.ones(1)
        else:
            idx = nodes_near(LineString(ld.where), xy, near)
            w = segment_weights(ld.where, xy, idx)
        for k, value in enumerate(physics.nodal_load(ld)):
            np.add.at(F[:, c], dpn * idx + k, value * w)

    held = np.flatnonzero(fixed)
    pts = (xy[held // dpn] - [minx, miny]) / max(size, 1e-300)
    rank = restrained_rank(physics, pts, held % dpn)

    return GroundStructure(
        xy=xy, spacing=s, origin=(minx, miny), lattice=lattice, lattice_node=lattice_node,
        fixed=fixed, forces=F, case_names=case_names, case_weights=weights,
        domain=grown, empty=empty, convex=convex, tol=tol, support_rank=rank,
    )


# --------------------------------------------------------------------------- bars

def _through_lattice_node(gs: GroundStructure, i: np.ndarray, j: np.ndarray) -> np.ndarray:
    """Whether the open segment between nodes i and j passes through a lattice node: walk
    the whole lattice lines the segment crosses along its longer axis (their number is the
    bar's length in spacings, so the cost is the total length of the bars tested)."""
    s = gs.spacing
    p = (gs.xy[i] - gs.origin) / s
    q = (gs.xy[j] - gs.origin) / s
    d = q - p
    major = (np.abs(d[:, 1]) > np.abs(d[:, 0])).astype(np.int64)  # 0: walk x, 1: walk y
    rows = np.arange(i.size)
    pa, qa = p[rows, major], q[rows, major]
    lo = np.floor(np.minimum(pa, qa) + 1e-9).astype(np.int64) + 1
    hi = np.ceil(np.maximum(pa, qa) - 1e-9).astype(np.int64) - 1
    count = np.maximum(hi - lo + 1, 0)
    out = np.zeros(i.size, bool)
    total = int(count.sum())
    if total == 0:
        return out
    bar = np.repeat(rows, count)
    a = np.arange(total) - np.repeat(np.cumsum(count) - count, count) + lo[bar]
    mj = major[bar]
    t = (a - p[bar, mj]) / d[bar, mj]
    other = p[bar, 1 - mj] + t * d[bar, 1 - mj]
    b = np.rint(other)
    on = np.abs(other - b) <= 1e-7
    ii = np.where(mj == 0, a, b).astype(np.int64)
    jj = np.where(mj == 0, b, a).astype(np.int64)
    ni, nj = gs.lattice_node.shape
    on &= (ii >= 0) & (ii < ni) & (jj >= 0) & (jj < nj)
    hit = np.zeros(total, bool)
    hit[on] = gs.lattice_node[ii[on], jj[on]] >= 0
    np.logical_or.at(out, bar[hit], True)
    return out


def _through_other_node(gs: GroundStructure, i, j, segs) -> np.ndarray:
    """Whether a segment passes within the tolerance of an off-lattice node other than its ends."""
    extra = np.flatnonzero(gs.lattice[:, 0] < 0)
    out = np.zeros(i.size, bool)
    if extra.size == 0:
        return out
    tree = shapely.STRtree(shapely.points(gs.xy[extra]))
    bar, k = tree.query(segs, predicate="dwithin", distance=gs.tol)
    node = extra[k]
    hit = (node != i[bar]) & (node != j[bar])
    out[bar[hit]] = True
    return out


def valid_bars(gs: GroundStructure, i: np.ndarray, j: np.ndarray) -> np.ndarray:
    """Which candidate bars (node pairs i, j) the ground structure admits: inside the domain,
    clear of its holes and keep-empty regions, through no other node."""
    i = np.asarray(i, np.int64)
    j = np.asarray(j, np.int64)
    if i.size == 0:
        return np.zeros(0, bool)
    ok = ~_through_lattice_node(gs, i, j)
    idx = np.flatnonzero(ok)
    if idx.size == 0:
        return ok
    segs = shapely.linestrings(np.stack([gs.xy[i[idx]], gs.xy[j[idx]]], axis=1))
    good = ~_through_other_node(gs, i[idx], j[idx], segs)
    if not gs.convex:
        good &= shapely.covers(gs.domain, segs)
        if gs.empty is not None:
            good &= ~shapely.intersects(gs.empty, segs)
    ok[idx] = good
    return ok


def all_bars(gs: GroundStructure):
    """Every admissible bar of the ground structure as (i, j), i < j: the full ground
    structure, for small ones (memory grows with the square of the node count)."""
    i, j = np.triu_indices(gs.n_nodes, k=1)
    i, j = i.astype(np.int64), j.astype(np.int64)
    ok = valid_bars(gs, i, j)
    return i[ok], j[ok]
