"""From a problem to its fixed-grid finite-element model.

Cells whose centre lies in the domain are active; only they (and their nodes) enter the
system. Supports become fixed dofs, loads become nodal force vectors (one column per load
case), keep regions and pads become signed-distance fields on the nodes.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import shapely
from scipy import ndimage
from shapely.geometry import LineString, Point

from ..geometry.shapes import domain_polygon, item_geometry, region_geometry
from ..physics import physics_of, restrained_rank
from ..spec import GridInfo, Problem, ProblemError


@dataclass(frozen=True)
class Settings:
    """The method settings with every default resolved to a length in model units."""

    smoothing: float
    pad_radius: float
    step: float
    hole_spacing: float
    iterations: int
    seed_holes: bool
    initial_holes: bool
    pads: bool
    volume_step: float
    ersatz: float
    solver: str

    def as_dict(self) -> dict:
        return dict(self.__dict__)


# Default Helmholtz smoothing length of the level set's velocity, as a share of
# sqrt(domain area) (docs/method.md, defaults: measured against the density and
# evolutionary methods on the benchmark set).
SMOOTHING_SHARE = 0.04


def resolve_settings(problem: Problem) -> Settings:
    """Defaults scale with the domain (L = sqrt(domain area)), never with the cell size,
    so refining the grid leaves the design unchanged; each is floored so that it stays
    resolved by at least about one cell on coarse grids."""
    m = problem.method
    h = problem.domain.cell
    L = math.sqrt(domain_polygon(problem).area)
    smoothing = m.smoothing if m.smoothing is not None else max(SMOOTHING_SHARE * L, 1.0 * h)
    pad = m.pad_radius if m.pad_radius is not None else max(0.025 * L, 1.5 * h)
    step = m.step if m.step is not None else max(0.025 * L, 0.5 * h)
    spacing = m.hole_spacing if m.hole_spacing is not None else max(L / 4.0, 4.0 * h)
    return Settings(
        smoothing=float(smoothing),
        pad_radius=float(pad),
        step=float(step),
        hole_spacing=float(spacing),
        iterations=int(m.iterations),
        seed_holes=bool(m.seed_holes),
        initial_holes=bool(m.initial_holes),
        pads=bool(m.pads),
        volume_step=float(m.volume_step),
        ersatz=float(m.ersatz),
        solver=str(m.solver),
    )


def resolution_warnings(settings: Settings, h: float) -> list[str]:
    """Lengths the grid resolves poorly: the design then depends on the cell size."""
    out = []
    if settings.smoothing < 2.0 * h:
        out.append(
            f"method.smoothing: {settings.smoothing:.4g} is less than two cells ({2 * h:.4g}); the design "
            f"will depend on the cell size: use domain.cell <= {settings.smoothing / 2:.4g} or a longer smoothing"
        )
    return out


@dataclass(frozen=True)
class Model:
    grid: GridInfo
    active: np.ndarray  # (ny, nx) bool
    node_active: np.ndarray  # (ny+1, nx+1) bool
    cells: np.ndarray  # flat indices (j * nx + i) of active cells
    edofs: np.ndarray  # (n_cells, 8) global dofs of each active cell
    cell_nodes: np.ndarray  # (n_cells, 4) flat node indices (j * (nx+1) + i)
    node_number: np.ndarray  # flat node index -> active node number or -1
    n_dof: int
    free: np.ndarray  # global dof -> free dof number or -1
    n_free: int
    forces: np.ndarray  # (n_free, n_cases)
    case_names: tuple
    case_weights: np.ndarray
    solid_sdf: np.ndarray  # (ny+1, nx+1), < 0 inside keep-solid regions and pads; +inf if none
    empty_sdf: np.ndarray  # (ny+1, nx+1), < 0 inside keep-empty regions; +inf if none
    settings: Settings
    support_nodes: tuple = ()  # per support: flat node indices it fixes
    load_nodes: tuple = ()  # per load: flat node indices it acts on
    physics: object = None  # levelform.physics object: unknowns per node, element matrix, ...

    @property
    def dofs_per_node(self) -> int:
        return int(self.edofs.shape[1] // 4)

    @property
    def n_cells(self) -> int:
        return int(self.cells.size)

    def node_xy(self):
        g = self.grid
        x = g.x0 + g.h * np.arange(g.nx + 1)
        y = g.y0 + g.h * np.arange(g.ny + 1)
        return np.meshgrid(x, y)


def element_dofs(corner_nodes: np.ndarray, dofs_per_node: int) -> np.ndarray:
    """Global dofs (n_cells, 4 * dofs_per_node) of cells with active-node numbers
    ``corner_nodes`` (n_cells, 4): node n carries dofs dofs_per_node * n + k, and a cell's
    dofs run node by node, the node's components together."""
    d = int(dofs_per_node)
    out = np.empty((corner_nodes.shape[0], 4 * d), np.int64)
    for k in range(d):
        out[:, k::d] = d * corner_nodes + k
    return out


