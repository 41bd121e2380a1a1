"""Minimum compliance by the bi-directional evolutionary method (BESO, soft-kill).

Every active cell is solid (x = 1) or soft (x = XMIN = 1e-3), with stiffness x^p E0 and
p = ``penalty`` (3: a soft cell keeps 1e-9 of the solid stiffness). Each iteration (Huang
and Xie 2007, Finite Elem. Anal. Des. 43:1039-1049; Huang and Xie 2010, Evolutionary
Topology Optimization of Continuum Structures, Wiley, and Struct. Multidisc. Optim.
41:671-683; details from memory):

- the sensitivity of a cell is alpha_e = x_e^(p-1) u_e^T K0 u_e / 2 (weighted over the
  load cases), which for a solid cell is its strain energy;
- the mesh-independent filter of the 2007 paper: cell values are averaged onto the nodes
  (on a uniform grid the paper's distance weights are all equal, so a plain mean), then
  each cell takes the cone-weighted mean, max(0, r - d), of the nodal values within the
  filter radius r (a length) of its centre;
- the result is averaged with the previous iteration's (averaged) sensitivity;
- the target volume falls by the evolution rate, V_{k+1} = max(V_goal, V_k (1 - rate));
- cells are ranked by sensitivity: the best become solid, the rest soft, except that at most
  ``admission_cap`` of the domain may switch from soft to solid in one iteration (the
  threshold for removal then drops so that the volume still meets the target);
- converged when the volume is at the goal and the compliance over the last five iterations
  differs from the five before by less than 0.1 % of it.

Ranking by sorting makes the same choice as the papers' bisection on the thresholds.
Keep-solid regions, pads and every cell with a loaded corner stay solid, keep-empty regions
stay soft.
The outline is a contour of the nodal average of the 0/1 design at the level that meets
the goal, re-analysed with the ersatz material (``crisp_compliance``).
"""
from __future__ import annotations

import time

import numpy as np

from ..fem.analysis import PlateSystem
from ..fem.model import build_model
from ..spec import IterationRecord, Problem, Result
from .density import finish, keep_masks
from .filters import cell_centres, cone_weights, default_filter_radius, node_average

XMIN = 1e-3  # design variable of a soft cell
CONVERGE_TOL, HALF_WINDOW = 1e-3, 5  # compliance change over the last 2 x 5 iterations
TIE_TOL = 1e-8  # sensitivities this close (relative) count as equal


def sensitivity_filter(model, radius: float):
    """The 2007 paper's filter as one sparse matrix: cell -> node mean -> cone mean of the
    nodes within ``radius`` of each cell centre (at least its own corners, h / sqrt 2 away)."""
    radius = max(radius, 0.75 * model.grid.h)
    X, Y = model.node_xy()
    nodes = np.flatnonzero(model.node_active.ravel())
    W = cone_weights(cell_centres(model), np.column_stack([X.ravel()[nodes], Y.ravel()[nodes]]), radius)
    W = W.multiply(1.0 / np.asarray(W.sum(axis=1))).tocsr()
    return W @ node_average(model)[nodes]


def _cut(values_desc: np.ndarray, k: int) -> int:
    """The count nearest ``k`` that does not split a run of equal values (equal to a
    relative 1e-8), as a threshold between two values would: mirror-image cells of a
    symmetric problem, whose sensitivities differ by rounding only, stay together."""
    n = values_desc.size
    if n == 0 or k <= 0:
        return 0
    if k >= n:
        return n
    gap = values_desc[:-1] - values_desc[1:]
    cuts = np.concatenate([[0], np.flatnonzero(gap > TIE_TOL * np.abs(values_desc[:-1])) + 1, [n]])
    pos = np.searchsorted(cuts, k)
    below, above = cuts[pos - 1], cuts[pos]
    return int(above if above - k < k - below else below)


