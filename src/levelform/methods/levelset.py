"""Minimum compliance by the level-set method on the fixed grid.

Each iteration: analyse the design (ersatz material, cell stiffness from the cut-cell area
fraction), take the strain-energy density as the shape sensitivity, smooth it with a
Helmholtz filter of length ``smoothing``, find the volume multiplier so the predicted
volume meets the current target, move the boundary by upwind Hamilton-Jacobi steps (at
most ``step`` length units), clamp keep regions, reinitialize by fast marching, and now and
then open holes where the topological derivative says material does least work.
See docs/method.md for the reasoning behind each choice.
"""
from __future__ import annotations

import math
import time

import numpy as np
from scipy.optimize import brentq

from ..analysis import PlateSystem
from ..geometry import domain_polygon, fabrication_report, outline_from_levelset
from ..grid import build_model, load_path_intact
from ..levelset import LevelSetGrid, perforated_start
from ..spec import IterationRecord, Problem, Result

SHRINK, GROW, FLOOR = 0.6, 1.1, 0.1  # step control: on a compliance rise, otherwise, least step
CONVERGE_TOL, CONVERGE_WINDOW = 1e-3, 5
VOLUME_TOL = 0.005  # relative to the goal
MORPH_AFTER = 12  # fabrication filter from this many iterations after the volume reached the goal
# (after the last hole seeding, which ends 10 iterations after it)
SEED_EVERY, SEED_AREA = 5, 0.02  # hole seeding period (iterations), area opened per event


def _initial_phi(model, ls: LevelSetGrid, X, Y, settings) -> np.ndarray:
    g = model.grid
    if settings.initial_holes:
        s = settings.hole_spacing
        W, H = g.nx * g.h, g.ny * g.h
        origin = (g.x0 + 0.5 * (W - s * max(1, round(W / s))), g.y0 + 0.5 * (H - s * max(1, round(H / s))))
        phi = perforated_start(X, Y, s, 0.25 * s, origin)
    else:
        phi = np.full(X.shape, -10.0 * g.h)
    phi = ls.clamp(phi, model.solid_sdf, model.empty_sdf)
    return ls.reinitialize(phi)


def _seed_holes(phi, ls, model, g_nodes, lam, radius, spacing, X, Y):
    """Open small round holes at the cells deep in material where the topological
    derivative is below the volume multiplier (a hole there costs less stiffness than
    the material is worth); at most SEED_AREA of the domain per call."""
    a = ls.node_active
    deep = a & (phi < -(radius + 2.0 * ls.h)) & (model.solid_sdf > radius + ls.h)
    cand = np.flatnonzero(deep.ravel() & (g_nodes.ravel() < lam))
    if cand.size == 0:
        return phi, 0
    order = cand[np.argsort(g_nodes.ravel()[cand], kind="stable")]
    area_cap = SEED_AREA * model.n_cells * ls.h**2
    n_max = max(1, int(area_cap / (math.pi * radius**2)))
    xs, ys = X.ravel(), Y.ravel()
    chosen: list[int] = []
    min_gap2 = (0.5 * spacing) ** 2
    for k in order:
        if all((xs[k] - xs[c]) ** 2 + (ys[k] - ys[c]) ** 2 >= min_gap2 for c in chosen):
            chosen.append(int(k))
            if len(chosen) >= n_max:
                break
    out = phi.copy()
    for c in chosen:
        out = np.maximum(out, radius - np.hypot(X - xs[c], Y - ys[c]))
    return out, len(chosen)


def _fabrication_filter(phi, ls, model, fab):
    """Honour the fabrication limits on the level set: a closing by min_hole / 2 fills
    smaller holes, then an opening by min_member / 2 removes thinner members; keep regions
    win. An opening that would cut every load path is skipped this time (the boundary
    update thickens the member next)."""
    if fab.min_hole:
        phi = ls.reinitialize(ls.clamp(ls.close(phi, 0.5 * fab.min_hole), model.solid_sdf, model.empty_sdf))
    if fab.min_member:
        opened = ls.reinitialize(ls.clamp(ls.open(phi, 0.5 * fab.min_member), model.solid_sdf, model.empty_sdf))
        if load_path_intact(model, opened):
            phi = opened
    return phi