def load_path_intact(model: Model, phi: np.ndarray) -> bool:
    """Every load reaches some support through material: material nodes (phi < 0) joined
    through grid edges and cell diagonals, a load or support counting as touched when material lies within one
    node of any of its nodes."""
    from scipy import ndimage as ndi

    mat = (phi < 0.0) & model.node_active
    # Diagonal neighbours count: a member one cell wide running at 45 degrees joins its
    # nodes only through cell corners (its cells still carry load through their fractions).
    labels, _ = ndi.label(mat, structure=np.ones((3, 3), int))
    ny1, nx1 = labels.shape

    def touched(nodes) -> set:
        j, i = np.divmod(np.asarray(nodes), nx1)
        found = set()
        for dj in (-1, 0, 1):
            for di in (-1, 0, 1):
                jj, ii = j + dj, i + di
                ok = (jj >= 0) & (jj < ny1) & (ii >= 0) & (ii < nx1)
                found.update(int(v) for v in labels[jj[ok], ii[ok]] if v > 0)
        return found

    support_labels = set()
    for nodes in model.support_nodes:
        support_labels |= touched(nodes)
    return all(touched(nodes) & support_labels for nodes in model.load_nodes)


def make_grid(problem: Problem) -> GridInfo:
    h = problem.domain.cell
    minx, miny, maxx, maxy = domain_polygon(problem).bounds
    nx = max(1, math.ceil((maxx - minx) / h - 1e-9))
    ny = max(1, math.ceil((maxy - miny) / h - 1e-9))
    return GridInfo(nx=nx, ny=ny, x0=minx, y0=miny, h=h)


def signed_distance(geom, X: np.ndarray, Y: np.ndarray) -> np.ndarray:
    """Signed distance to a shapely area geometry: negative inside."""
    if geom is None or geom.is_empty:
        return np.full(X.shape, np.inf)
    pts = shapely.points(X.ravel(), Y.ravel())
    d = shapely.distance(geom.boundary, pts).reshape(X.shape)
    inside = shapely.contains_xy(geom, X.ravel(), Y.ravel()).reshape(X.shape)
    return np.where(inside, -d, d)


def nodes_near(geom, xy: np.ndarray, tol: float) -> np.ndarray:
    """Indices into xy of the nodes within tol of geom; the nearest one if none is."""
    d = shapely.distance(geom, shapely.points(xy[:, 0], xy[:, 1]))
    idx = np.flatnonzero(d <= tol)
    if idx.size == 0:
        idx = np.array([int(np.argmin(d))])
    return idx


