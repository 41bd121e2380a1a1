"""Minimum compliance by the density-based method (SIMP) on the fixed grid.

Each active cell carries a density x in [0, 1]; its stiffness is the modified SIMP
interpolation E(x) = Emin + x^p (E0 - Emin) with Emin = 1e-9 E0 (Sigmund 2001, Struct.
Multidisc. Optim. 21:120-127; Andreassen et al. 2011, Struct. Multidisc. Optim. 43:1-16).
A cone filter of radius ``filter_radius`` (a length) regularizes either the densities
(x_phys = H x / Hs, sensitivities chained through it) or the sensitivities (Sigmund's
filter). The optimality-criteria update moves each density by at most 0.2 and finds the
volume multiplier by bisection so the physical densities meet the goal exactly. An
optional smoothed Heaviside projection (Wang, Lazarov and Sigmund 2011, Struct. Multidisc.
Optim. 43:767-784) with a doubling sharpness pushes the design towards 0/1.

The method's own figure is the grey compliance; the Result also carries a crisp design: a
contour of the nodal densities at the level that meets the material goal, re-analysed with
the ersatz material on the same grid (``crisp_compliance``).
"""
from __future__ import annotations

import time

import numpy as np
from scipy.optimize import brentq

from ..fem.analysis import PlateSystem
from ..fem.model import build_model
from ..geometry.outline import outline_from_levelset
from ..geometry.shapes import domain_polygon
from ..levelset.operators import cell_fraction
from ..spec import IterationRecord, Problem, Result
from .filters import (
    cell_average_of_nodes,
    cell_filter,
    default_filter_radius,
    node_average,
)
from .finish import build_result

EMIN = 1e-9  # void stiffness relative to solid (modified SIMP)
MOVE = 0.2  # optimality-criteria move limit on a density per iteration
CHANGE_TOL = 0.01  # stop when no density changed by more than this in one update
ETA = 0.5  # projection threshold
BETA_MAX, BETA_EVERY = 64.0, 50  # projection sharpness cap; doubling period (iterations)
# With projection a cell near the threshold can flip between two states for ever once the
# projection is sharp, so the change of x never falls below CHANGE_TOL: there the move limit
# shrinks as 4 / beta and a compliance that stays within STALL_TOL over STALL_WINDOW
# iterations also counts as converged (common practice, no source).
STALL_TOL, STALL_WINDOW = 1e-3, 10
SENSITIVITY_FLOOR = 1e-3  # max(1e-3, x) in the filtered sensitivity (Andreassen et al. 2011)


def keep_masks(model):
    """Active cells fixed solid / fixed empty: those whose four-corner mean of the keep
    signed distance is negative (pads count as keep-solid)."""
    solid = cell_average_of_nodes(model, model.solid_sdf) < 0.0  # +inf where no region
    empty = cell_average_of_nodes(model, model.empty_sdf) < 0.0
    return solid, empty & ~solid


def _project(xt, beta):
    """Smoothed Heaviside projection of filtered densities and its derivative."""
    den = np.tanh(beta * ETA) + np.tanh(beta * (1.0 - ETA))
    th = np.tanh(beta * (xt - ETA))
    return (np.tanh(beta * ETA) + th) / den, beta * (1.0 - th**2) / den


def _bisect_multiplier(volume_of, B, target):
    """The multiplier l at which ``volume_of(l)`` (decreasing in l) equals ``target``,
    by bisection on log l; brackets from the range of the ratio B = -dc/dv."""
    pos = B[B > 0.0]
    if pos.size == 0:
        return 1.0
    lo, hi = np.log(pos.min()) - 60.0, np.log(pos.max()) + 60.0
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if volume_of(np.exp(mid)) > target:
            lo = mid
        else:
            hi = mid
        if hi - lo < 1e-13:
            break
    return float(np.exp(0.5 * (lo + hi)))


def crisp_design(model, system, cell_values, goal, ersatz, length):
    """Contour a cell field at the level whose enclosed material meets ``goal``.

    The nodal field is the mean of the adjacent active cells' values; phi = length *
    (level - rho) is negative in material, so the outline and its cut-cell fractions are
    those of the level-set method. Keep regions are clamped in (their signed distances).
    Returns (phi with NaN outside, cell fractions, crisp compliance State).
    """
    g = model.grid
    a = model.node_active
    rho = (node_average(model) @ cell_values).reshape(g.ny + 1, g.nx + 1)

    def phi_at(level):
        phi = length * (level - rho)
        return np.maximum(np.minimum(phi, model.solid_sdf), -model.empty_sdf)

    def excess(level):
        return float(cell_fraction(phi_at(level).ravel()[model.cell_nodes]).mean()) - goal

    lo, hi = float(rho[a].min()) - 1e-9, float(rho[a].max()) + 1e-9
    if excess(lo) <= 0.0:
        level = lo
    elif excess(hi) >= 0.0:
        level = hi
    else:
        level = brentq(excess, lo, hi, xtol=1e-12, rtol=1e-12, maxiter=200)
    phi = phi_at(level)
    frac = cell_fraction(phi.ravel()[model.cell_nodes])
    state = system.analyse(ersatz + (1.0 - ersatz) * frac)
    return np.where(a, phi, np.nan), frac, state