def run(problem: Problem, progress=None) -> Result:
    t_start = time.perf_counter()
    model = build_model(problem)
    st = model.settings
    g = model.grid
    h = g.h
    mat = problem.material
    system = PlateSystem(model, mat.E, mat.nu, mat.thickness)
    ls = LevelSetGrid(model.node_active, model.cell_nodes, h, st.smoothing)
    X, Y = model.node_xy()
    goal = problem.goal.material
    a = model.node_active

    phi = _initial_phi(model, ls, X, Y, st)
    frac = ls.fractions(phi)
    target = float(frac.mean())
    step = st.step
    hole_radius = max(0.6 * st.smoothing, 1.5 * h)
    history: list[IterationRecord] = []
    compliances: list[float] = []
    last_seed = -10**9
    goal_reached_at = None
    converged = False
    status = "iteration limit reached"
    state = None
    prev_target = None
    prev_frac = None
    fab = problem.fabrication
    morph = bool(fab.min_member or fab.min_hole)
    lost = 0.0  # material the last fabrication filter removed, made up by the next update

    for it in range(1, st.iterations + 1):
        scale = st.ersatz + (1.0 - st.ersatz) * frac
        state = system.analyse(scale)
        c = state.compliance
        vol = float(frac.mean())
        if compliances and prev_target is not None and abs(prev_target - goal) < 1e-12 and abs(target - goal) < 1e-12:
            step = max(step * SHRINK, FLOOR * st.step) if c > compliances[-1] else min(step * GROW, st.step)
        # Area fraction of the domain that changed between the previous design and this one.
        change = 0.0 if prev_frac is None else float(np.abs(frac - prev_frac).mean())
        compliances.append(c)
        rec = IterationRecord(
            iteration=it, compliance=c, material_fraction=vol, target_fraction=target,
            boundary_change=change, step=step,
        )
        history.append(rec)
        if progress is not None:
            progress(rec)

        if (
            it > CONVERGE_WINDOW
            and abs(target - goal) < 1e-12
            and abs(vol - goal) <= VOLUME_TOL * goal
            and it - last_seed > CONVERGE_WINDOW
            and (not morph or (goal_reached_at is not None and it > goal_reached_at + MORPH_AFTER + CONVERGE_WINDOW))
            and max(abs(c - x) for x in compliances[-CONVERGE_WINDOW - 1 : -1]) < CONVERGE_TOL * c
        ):
            converged = True
            status = "converged"
            break
        if it == st.iterations:
            break

        # Volume target moves toward the goal by volume_step per iteration.
        prev_target = target
        if target > goal:
            target = max(goal, target - st.volume_step)
        else:
            target = min(goal, target + st.volume_step)
        if goal_reached_at is None and abs(target - goal) < 1e-12:
            goal_reached_at = it

        ws = ls.smooth_cells(system.energy_density(state) * scale)
        band = a & (np.abs(phi) <= 2.0 * h)
        vals = ws[band] if band.any() else ws[a]
        vscale = float(np.percentile(vals, 95)) or float(ws[a].max()) or 1.0

        lam = _multiplier(phi, ws, vscale, step, target + lost, ls, model)
        seeding_open = goal_reached_at is None or it <= min(goal_reached_at + 10, st.iterations // 2)
        if st.seed_holes and seeding_open and it - last_seed >= SEED_EVERY and it >= SEED_EVERY:
            g_nodes = ls.smooth_cells(system.hole_sensitivity(state))
            # Compliance cost per unit area of removing material at the boundary: the mean
            # solid energy density over the cut cells (to first order the volume multiplier).
            cut = (frac > 0.0) & (frac < 1.0)
            lam_boundary = float(system.energy_density(state)[cut].mean()) if cut.any() else lam
            phi_s, n_new = _seed_holes(phi, ls, model, g_nodes, lam_boundary, hole_radius, st.hole_spacing, X, Y)
            if n_new:
                phi = ls.reinitialize(ls.clamp(phi_s, model.solid_sdf, model.empty_sdf))
                last_seed = it
                lam = _multiplier(phi, ws, vscale, step, target + lost, ls, model)

        speed = np.clip((ws - lam) / vscale, -1.0, 1.0)
        phi = ls.advect(phi, speed, step)
        phi = ls.clamp(phi, model.solid_sdf, model.empty_sdf)
        phi = ls.reinitialize(phi)
        if morph and goal_reached_at is not None and it >= goal_reached_at + MORPH_AFTER:
            before = float(ls.fractions(phi).mean())
            phi = _fabrication_filter(phi, ls, model, fab)
            lost = before - float(ls.fractions(phi).mean())
        prev_frac = frac
        frac = ls.fractions(phi)

    phi_out = np.where(a, phi, np.nan)
    domain = domain_polygon(problem)
    outline = outline_from_levelset(phi_out, g, domain)
    dens = np.full(g.ny * g.nx, np.nan)
    dens[model.cells] = frac
    settings = {"method": "levelset", "goal_material": goal, **st.as_dict(), "solver_used": system.solver.name}
    return Result(
        problem=problem,
        method="levelset",
        outline=outline,
        compliance=float(state.compliance),
        material_fraction=float(frac.mean()),
        iterations=len(history),
        converged=converged,
        status=status,
        seconds=time.perf_counter() - t_start,
        history=tuple(history),
        settings=settings,
        grid=g,
        phi=phi_out,
        density=dens.reshape(g.ny, g.nx),
        case_compliance={n: float(v) for n, v in zip(model.case_names, state.case_compliance)},
        fabrication=fabrication_report(outline, domain, fab),
    )


def _multiplier(phi, ws, vscale, step, target, ls, model) -> float:
    """Volume multiplier whose one-step (linearized) update lands on the target fraction.

    The predicted volume is monotone in the multiplier (the speed is clipped and the
    upwind norms are fixed), so a bracketing root finder needs ~15 cheap evaluations
    instead of re-running the whole sub-stepped update.
    """
    grow, shrink = ls.upwind_norms(phi)
    a = ls.node_active

    def predicted(lam):
        v = np.clip((ws - lam) / vscale, -1.0, 1.0) * a
        trial = phi - step * (np.maximum(v, 0.0) * grow + np.minimum(v, 0.0) * shrink)
        trial = ls.clamp(trial, model.solid_sdf, model.empty_sdf)
        return float(ls.fractions(trial).mean()) - target

    lo = float(ws[a].min()) - vscale
    hi = float(ws[a].max()) + vscale
    f_lo, f_hi = predicted(lo), predicted(hi)
    if f_lo <= 0.0:
        return lo
    if f_hi >= 0.0:
        return hi
    return brentq(predicted, lo, hi, xtol=1e-6 * vscale, rtol=1e-10, maxiter=60)