def _rank_update(alpha, solid_now, free, fixed_solid, n_target, cap):
    """New solid mask: about the ``n_target`` best cells (fixed ones kept; ties kept
    together), with at most ``cap`` soft cells admitted."""
    n_free_solid = int(np.clip(n_target - fixed_solid.sum(), 0, free.sum()))
    idx = np.flatnonzero(free)
    order = idx[np.argsort(-alpha[idx], kind="stable")]
    a = alpha[order]
    chosen = order[: _cut(a, n_free_solid)]
    new = fixed_solid.copy()
    if np.count_nonzero(~solid_now[chosen]) > cap:
        soft, hard = ~solid_now[order], solid_now[order]
        n_add = _cut(a[soft], cap)
        new[order[soft][:n_add]] = True
        new[order[hard][: _cut(a[hard], n_free_solid - n_add)]] = True
    else:
        new[chosen] = True
    return new


def loaded_cells(model) -> np.ndarray:
    """Active cells with a corner node that carries a force in any load case. A load on a
    node whose cells are all soft would act on 1e-9 of the stiffness (a pad spreads its load
    over the nodes of every cell the pad touches, a few more than the pad's own cells)."""
    loaded_dof = np.zeros(model.n_dof, bool)
    is_free = model.free >= 0
    loaded_dof[is_free] = np.any(model.forces[model.free[is_free]] != 0.0, axis=1)
    loaded_node = loaded_dof.reshape(-1, model.dofs_per_node).any(axis=1)  # any unknown of the node
    return loaded_node[model.node_number[model.cell_nodes]].any(axis=1)


def run(problem: Problem, progress=None) -> Result:
    t_start = time.perf_counter()
    model = build_model(problem)
    st = model.settings
    m = problem.method
    system = PlateSystem(model)
    radius = default_filter_radius(problem)
    F = sensitivity_filter(model, radius)
    goal = problem.goal.material
    p = float(m.penalty)
    n = model.n_cells
    n_goal = int(round(goal * n))
    cap = max(1, int(np.floor(m.admission_cap * n)))

    keep_solid, keep_empty = keep_masks(model)
    keep_solid = keep_solid | (loaded_cells(model) & ~keep_empty)
    free = ~(keep_solid | keep_empty)
    solid = free | keep_solid  # start from the full design
    history: list[IterationRecord] = []
    compliances: list[float] = []
    converged, status = False, "iteration limit reached"
    prev_alpha = None
    at_goal = False  # the analysed design was made for the goal volume
    for it in range(1, st.iterations + 1):
        x = np.where(solid, 1.0, XMIN)
        state = system.analyse(x**p)
        c = state.compliance
        compliances.append(c)
        n_solid = int(solid.sum())
        alpha = F @ (0.5 * x ** (p - 1.0) * (state.cell_energy @ model.case_weights))
        if prev_alpha is not None:
            alpha = 0.5 * (alpha + prev_alpha)
        prev_alpha = alpha

        v = n_solid / n
        v_next = max(goal, v * (1.0 - m.evolution_rate)) if v >= goal else min(goal, v * (1.0 + m.evolution_rate))
        n_next = n_goal if v_next == goal else int(round(v_next * n))
        new = _rank_update(alpha, solid, free, keep_solid, n_next, cap)
        change = float(np.count_nonzero(new != solid)) / n
        rec = IterationRecord(
            iteration=it, compliance=c, material_fraction=v, target_fraction=n_next / n,
            boundary_change=change, step=float(m.evolution_rate),
        )
        history.append(rec)
        if progress is not None:
            progress(rec)
        if at_goal and len(compliances) >= 2 * HALF_WINDOW:
            recent = sum(compliances[-HALF_WINDOW:])
            before = sum(compliances[-2 * HALF_WINDOW : -HALF_WINDOW])
            if abs(before - recent) <= CONVERGE_TOL * recent:
                converged, status = True, "converged"
                break
        if it < st.iterations:
            solid = new
            at_goal = n_next == n_goal

    # solid, state: the last analysed design, whose compliance the history reports last.
    settings = {
        "penalty": p, "filter_radius": radius, "evolution_rate": float(m.evolution_rate),
        "admission_cap": float(m.admission_cap), "xmin": XMIN, "converge_tol": CONVERGE_TOL,
    }
    return finish(problem, model, system, "evolutionary", solid.astype(float), state, history,
                  converged, status, settings, radius, t_start)