def segment_weights(seg, xy: np.ndarray, idx: np.ndarray) -> np.ndarray:
    """Tributary lengths along the segment of the chosen nodes (sum = segment length),
    which for a grid-aligned edge equal the consistent nodal loads of a uniform traction."""
    (ax, ay), (bx, by) = seg
    length = math.hypot(bx - ax, by - ay)
    t = ((xy[idx, 0] - ax) * (bx - ax) + (xy[idx, 1] - ay) * (by - ay)) / length
    t = np.clip(t, 0.0, length)
    order = np.argsort(t, kind="stable")
    ts = t[order]
    bounds = np.concatenate([[0.0], 0.5 * (ts[1:] + ts[:-1]), [length]])
    w = np.empty_like(t)
    w[order] = np.diff(bounds)
    return w


def _pad_load_weights(centre, radius, domain, grid, active, cell_nodes, node_number):
    """Consistent nodal weights (summing to 1) of a load spread uniformly over the disk
    ``radius`` around ``centre`` clipped to the domain: the integral of each node's bilinear
    shape function over the pad, by an 8 x 8 sub-cell quadrature. Returns (node idx, w)."""
    h, m = grid.h, 8
    cx, cy = centre
    xc = grid.x0 + h * (np.arange(grid.nx) + 0.5)
    yc = grid.y0 + h * (np.arange(grid.ny) + 0.5)
    near = active & (np.hypot(xc[None, :] - cx, yc[:, None] - cy) <= radius + h)
    jj, ii = np.nonzero(near)
    if jj.size == 0:
        return None
    s = (np.arange(m) + 0.5) / m
    sx, sy = np.meshgrid(s, s)
    sx, sy = sx.ravel(), sy.ravel()
    px = grid.x0 + h * (ii[:, None] + sx[None, :])
    py = grid.y0 + h * (jj[:, None] + sy[None, :])
    inside = (np.hypot(px - cx, py - cy) <= radius) & shapely.contains_xy(domain, px, py)
    if not inside.any():
        return None
    shape = np.stack([(1 - sx) * (1 - sy), sx * (1 - sy), sx * sy, (1 - sx) * sy], axis=1)  # (m*m, 4)
    w_cell = inside.astype(float) @ shape  # (n_near, 4)
    flat = jj * grid.nx + ii
    pos = np.searchsorted(np.flatnonzero(active.ravel()), flat)
    nodes = node_number[cell_nodes[pos]]  # active-node numbers of each cell's corners
    idx, inv = np.unique(nodes.ravel(), return_inverse=True)
    w = np.bincount(inv, weights=w_cell.ravel())
    return idx, w / w.sum()


# A point support holds the nodes within its pad radius plus this many cells. The nodes
# inside the disc alone span a polygon inscribed in it, smaller by up to a cell, so the
# held region is a smaller rigid disc than the pad. Measured on the demo's sign bracket
# (cell 3, pad radius 4.5), grid compliance over the body-fitted figure of the rigid disc:
# +5.4 % with no reach, +0.9 % with a quarter cell, -2.9 % with half a cell (docs/method.md).
PAD_HOLD_REACH = 0.25

# A circle support (a bolt's hole) holds the nodes within this many cells of the circle:
# the grid's stair-step rim lies within half a cell diagonal of the true one.
CIRCLE_HOLD_REACH = 0.25

# A segment or box no longer than this many pad radii counts as concentrated: its stresses
# are singular over a length the grid cannot spread, so it gets a pad by default.
PAD_SHORT = 4.0
# Depth, in cells, of the solid skin under a line load that gets no pad.
LOAD_SKIN_CELLS = 1.0


def needs_pad(item, pad_radius: float) -> bool:
    """Whether a support or load concentrates its force enough to need a pad: a point, or
    a segment (a box: its longer side) no longer than PAD_SHORT pad radii. A long segment
    support or line load spreads its force itself; a pad strip along it would only take
    material from the design."""
    if item.kind == "point":
        return True
    if item.kind == "segment":
        (ax, ay), (bx, by) = item.where
        length = math.hypot(bx - ax, by - ay)
    elif item.kind == "circle":
        length = 2.0 * item.where[2]
    else:
        x0, y0, x1, y1 = item.where
        length = max(abs(x1 - x0), abs(y1 - y0))
    return length <= PAD_SHORT * pad_radius


