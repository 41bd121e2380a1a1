"""The plastic layout linear program on a ground structure, with candidate bars added
adaptively from its dual (Gilbert and Tyas 2003, Eng. Comput. 20:1044-1064).

For one load case f: minimize sum_i L_i (a+_i + a-_i) subject to B (a+ - a-) = f at the
free unknowns, a+ >= 0, a- >= 0. Bar force q = a+ - a- (tension positive) at a unit stress;
the optimum W = sum L_i |q_i|. The stiffest truss of material volume V for that case has
its areas in proportion to |q_i| (every bar at the same stress W / V) and compliance
f.u = W^2 / (E V).

Column of B for the bar from node i to node j with unit direction e: -e at node i, +e at
node j, so B^T u is the bar's elongation. The equality multipliers u of the solved program
are a virtual displacement field; a bar left out of the program whose virtual strain
|e.(u_j - u_i)| / L exceeds 1 would lower W, so it is added; when none does, the solution is
optimal over the whole ground structure (u is then dual feasible for it).
"""
from __future__ import annotations

import math
import time
from dataclasses import dataclass, field

import numpy as np
from scipy import sparse
from scipy.optimize import linprog
from scipy.spatial import cKDTree

from ..spec import CAUTION, Problem, ProblemError
from .ground import GroundStructure, all_bars, build_ground_structure, default_spacing, estimated_nodes, valid_bars

__all__ = ["TrussCase", "TrussResult", "truss_reference", "estimate_truss_bytes", "solve_layout",
           "STRAIN_TOL", "MAX_NODE_PAIRS", "MEMORY_SHARE"]

# A left-out bar is added when its virtual strain exceeds 1 + STRAIN_TOL; at the end W is
# within a factor 1 + STRAIN_TOL of the optimum over every candidate bar.
STRAIN_TOL = 1e-4
# The first program holds the bars no longer than this many spacings (lattice neighbours,
# diagonals and the (2, 1) "knight" steps).
START_REACH = math.sqrt(5.0) * 1.001
# Each round adds at most max(ADD_PER_NODE x nodes, ADD_SHARE x bars in the program) bars,
# those of the largest virtual strain first.
ADD_PER_NODE = 1.0
ADD_SHARE = 0.25
MAX_ROUNDS = 60
# Up-front limits: every node pair is scanned once per round (time), the program's bars
# cost memory (measured in benchmarks/truss.py: docs/truss.md).
MAX_NODE_PAIRS = 50_000_000
SCAN_BLOCK = 1_000_000  # node pairs per block of the strain scan (about 100 bytes each)
BYTES_BASE = 100e6 + 100.0 * SCAN_BLOCK  # interpreter, libraries and one scan block
BYTES_PER_BAR = 2_500.0
GROWTH = 2.0  # bars in the final program over bars in the first (measured 1.1-1.7: docs/truss.md)
MEMORY_SHARE = 0.5  # of the memory available
# HiGHS's interior-point solver: on these programs several times faster than its simplex
# solvers (measured: docs/truss.md).
LP_METHOD = "highs-ipm"
# Seeded tiny loads at every node while bars are added (see _perturbed).
PERTURBATION = 1e-5
PERTURBATION_SEED = 20030


@dataclass(frozen=True)
class TrussCase:
    """The reference of one load case: the stiffest truss on the ground structure."""

    name: str
    weight: float
    W: float  # least sum L |q| over force sets in equilibrium with the case's loads
    compliance: float  # W^2 / (E V)
    status: str  # "optimal", or why the rounds stopped early
    rounds: int
    bars_in_lp: int
    max_virtual_strain: float  # of any admissible bar at the last round (<= 1 + tol: optimal)
    W_lower: float  # a lower bound of W over the whole ground structure, from the dual
    start: np.ndarray  # (k, 2) end points of the kept bars
    end: np.ndarray
    force: np.ndarray  # (k,) bar forces, tension positive (force units)
    area: np.ndarray  # (k,) areas of the stiffest truss of volume V (length^2)