def run(problem: Problem, progress=None) -> Result:
    t_start = time.perf_counter()
    model = build_model(problem)
    st = model.settings
    m = problem.method
    system = PlateSystem(model)
    radius = default_filter_radius(problem)
    H, Hs = cell_filter(model, radius)
    goal = problem.goal.material
    p = float(m.penalty)
    use_density = m.filter == "density"
    project = bool(m.projection) and use_density

    solid, empty = keep_masks(model)
    fixed = solid | empty
    fixed_val = solid.astype(float)
    free = ~fixed
    n = model.n_cells
    target = goal * n
    beta = 1.0 if project else None

    def physical(x):
        """Physical densities and d(x_phys)/d(x_tilde) of the design variables x."""
        if not use_density:
            return x, np.ones(n)
        xt = (H @ x) / Hs
        xp, dxp = _project(xt, beta) if project else (xt, np.ones(n))
        return np.where(fixed, fixed_val, xp), np.where(fixed, 0.0, dxp)

    x = np.where(fixed, fixed_val, goal)
    history: list[IterationRecord] = []
    converged, status = False, "iteration limit reached"
    since_beta = 0
    for it in range(1, st.iterations + 1):
        xp, dxp = physical(x)
        state = system.analyse(EMIN + xp**p * (1.0 - EMIN))
        c = state.compliance
        dc = -p * xp ** (p - 1.0) * (1.0 - EMIN) * (state.cell_energy @ model.case_weights)
        if use_density:
            dc = H @ (dc * dxp / Hs)
            dv = H @ (dxp / Hs)
        else:
            dc = (H @ (x * dc)) / Hs / np.maximum(SENSITIVITY_FLOOR, x)
            dv = np.ones(n)
        B = np.where(free, np.maximum(-dc, 0.0) / np.maximum(dv, 1e-300), 0.0)
        move = MOVE if beta is None else MOVE * min(1.0, 4.0 / beta)
        lo_x, hi_x = np.maximum(0.0, x - move), np.minimum(1.0, x + move)

        def update(lam):
            return np.where(free, np.clip(x * np.sqrt(B / lam), lo_x, hi_x), fixed_val)

        lam = _bisect_multiplier(lambda lam: float(physical(update(lam))[0].sum()), B, target)
        x_new = update(lam)
        change = float(np.max(np.abs(x_new - x)))
        x = x_new
        since_beta += 1
        rec = IterationRecord(
            iteration=it, compliance=c, material_fraction=float(xp.mean()), target_fraction=goal,
            boundary_change=change, step=move,
        )
        history.append(rec)
        if progress is not None:
            progress(rec)
        done = change <= CHANGE_TOL
        if project and since_beta >= STALL_WINDOW:
            last = [r.compliance for r in history[-STALL_WINDOW:]]
            done = done or max(last) - min(last) <= STALL_TOL * c
        if project and beta < BETA_MAX and (since_beta >= BETA_EVERY or done):
            beta, since_beta = min(2.0 * beta, BETA_MAX), 0
            continue
        if done:
            converged, status = True, "converged"
            break

    # xp, state: the last analysed design, whose compliance the history reports last.
    settings = {
        "penalty": p, "filter_radius": radius, "filter": m.filter, "projection": project, "emin": EMIN,
        "move": MOVE, "change_tol": CHANGE_TOL, "final_beta": beta,
    }
    return finish(problem, model, system, "density", xp, state, history, converged, status, settings,
                  radius, t_start)


def finish(problem, model, system, name, design, state, history, converged, status, settings,
           length, t_start) -> Result:
    """The Result of a density-like method: its own figures for the last analysed cell
    ``design`` and ``state``, plus the crisp outline contoured from it (``length`` scales
    the nodal level set to model units) and that outline's compliance."""
    g = model.grid
    st = model.settings
    goal = problem.goal.material
    phi_out, frac, crisp = crisp_design(model, system, design, goal, st.ersatz, length)
    common = {
        "method": name, "goal_material": goal, "iterations": st.iterations, "pads": st.pads,
        "pad_radius": st.pad_radius, "ersatz": st.ersatz, "solver": st.solver,
    }
    return build_result(
        problem, model, system, name,
        outline=outline_from_levelset(phi_out, g, domain_polygon(problem)), phi=phi_out, cell_design=design,
        state=state, material_fraction=frac.mean(), history=history, converged=converged, status=status,
        settings={**common, **settings}, t_start=t_start, crisp_compliance=crisp.compliance,
    )