def uses_pad(item, settings: Settings) -> bool:
    """Whether a support or load gets a solid pad: its own ``pad`` flag, else
    ``[method] pads`` where :func:`needs_pad` says the item needs one."""
    if item.pad is not None:
        return bool(item.pad)
    return settings.pads and needs_pad(item, settings.pad_radius)


def build_model(problem: Problem) -> Model:
    """Discretize ``problem``; raises ProblemError for a grid-level problem (a piece of the
    domain without enough support at this cell size)."""
    settings = resolve_settings(problem)
    physics = physics_of(problem)
    grid = make_grid(problem)
    nx, ny, h = grid.nx, grid.ny, grid.h
    domain = domain_polygon(problem)

    xc = grid.x0 + h * (np.arange(nx) + 0.5)
    yc = grid.y0 + h * (np.arange(ny) + 0.5)
    XC, YC = np.meshgrid(xc, yc)
    active = shapely.contains_xy(domain, XC.ravel(), YC.ravel()).reshape(ny, nx)
    if not active.any():
        raise ProblemError(["domain.cell: no grid cell has its centre inside the outline; use a smaller cell"])

    jj, ii = np.nonzero(active)
    cells = jj * nx + ii
    n0 = jj * (nx + 1) + ii
    cell_nodes = np.stack([n0, n0 + 1, n0 + nx + 2, n0 + nx + 1], axis=1)
    node_active_flat = np.zeros((ny + 1) * (nx + 1), bool)
    node_active_flat[cell_nodes.ravel()] = True
    node_number = np.full(node_active_flat.size, -1, np.int64)
    node_number[node_active_flat] = np.arange(int(node_active_flat.sum()))
    n_nodes = int(node_active_flat.sum())
    dpn = physics.dofs_per_node
    edofs = element_dofs(node_number[cell_nodes], dpn)
    n_dof = dpn * n_nodes

    X, Y = np.meshgrid(grid.x0 + h * np.arange(nx + 1), grid.y0 + h * np.arange(ny + 1))
    act_flat = np.flatnonzero(node_active_flat)
    xy = np.column_stack([X.ravel()[act_flat], Y.ravel()[act_flat]])  # active node coordinates
    tol = 0.5 * h * (1.0 + 1e-9)

    # Supports -> fixed dofs.
    fixed = np.zeros(n_dof, bool)
    pads = []
    support_nodes, load_nodes = [], []
    for s in problem.supports:
        g = item_geometry(s)
        padded = uses_pad(s, settings)
        if s.kind == "point" and padded:
            idx = nodes_near(g, xy, settings.pad_radius + PAD_HOLD_REACH * h)
        elif s.kind == "box":
            idx = nodes_near(g, xy, 1e-9 * h)
        elif s.kind == "circle":  # the material in the disc, or (a bolt) the rim of its hole
            idx = nodes_near(g, xy, CIRCLE_HOLD_REACH * h)
        else:
            idx = nodes_near(g, xy, tol)
        support_nodes.append(act_flat[idx])
        for k in physics.fixed_components(s.fix):
            fixed[dpn * idx + k] = True
        if padded:
            pads.append(g.buffer(settings.pad_radius, quad_segs=16))

    # Loads -> nodal forces per case.
    case_names = tuple(c.name for c in problem.cases)
    weights = np.array([c.weight for c in problem.cases], float)
    F = np.zeros((n_dof, len(case_names)))
    for ld in problem.loads:
        c = case_names.index(ld.case)
        padded = uses_pad(ld, settings)
        if ld.kind == "point":
            g = Point(ld.where)
            spread = (
                _pad_load_weights(ld.where, settings.pad_radius, domain, grid, active, cell_nodes, node_number)
                if padded else None
            )
            if spread is None:  # an exact nodal force at the nearest node
                idx, w = nodes_near(g, xy, 0.0)[:1], np.ones(1)
            else:
                idx, w = spread
        else:
            g = LineString(ld.where)
            idx = nodes_near(g, xy, tol)
            w = segment_weights(ld.where, xy, idx)
        load_nodes.append(act_flat[idx])
        for k, value in enumerate(physics.nodal_load(ld)):
            np.add.at(F[:, c], dpn * idx + k, value * w)
        if padded:
            pads.append(g.buffer(settings.pad_radius, quad_segs=16))
        elif ld.kind == "segment":
            # no pad, but a skin one cell deep: a line load acts on material (as the
            # evolutionary method keeps every cell with a loaded corner)
            pads.append(g.buffer(LOAD_SKIN_CELLS * h, quad_segs=4))

    _check_mechanisms(active, cell_nodes, node_number, fixed, xy, grid, physics)

    free = np.full(n_dof, -1, np.int64)
    free[~fixed] = np.arange(int((~fixed).sum()))
    n_free = int((~fixed).sum())
    forces = F[~fixed]
    if not np.any(forces):
        raise ProblemError(["load: every load acts on a supported node, so nothing deforms; move the loads off the supports"])

    solids = [region_geometry(r) for r in problem.regions if r.keep == "solid"] + pads
    empties = [region_geometry(r) for r in problem.regions if r.keep == "empty"]
    solid = shapely.union_all(solids).intersection(domain) if solids else None
    empty = shapely.union_all(empties) if empties else None
    solid_sdf = signed_distance(solid, X, Y)
    empty_sdf = signed_distance(empty, X, Y)

    return Model(
        grid=grid,
        active=active,
        node_active=node_active_flat.reshape(ny + 1, nx + 1),
        cells=cells,
        edofs=edofs,
        cell_nodes=cell_nodes,
        node_number=node_number,
        n_dof=n_dof,
        free=free,
        n_free=n_free,
        forces=forces,
        case_names=case_names,
        case_weights=weights,
        solid_sdf=solid_sdf,
        empty_sdf=empty_sdf,
        settings=settings,
        support_nodes=tuple(support_nodes),
        load_nodes=tuple(load_nodes),
        physics=physics,
    )