@dataclass(frozen=True)
class TrussResult:
    problem: Problem
    spacing: float
    spacing_default: bool
    nodes: int
    node_pairs: int  # candidate bars possible: every node pair, before the domain and node tests
    volume: float  # V = goal material x domain area x thickness
    E: float
    cases: tuple  # TrussCase per load case, in the problem's order
    seconds: float
    caution: str = CAUTION
    notes: tuple = field(default_factory=tuple)

    @property
    def compliance(self) -> float:
        """Weighted sum of the cases' references (the case's own for one case)."""
        return float(sum(c.weight * c.compliance for c in self.cases))

    @property
    def case_compliance(self) -> dict:
        return {c.name: c.compliance for c in self.cases}


# --------------------------------------------------------------------------- sizes

def estimate_truss_bytes(n_nodes: int) -> int:
    """Peak memory of the reference on ``n_nodes`` nodes: the libraries, the strain scan's
    blocks and the bars of the final program (about 8 first-round bars per node, times
    GROWTH), each with its share of the program and the solver's factors."""
    return int(BYTES_BASE + BYTES_PER_BAR * GROWTH * 8.0 * n_nodes)


def _check_size(problem: Problem, spacing: float, memory_limit: float | None) -> None:
    from ..resources import available_memory_bytes

    n = estimated_nodes(problem, spacing)
    pairs = n * (n - 1) // 2
    need = estimate_truss_bytes(n)
    limit = MEMORY_SHARE * available_memory_bytes() if memory_limit is None else float(memory_limit)
    too_many = pairs > MAX_NODE_PAIRS
    if not too_many and need <= limit:
        return
    # nodes ~ 1 / spacing^2: the spacing that meets both limits, with 5 % to spare
    n_fit = min(math.sqrt(2.0 * MAX_NODE_PAIRS), (limit - BYTES_BASE) / (BYTES_PER_BAR * GROWTH * 8.0))
    n_fit = max(n_fit, 1.0)
    fit = 1.05 * spacing * math.sqrt(n / n_fit)
    u = problem.units.length
    why = (f"{pairs:.3g} candidate bars, more than the {MAX_NODE_PAIRS:.3g} scanned in reasonable time"
           if too_many else f"about {need / 2**30:.2f} GiB, more than the {limit / 2**30:.2f} GiB allowed")
    raise ProblemError([f"spacing: {spacing:.4g} {u} gives a ground structure of about {n} nodes and "
                        f"{why}; use a spacing of at least {fit:.4g} {u}"])


# --------------------------------------------------------------------------- the program

def _bar_geometry(gs: GroundStructure, i, j):
    d = gs.xy[j] - gs.xy[i]
    L = np.hypot(d[:, 0], d[:, 1])
    return d / L[:, None], L


def _equilibrium_matrix(gs: GroundStructure, i, j, e, free_number, n_free):
    """B restricted to the free unknowns (n_free, m), sparse."""
    m = i.size
    rows = np.concatenate([2 * i, 2 * i + 1, 2 * j, 2 * j + 1])
    vals = np.concatenate([-e[:, 0], -e[:, 1], e[:, 0], e[:, 1]])
    cols = np.tile(np.arange(m), 4)
    r = free_number[rows]
    keep = r >= 0
    return sparse.csc_matrix((vals[keep], (r[keep], cols[keep])), shape=(n_free, m))


