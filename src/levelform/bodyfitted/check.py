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

from ..fem.model import resolve_settings
from ..geometry.shapes import domain_polygon
from ..linalg import sparse_lu
from ..spec import Problem, ProblemError
from .boundary import (
    OutlineFit,
    as_xy,
    format_point,
    held_dofs,
    hold_loose_pieces,
    nodal_forces,
)
from .mesh import (
    check_element_count,
    mesh_outline,
    mesher_name,
    outline_polygons,
    pad_polygon,
    plan_mesh,
    reentrant_corners,
)

# pad_polygon lives in .mesh; it stays importable from here for older callers.
__all__ = ["GRID_DIFFERENCE_WARN", "ON_EDGE", "Verification", "pad_polygon", "verify_outline"]

# Share by which the body-fitted compliance may differ from the grid's before a warning.
GRID_DIFFERENCE_WARN = 0.05
# Tolerance, as a share of the mesh size, for "lies on the outline edge / on the segment".
ON_EDGE = 1e-3


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


# --------------------------------------------------------------------------- analysis

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
    polys = outline_polygons(outline)
    material = shapely.union_all(polys)
    if mesh_size is None:
        mesh_size = float(problem.domain.cell)
    try:
        mesh_size = float(mesh_size)
    except (TypeError, ValueError):
        raise ProblemError(f"mesh_size: must be a positive length, got {mesh_size!r}") from None
    if not (math.isfinite(mesh_size) and mesh_size > 0.0):
        raise ProblemError(f"mesh_size: must be a positive length, got {mesh_size!r}")
    check_element_count(material.area, mesh_size)
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

    hard, inner, refine = plan_mesh(problem, material, settings, mesh_size, tol)
    try:
        p, t = mesh_outline(polys, hard, inner, refine, mesh_size, tol)
    except ProblemError:
        if not inner:
            raise
        # Embedded lines (interior segments, pad and box edges) can trip the mesher when
        # they run a hair away from the outline edge; mesh without them and say so.
        p, t = mesh_outline(polys, hard, [], refine, mesh_size, tol)
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
    fit = OutlineFit(mesh=mesh, nodes_xy=nodes_xy, material=material, settings=settings,
                     mesh_size=mesh_size, tol=tol, unit=unit, order=order)
    fixed = held_dofs(fit, problem.supports, problems)
    F, load_dofs = nodal_forces(fit, elem, problem, case_names, problems, warnings)
    hold_loose_pieces(fit, sbasis, fixed, F, load_dofs, problems, warnings)
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
        mesher=mesher_name(),
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
                       "max_von_mises": float(vm_nodes[kv, c]), "max_von_mises_at": as_xy(xy[kv]),
                       "max_displacement": float(mag[kd, c]), "max_displacement_at": as_xy(xy[kd])}
    kv, cv = np.unravel_index(int(np.argmax(vm_nodes)), vm_nodes.shape)
    kd, cd = np.unravel_index(int(np.argmax(mag)), mag.shape)
    result = dict(
        compliance=float(case_c @ weights),
        case_compliance={n: float(v) for n, v in zip(case_names, case_c)},
        max_von_mises=float(vm_nodes[kv, cv]), max_von_mises_at=as_xy(xy[kv]), max_von_mises_case=case_names[cv],
        max_displacement=float(mag[kd, cd]), max_displacement_at=as_xy(xy[kd]), max_displacement_case=case_names[cd])
    return result, cases


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
            out.append(f"the peak von Mises stress lies at {item.key} {format_point(item.where)}: a concentrated "
                       "support or load; its value depends on the mesh and the pad size, read it as indicative")
            return out
    for s in problem.supports:
        ends = list(s.where) if s.kind == "segment" else (
            [(s.where[0], s.where[1]), (s.where[2], s.where[1]), (s.where[2], s.where[3]), (s.where[0], s.where[3])]
            if s.kind == "box" else [])
        for e in ends:
            if math.hypot(x - e[0], y - e[1]) <= 2.0 * mesh_size:
                out.append(f"the peak von Mises stress lies at an end of {s.key} {format_point(e)}, where a held edge meets "
                           "a free one and the elastic stress is singular: it grows as the mesh is refined; read it "
                           "as indicative")
                return out
    for xy, angle in reentrant_corners(polys):
        if math.hypot(x - xy[0], y - xy[1]) <= 2.0 * mesh_size:
            out.append(f"the peak von Mises stress lies at a re-entrant corner {format_point(xy)} (interior angle "
                       f"{angle:.0f} deg) where the elastic stress is singular: it grows as the mesh is refined; "
                       "round the corner or read the figure as indicative")
            break
    return out