def _check_mechanisms(active, cell_nodes, node_number, fixed, xy, grid, physics):
    """Each edge-connected piece of the grid needs supports that stop every rigid-body
    motion of the physics (x, y, rotation in plane stress); pieces touching only at a
    corner are hinged, so they count as separate."""
    labels, n = ndimage.label(active)  # 4-connectivity: cells sharing an edge
    lab = labels[active]
    problems = []
    scale = max(grid.nx, grid.ny) * grid.h
    dpn, n_modes = physics.dofs_per_node, physics.n_rigid_modes
    for k in range(1, n + 1):
        nodes = np.unique(node_number[cell_nodes[lab == k].ravel()])
        held = [(nodes[fixed[dpn * nodes + q]], q) for q in range(dpn)]
        pts = np.concatenate([xy[idx] for idx, _ in held]) / scale
        comp = np.concatenate([np.full(idx.size, q) for idx, q in held])
        rank = restrained_rank(physics, pts, comp)
        if rank < n_modes:
            cx, cy = xy[nodes].mean(axis=0)
            where = f" (the piece of the domain around ({cx:.4g}, {cy:.4g}))" if n > 1 else ""
            problems.append(
                f"support: the supports leave a rigid-body motion free{where} at this grid "
                f"(rank {rank} of {n_modes}); add a support fixing x, y and rotation"
                + ("; at this cell size the domain falls into separate pieces: use a smaller domain.cell" if n > 1 else "")
            )
    if problems:
        raise ProblemError(problems)