def solve_layout(gs: GroundStructure, f: np.ndarray, i: np.ndarray, j: np.ndarray):
    """One plastic layout program over the bars (i, j) for nodal forces ``f`` (2 n,).

    Returns (status, W, q, u): HiGHS's status code (0 optimal, 2 infeasible, ...), the
    optimum, the bar forces and the virtual displacements (2 n,), zero at fixed unknowns;
    lengths and forces are scaled to order one inside and back outside."""
    free = ~gs.fixed
    free_number = np.full(free.size, -1, np.int64)
    free_number[free] = np.arange(int(free.sum()))
    n_free = int(free.sum())
    e, L = _bar_geometry(gs, i, j)
    l_ref = gs.spacing
    f_ref = float(np.max(np.abs(f))) or 1.0
    B = _equilibrium_matrix(gs, i, j, e, free_number, n_free)
    A = sparse.hstack([B, -B], format="csc")
    c = np.concatenate([L, L]) / l_ref
    res = linprog(c, A_eq=A, b_eq=f[free] / f_ref, bounds=(0, None), method=LP_METHOD)
    if res.status != 0:
        return res.status, None, None, None
    x = res.x
    q = (x[: i.size] - x[i.size:]) * f_ref
    W = float(res.fun) * l_ref * f_ref
    u = np.zeros(free.size)
    u[free] = res.eqlin.marginals
    return 0, W, q, u


def _strain_of(d: np.ndarray, du: np.ndarray, spacing: float, length2=None) -> np.ndarray:
    """|virtual strain| |d.du| / |d|^2 of bars with end-to-end vectors ``d`` and end
    displacement differences ``du`` (any leading shape, last axis x, y), in the program's
    scaled units (1 = at the limit); ``length2`` = |d|^2 if already known."""
    if length2 is None:
        length2 = np.einsum("...k,...k->...", d, d)
    return np.abs(np.einsum("...k,...k->...", d, du)) * spacing / length2


def _strain(gs: GroundStructure, u2: np.ndarray, i, j) -> np.ndarray:
    """|virtual strain| of bars (i, j)."""
    return _strain_of(gs.xy[j] - gs.xy[i], u2[j] - u2[i], gs.spacing)


def _scan(gs: GroundStructure, u2: np.ndarray, excluded: np.ndarray, keep: int):
    """Every node pair (i < j) not in ``excluded`` (sorted keys i n + j) whose virtual
    strain exceeds 1 + STRAIN_TOL: the ``keep`` largest as (i, j, strain), their total
    count, and the largest strain seen. Block by block, so memory stays bounded."""
    n = gs.n_nodes
    rows = max(1, SCAN_BLOCK // max(n, 1))
    found_i, found_j, found_s = [], [], []
    count, smax = 0, 0.0
    for r0 in range(0, n - 1, rows):
        r1 = min(n - 1, r0 + rows)
        ii = np.arange(r0, r1)
        d = gs.xy[None, :, :] - gs.xy[ii, None, :]  # (rows, n, 2)
        du = u2[None, :, :] - u2[ii, None, :]
        L2 = np.einsum("rnk,rnk->rn", d, d)
        L2[L2 == 0.0] = np.inf
        s = _strain_of(d, du, gs.spacing, L2)
        s[np.arange(n)[None, :] <= ii[:, None]] = 0.0  # each pair once: j > i
        a, b = np.nonzero(s > 1.0 + STRAIN_TOL)
        if a.size == 0:
            continue
        ai, bj = ii[a], b
        sv = s[a, b]
        keys = ai * n + bj
        pos = np.searchsorted(excluded, keys)
        pos = np.minimum(pos, max(excluded.size - 1, 0))
        new = excluded[pos] != keys if excluded.size else np.ones(keys.size, bool)
        ai, bj, sv = ai[new], bj[new], sv[new]
        count += sv.size
        if sv.size:
            smax = max(smax, float(sv.max()))
        if sv.size > keep:
            top = np.argpartition(-sv, keep)[:keep]
            ai, bj, sv = ai[top], bj[top], sv[top]
        found_i.append(ai)
        found_j.append(bj)
        found_s.append(sv)
    if not found_i:
        return np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0), 0, smax
    ai, bj, sv = np.concatenate(found_i), np.concatenate(found_j), np.concatenate(found_s)
    order = np.argsort(-sv, kind="stable")[:keep]
    return ai[order], bj[order], sv[order], count, smax


def _start_bars(gs: GroundStructure):
    """The first program's bars: the valid pairs no longer than START_REACH spacings."""
    pairs = cKDTree(gs.xy).query_pairs(START_REACH * gs.spacing, output_type="ndarray")
    if pairs.size == 0:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    i, j = pairs[:, 0].astype(np.int64), pairs[:, 1].astype(np.int64)
    swap = i > j
    i[swap], j[swap] = j[swap], i[swap]
    ok = valid_bars(gs, i, j)
    return i[ok], j[ok]


def _infeasible(gs: GroundStructure, case: str, problem: Problem) -> ProblemError:
    u = problem.units.length
    where = "" if len(gs.case_names) == 1 else f"load case {case!r}: "
    if gs.support_rank < 3:
        why = (f"the supports leave a rigid-body motion free (rank {gs.support_rank} of 3), and the "
               "loads do not point along what they hold; add a support fixing x, y and rotation")
    else:
        why = (f"no chain of bars inside the domain at spacing {gs.spacing:.4g} {u} joins the loads to the "
               "supports; check that the loads lie on the domain, or use a smaller spacing")
    return ProblemError([f"truss: {where}no truss can carry the loads: {why}"])


def _perturbed(gs: GroundStructure, f: np.ndarray) -> np.ndarray:
    """The loads plus tiny seeded loads at every free unknown (PERTURBATION x the largest
    load). The plain program is highly degenerate (a few bars carry everything, so most
    basic variables are zero) and its multipliers are then far from unique: each round's
    new bars move them and new violations appear elsewhere. With a little load at every
    node every node's virtual displacement is pinned down, and the rounds converge in a few
    steps; the final W is that of the plain loads on the final bars (docs/truss.md)."""
    rng = np.random.default_rng(PERTURBATION_SEED)
    return f + PERTURBATION * float(np.abs(f).max()) * rng.standard_normal(f.size) * (~gs.fixed)


def _solve_case(gs: GroundStructure, f: np.ndarray, case: str, problem: Problem, start=None) -> dict:
    """Adaptive member adding for one case, from the bars ``start`` (i, j) (default: the
    short bars): the figures of a TrussCase, and the bars (i, j) and forces q of the
    final program."""
    i, j = _start_bars(gs) if start is None else start
    loads = _perturbed(gs, f)
    status, W, q, u = solve_layout(gs, loads, i, j) if i.size else (2, None, None, None)
    if status == 2:  # e.g. a floating piece of the ground structure: keep to the plain loads
        loads = f
        status, W, q, u = solve_layout(gs, loads, i, j) if i.size else (2, None, None, None)
    if status == 2 and gs.node_pairs <= 200_000:
        i, j = all_bars(gs)  # a neck narrower than the first bars' reach: try every bar once
        status, W, q, u = solve_layout(gs, loads, i, j) if i.size else (2, None, None, None)
    if status == 2:
        raise _infeasible(gs, case, problem)
    if status != 0:
        raise ProblemError([f"truss: the layout program stopped without a solution (HiGHS status {status})"])
    n = gs.n_nodes
    rejected = np.zeros(0, np.int64)
    rounds, state = 1, "optimal"
    while True:
        u2 = u.reshape(-1, 2)
        keep = int(max(ADD_PER_NODE * n, ADD_SHARE * i.size))
        excluded = np.union1d(i * n + j, rejected)
        accepted_i = accepted_j = np.zeros(0, np.int64)
        smax = 0.0
        while True:
            ci, cj, cs, count, smax = _scan(gs, u2, excluded, 4 * keep)
            if ci.size == 0:
                break
            ok = valid_bars(gs, ci, cj)
            bad = ci[~ok] * n + cj[~ok]
            rejected = np.union1d(rejected, bad)
            excluded = np.union1d(excluded, bad)
            if ok.any():
                accepted_i, accepted_j = ci[ok][:keep], cj[ok][:keep]
                break
            if count <= ci.size:  # every violator was looked at: none is a valid bar
                smax = 0.0
                break
        # the largest virtual strain of any admissible bar under u
        strain = max(1.0 + STRAIN_TOL if accepted_i.size == 0 else smax,
                     float(_strain(gs, u2, i, j).max(initial=1.0)))
        if accepted_i.size == 0:
            break
        if rounds >= MAX_ROUNDS:
            state = f"stopped after {MAX_ROUNDS} rounds with bars still to add"
            break
        i = np.concatenate([i, accepted_i])
        j = np.concatenate([j, accepted_j])
        status, W_new, q_new, u_new = solve_layout(gs, loads, i, j)
        rounds += 1
        if status != 0:
            state = f"stopped: HiGHS status {status} at round {rounds}"
            break
        W, q, u = W_new, q_new, u_new
    # Any u scaled to strain <= 1 on every admissible bar is dual feasible for the whole
    # ground structure, so f.u / strain bounds its optimum from below (the same multipliers
    # serve the plain loads: only the objective of the dual depends on the loads).
    W_lower = float(f @ u) * gs.spacing / strain
    if loads is not f:
        status, W, q, _ = solve_layout(gs, f, i, j)
        if status != 0:
            raise ProblemError([f"truss: the layout program stopped without a solution (HiGHS status {status})"])
    return {"status": state, "rounds": rounds, "W": W, "W_lower": min(W_lower, W),
            "max_virtual_strain": strain, "i": i, "j": j, "q": q}


def truss_reference(problem: Problem, spacing: float | None = None,
                    memory_limit: float | None = None) -> TrussResult:
    """The truss ground-structure reference of ``problem``: per load case the stiffest truss
    of the problem's material volume (goal x domain area x thickness) on a ground structure
    of nodes ``spacing`` apart (default :func:`default_spacing`).

    Raises ProblemError, before building anything, when the ground structure would be too
    large (naming a spacing that fits), and for a load no truss in the domain can carry.
    """
    t0 = time.perf_counter()
    from ..geometry.shapes import domain_polygon

    is_default = spacing is None
    if spacing is None:
        spacing = default_spacing(problem)
    if not (isinstance(spacing, (int, float)) and math.isfinite(spacing) and spacing > 0):
        raise ProblemError([f"spacing: must be a positive length, got {spacing!r}"])
    spacing = float(spacing)
    _check_size(problem, spacing, memory_limit)
    gs = build_ground_structure(problem, spacing)
    m = problem.material
    V = problem.goal.material * domain_polygon(problem).area * m.thickness
    cases, start = [], None
    for k, name in enumerate(gs.case_names):
        f = gs.forces[:, k].copy()
        f[gs.fixed] = 0.0  # a load on a held unknown goes straight into the support
        if not np.any(f):
            where = "" if len(gs.case_names) == 1 else f" of load case {name!r}"
            raise ProblemError([f"load: every load{where} acts on a supported node, so no bar carries "
                                "anything; move the loads off the supports"])
        # a later case starts from the bars the earlier ones needed: fewer rounds
        sol = _solve_case(gs, f, name, problem, start)
        start = (sol["i"], sol["j"])
        W, i, j, q = sol["W"], sol["i"], sol["j"], sol["q"]
        big = np.abs(q) > 1e-7 * np.abs(q).max()
        qi = q[big]
        cases.append(TrussCase(
            name=name, weight=float(gs.case_weights[k]), W=W, compliance=W * W / (m.E * V),
            status=sol["status"], rounds=sol["rounds"], bars_in_lp=int(i.size),
            max_virtual_strain=float(sol["max_virtual_strain"]), W_lower=float(sol["W_lower"]), start=gs.xy[i[big]], end=gs.xy[j[big]], force=qi,
            area=np.abs(qi) * V / W,
        ))
    notes = ()
    if len(cases) > 1:
        notes = (f"{len(cases)} load cases: each case has its own reference, the stiffest truss "
                 "for that case alone; no one truss is the stiffest for every case at once, so the "
                 "weighted sum of the references is a lower reference for the weighted compliance",)
    return TrussResult(problem=problem, spacing=spacing, spacing_default=is_default, nodes=gs.n_nodes,
                       node_pairs=gs.node_pairs, volume=V, E=float(m.E), cases=tuple(cases),
                       seconds=time.perf_counter() - t0, notes=notes)
