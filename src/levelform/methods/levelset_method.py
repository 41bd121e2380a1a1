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

import dataclasses
import math
import time
from dataclasses import dataclass, fields

import numpy as np
from scipy.optimize import brentq

from ..fem.analysis import PlateSystem
from ..fem.model import build_model, load_path_intact
from ..geometry.measure import fabrication_report
from ..geometry.outline import outline_from_levelset
from ..geometry.shapes import domain_polygon
from ..levelset import kernels
from ..levelset.operators import LevelSetGrid, normal_velocity, perforated_start
from ..spec import IterationRecord, Problem, Result
from ..timing import phase
from .finish import build_result

SHRINK, GROW, FLOOR = 0.6, 1.1, 0.1  # step control: on a compliance rise, otherwise, least step
CONVERGE_TOL, CONVERGE_WINDOW = 1e-3, 5
VOLUME_TOL = 0.005  # relative to the goal
CHECKPOINT_EVERY = 5  # iterations between checkpoints
DIVERGE_RISES = 15  # consecutive compliance rises at the goal volume that stop a run ...
DIVERGE_RISE = 0.05  # ... as "diverging" only when the compliance is this far above the best design
LOST_PATH_LIMIT = 30  # consecutive iterations without a load path that stop a run
# The fabrication filter runs after every update, its radii growing with the volume path
# (full once the target is the goal); a design counts as shaped by it this many iterations
# after the target reached the goal.
FILTER_SETTLE = 1
SEED_EVERY, SEED_AREA = 5, 0.02  # hole seeding period (iterations), area opened per event


def _initial_phi(model, ls: LevelSetGrid, X, Y, settings) -> np.ndarray:
    g = model.grid
    if settings.initial_holes:
        s = settings.hole_spacing
        W, H = g.nx * g.h, g.ny * g.h
        origin = (g.x0 + 0.5 * (W - s * max(1, round(W / s))), g.y0 + 0.5 * (H - s * max(1, round(H / s))))
        phi = perforated_start(X, Y, s, 0.25 * s, origin)
    else:
        # Solid everywhere, and "deep" by a length of the domain's size, not of the cell's:
        # hole seeding asks for material deeper than a hole radius, whatever the grid.
        phi = np.full(X.shape, -float(np.hypot(g.nx, g.ny)) * g.h)
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
    # A disc's distance field can only win within radius + max depth of the material of a
    # node (farther out radius - distance is below every phi): a window, not the grid.
    depth = max(0.0, float(-phi[a].min()))
    k = int(math.ceil((radius + depth) / ls.h)) + 1
    nx1 = phi.shape[1]
    for c in chosen:
        j, i = divmod(c, nx1)
        win = (slice(max(0, j - k), j + k + 1), slice(max(0, i - k), i + k + 1))
        out[win] = np.maximum(out[win], radius - np.hypot(X[win] - xs[c], Y[win] - ys[c]))
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


@dataclass
class _Loop:
    """Everything that carries from one iteration to the next; saved in checkpoints so a
    resumed run continues bit for bit."""

    it: int  # the next iteration to analyse
    phi: np.ndarray
    target: float
    step: float
    prev_target: float  # NaN before the first update
    prev_frac: np.ndarray  # empty before the first update
    history: list
    last_seed: int
    goal_reached_at: int  # -1 until the target reaches the goal
    lost: float
    rises: int  # consecutive compliance rises at the goal volume
    cut: int = 0  # consecutive iterations without a load path
    best_it: int = -1  # iteration of the best feasible design so far, -1 if none
    best_c: float = math.inf  # its compliance
    best_phi: np.ndarray = None  # its level set

    def to_arrays(self) -> dict:
        hist = np.array([[getattr(r, f.name) for f in fields(IterationRecord)] for r in self.history], float)
        return {
            "it": np.int64(self.it), "phi": self.phi, "target": np.float64(self.target),
            "step": np.float64(self.step), "prev_target": np.float64(self.prev_target),
            "prev_frac": self.prev_frac, "history": hist.reshape(-1, len(fields(IterationRecord))),
            "last_seed": np.int64(self.last_seed), "goal_reached_at": np.int64(self.goal_reached_at),
            "lost": np.float64(self.lost), "rises": np.int64(self.rises), "cut": np.int64(self.cut),
            "best_it": np.int64(self.best_it), "best_c": np.float64(self.best_c),
            "best_phi": np.zeros((0, 0)) if self.best_phi is None else self.best_phi,
        }

    @classmethod
    def from_arrays(cls, d) -> "_Loop":
        names = [f.name for f in fields(IterationRecord)]
        history = [
            IterationRecord(**{k: (int(v) if k == "iteration" else float(v)) for k, v in zip(names, row)})
            for row in np.asarray(d["history"])
        ]
        return cls(
            it=int(d["it"]), phi=np.array(d["phi"], float), target=float(d["target"]), step=float(d["step"]),
            prev_target=float(d["prev_target"]), prev_frac=np.array(d["prev_frac"], float), history=history,
            last_seed=int(d["last_seed"]), goal_reached_at=int(d["goal_reached_at"]), lost=float(d["lost"]),
            rises=int(d["rises"]), cut=int(d["cut"]),
            best_it=int(d["best_it"]), best_c=float(d["best_c"]),
            best_phi=None if int(d["best_it"]) < 0 else np.array(d["best_phi"], float),
        )


def run(problem: Problem, progress=None, checkpoint=None, clock=None) -> Result:
    """Optimize ``problem``. ``progress(record)`` is called after every analysis;
    ``checkpoint`` (optional) has ``load() -> dict | None`` and ``save(dict)`` and is used to
    resume and to save the loop state every CHECKPOINT_EVERY iterations. Ctrl-C returns the
    last analysed design with status "interrupted". ``clock`` (a timing.PhaseClock, for
    benchmarks) receives the time of each part of every iteration."""
    t_start = time.perf_counter()
    model = build_model(problem)
    st = model.settings
    g = model.grid
    h = g.h
    system = PlateSystem(model)
    system.clock = clock
    ls = LevelSetGrid(model.node_active, model.cell_nodes, h, st.smoothing)
    X, Y = model.node_xy()
    goal = problem.goal.material
    fab = problem.fabrication
    morph = bool(fab.min_member or fab.min_hole)
    hole_radius = _hole_radius(st, h)
    if fab.min_hole:  # a seeded hole survives the closing by min_hole / 2 (full reinitialization then)
        hole_radius = max(hole_radius, 0.6 * fab.min_hole)
    ctx = _Context(model=model, ls=ls, system=system, settings=st, goal=goal, morph=morph, fab=fab,
                   hole_radius=hole_radius, X=X, Y=Y, domain=domain_polygon(problem), clock=clock)

    saved = checkpoint.load() if checkpoint is not None else None
    if saved is not None:
        S = _Loop.from_arrays(saved)
    else:
        phi0 = _initial_phi(model, ls, X, Y, st)
        S = _Loop(it=1, phi=phi0, target=float(ls.fractions(phi0).mean()), step=st.step, prev_target=math.nan,
                  prev_frac=np.zeros(0), history=[], last_seed=-10**9, goal_reached_at=-1, lost=0.0, rises=0)
    status = "iteration limit reached"
    converged = False
    last = None  # (phi, frac, state) of the last analysed design
    best = None  # (phi, frac, state) of the best feasible design, when analysed in this process

    try:
        while S.it <= st.iterations:
            it = S.it
            if checkpoint is not None and (it - 1) % CHECKPOINT_EVERY == 0 and it > 1:
                with phase(clock, "checkpoint"):
                    checkpoint.save(S.to_arrays())
            with phase(clock, "fractions"):
                frac, scale = _design_scale(S.phi, ls, st)
            try:
                state = system.analyse(scale)
            except FloatingPointError as exc:
                status = f"numerical failure: {exc}"
                break
            with phase(clock, "load path"):
                intact = load_path_intact(model, S.phi)
            S.cut = 0 if intact else S.cut + 1
            last = (S.phi.copy(), frac, state)
            c = state.compliance
            vol = float(frac.mean())
            if c < S.best_c and intact and _feasible(S, it, vol, ctx):
                best = last
                S.best_it, S.best_c, S.best_phi = it, float(c), best[0]
            at_goal = abs(S.prev_target - goal) < 1e-12 and abs(S.target - goal) < 1e-12
            previous = S.history[-1].compliance if S.history else None
            if previous is not None and at_goal:
                rose = c > previous
                S.step = max(S.step * SHRINK, FLOOR * st.step) if rose else min(S.step * GROW, st.step)
                S.rises = S.rises + 1 if rose else 0
            change = 0.0 if S.prev_frac.size == 0 else float(np.abs(frac - S.prev_frac).mean())
            rec = IterationRecord(iteration=it, compliance=c, material_fraction=vol, target_fraction=S.target,
                                  boundary_change=change, step=S.step)
            S.history.append(rec)
            if progress is not None:
                progress(rec)
            recent = [r.compliance for r in S.history[-CONVERGE_WINDOW - 1 : -1]]
            if (
                it > CONVERGE_WINDOW
                and abs(S.target - goal) < 1e-12
                and abs(vol - goal) <= VOLUME_TOL * goal
                and it - S.last_seed > CONVERGE_WINDOW
                and (not morph or (S.goal_reached_at >= 0 and it > S.goal_reached_at + FILTER_SETTLE + CONVERGE_WINDOW))
                and max(abs(c - x) for x in recent) < CONVERGE_TOL * c
            ):
                converged, status = True, "converged"
                break
            if S.cut >= LOST_PATH_LIMIT:  # a passing cut can heal; a lasting one ends the run
                status = f"load path lost: no material has connected a load to a support for {S.cut} iterations"
                break
            if S.rises >= DIVERGE_RISES:
                if S.best_it >= 0 and c <= (1.0 + DIVERGE_RISE) * S.best_c:
                    # a slow creep, not a divergence: the run ends with its best design
                    converged, status = True, "converged"
                else:
                    status = (f"diverging: compliance rose {S.rises} iterations in a row at the goal volume"
                              + (f", to {c / S.best_c - 1.0:.1%} above the best design" if S.best_it >= 0 else ""))
                break
            if it == st.iterations:
                break
            _update(S, ctx, state, frac, scale, it)
            S.it += 1
            if clock is not None:
                clock.tick()
    except KeyboardInterrupt:
        if last is None:
            raise
        status = "interrupted"

    if last is None:
        raise FloatingPointError(status)
    if status == "interrupted" or S.best_it < 0:
        # the current design: what a resumed run continues from, or no feasible one was reached
        phi, frac, state = last
        exported = len(S.history)
        if S.cut and not status.startswith("load path lost"):
            converged, status = False, "load path lost: the final design connects no load to a support"
    else:  # the best feasible design the run reached (at the goal volume, load path intact)
        if best is None:  # found before a resume: analyse it again
            best = _analyse(S.best_phi, ls, system, st)
        phi, frac, state = best
        exported = S.best_it
    phi_out, outline = _outline(phi, ctx)
    domain = ctx.domain
    crisp = _crisp_compliance(frac, system)
    return build_result(
        problem, model, system, "levelset",
        outline=outline, phi=phi_out, cell_design=frac, state=state, material_fraction=frac.mean(),
        history=S.history, converged=converged, status=status,
        settings={"method": "levelset", "goal_material": goal, **st.as_dict()}, t_start=t_start,
        fabrication=fabrication_report(outline, domain, fab), exported_iteration=exported,
        crisp_compliance=crisp,
    )


def _crisp_compliance(frac, system) -> float:
    """Compliance of the exported outline on the run's grid with the void as soft as the
    common analysis of ``compare`` makes it (1e-6 instead of the loop's ersatz): each cell's
    stiffness scaled by its area fraction ``frac`` (the marching-squares areas of the
    exported level set, whose zero contour is the outline). The loop's ersatz lets the void
    carry a little load; on designs with much void that made the run's figure up to 6 %
    stiffer than the body-fitted check of the same outline (docs/method.md)."""
    from ..comparison import ERSATZ

    return float(system.analyse(ERSATZ + (1.0 - ERSATZ) * frac).compliance)


def _growing_limits(fab, start: float, target: float, goal: float):
    """The fabrication limits scaled by the share of the volume path done: from 0 at the
    start fraction to the full limits once the target is the goal."""
    share = 1.0 if start <= goal else min(1.0, max(0.0, (start - target) / (start - goal)))
    return dataclasses.replace(fab, min_member=fab.min_member and share * fab.min_member,
                               min_hole=fab.min_hole and share * fab.min_hole)


def _feasible(S, it: int, vol: float, ctx) -> bool:
    """Whether the design analysed at iteration ``it`` may be exported: the volume target
    is the goal and the volume within VOLUME_TOL of it, and where fabrication limits are
    asked for, the fabrication filter has shaped it and its outline meets them."""
    goal = ctx.goal
    if abs(S.target - goal) >= 1e-12 or abs(vol - goal) > VOLUME_TOL * goal:
        return False
    if not ctx.morph:
        return True
    if S.goal_reached_at < 0 or it <= S.goal_reached_at + FILTER_SETTLE:
        return False
    limits = fabrication_report(_outline(S.phi, ctx)[1], ctx.domain, ctx.fab).get("limits", {})
    return all(lim.get("met", True) for lim in limits.values())


def _outline(phi, ctx):
    """(phi_out, outline) of a loop level set, as the run exports them. The loop's phi is
    a distance only within the reinitialization band; phi_out is one everywhere (the band,
    and so the outline, unchanged), NaN off the domain."""
    ls = ctx.ls
    phi_out = np.where(ls.node_active, ls.extend_distance(phi, reinit_band(ctx.settings, ls.h)), np.nan)
    return phi_out, outline_from_levelset(phi_out, ctx.model.grid, ctx.domain)


def _design_scale(phi, ls, st):
    """(area fractions, cell stiffness scale) of a level set: the ersatz material below
    the stiffness fractions."""
    frac, stiff = ls.fractions_and_stiffness(phi)
    return frac, st.ersatz + (1.0 - st.ersatz) * stiff


def _analyse(phi, ls, system, st):
    """(phi, fractions, state) of a level set, analysed as the loop does."""
    frac, scale = _design_scale(phi, ls, st)
    return phi, frac, system.analyse(scale)


def _hole_radius(st, h: float) -> float:
    """Radius of a seeded hole: max(0.6 smoothing, 1.5 cells)."""
    return max(0.6 * st.smoothing, 1.5 * h)


def reinit_band(st, h: float) -> float:
    """Width of the band the loop's reinitialization marches (a length).

    The next update moves the boundary by at most ``step`` (|V| <= 1) in n upwind sub-steps
    (dt |V| / h <= 1/2); the value a node ends with is a weighted mean of values upwind of
    it, centred ``step`` away and spread over about sqrt(n) / 2 cells, so every node that
    can end near the zero contour draws on values within step + 3 sqrt(n) h of the old
    contour (six spreads: weights beyond are below 1e-9). Hole seeding asks for material
    deeper than a hole radius plus two cells; the band covers both, with four cells to
    spare. (The volume control needs no more: a node at +-band keeps its sign through a
    linearized step, its upwind norms being zero.)"""
    n = max(1, math.ceil(st.step / (0.5 * h)))
    hole = _hole_radius(st, h) + 2.0 * h
    return max(st.step + 3.0 * math.sqrt(n) * h, hole) + 4.0 * h


@dataclass(frozen=True)
class _Context:
    """What stays the same through a run: the model and its operators, the settings."""

    model: object  # fem.model.Model
    ls: LevelSetGrid
    system: PlateSystem
    settings: object  # fem.model.Settings
    goal: float
    morph: bool  # fabrication limits asked for
    fab: object  # spec.Fabrication
    hole_radius: float
    X: np.ndarray  # node coordinates
    Y: np.ndarray
    domain: object  # the domain polygon (shapely)
    clock: object = None  # timing.PhaseClock or None


def _update(S, ctx: _Context, state, frac, scale, it):
    """Move the design of iteration ``it`` to the next one (in place on ``S``)."""
    model, ls, system, st, goal = ctx.model, ctx.ls, ctx.system, ctx.settings, ctx.goal
    morph, fab, clock = ctx.morph, ctx.fab, ctx.clock
    a = model.node_active
    h = ls.h
    phi = S.phi
    # Volume target moves toward the goal by volume_step per iteration.
    S.prev_target = S.target
    S.target = max(goal, S.target - st.volume_step) if S.target > goal else min(goal, S.target + st.volume_step)
    if S.goal_reached_at < 0 and abs(S.target - goal) < 1e-12:
        S.goal_reached_at = it

    with phase(clock, "sensitivity"):
        density = system.energy_density(state) * scale
    with phase(clock, "smoothing"):
        ws = ls.smooth_cells(density)
    with phase(clock, "volume control"):
        band = a & (np.abs(phi) <= 2.0 * h)
        vals = ws[band] if band.any() else ws[a]
        vscale = float(np.percentile(vals, 95)) or float(ws[a].max()) or 1.0
        lam = _multiplier(phi, ws, vscale, S.step, S.target + S.lost, ls, model, now=frac)
    seeding_open = S.goal_reached_at < 0 or it <= min(S.goal_reached_at + 10, st.iterations // 2)
    if st.seed_holes and seeding_open and it - S.last_seed >= SEED_EVERY and it >= SEED_EVERY:
        phi, lam = _seed_step(S, ctx, state, frac, it, ws, vscale, phi, lam)
    with phase(clock, "update"):
        speed = normal_velocity(ws, lam, vscale)
        phi = ls.clamp(ls.advect(phi, speed, S.step), model.solid_sdf, model.empty_sdf)
    filtering = morph
    if filtering:  # the limits grow with the volume path, so they never arrive as a shock
        fab = _growing_limits(fab, S.history[0].target_fraction, S.target, goal)
    with phase(clock, "reinitialization"):
        # the fabrication filter offsets phi by up to half the limits: it needs all of it
        phi = ls.reinitialize(phi, band=None if filtering else reinit_band(st, h))
    if filtering:
        with phase(clock, "fabrication filter"):
            before = float(ls.fractions(phi).mean())
            phi = _fabrication_filter(phi, ls, model, fab)
            S.lost = before - float(ls.fractions(phi).mean())
    S.prev_frac = frac
    S.phi = phi


def _seed_step(S, ctx: _Context, state, frac, it, ws, vscale, phi, lam):
    """Open new holes where the topological derivative says so; returns (phi, multiplier)."""
    model, ls, system, st, clock = ctx.model, ctx.ls, ctx.system, ctx.settings, ctx.clock
    hole_radius, X, Y = ctx.hole_radius, ctx.X, ctx.Y
    with phase(clock, "hole seeding"):
        g_nodes = ls.smooth_cells(system.hole_sensitivity(state))
        # Compliance cost per unit area of removing material at the boundary: the mean
        # solid energy density over the cut cells (to first order the volume multiplier).
        cut = (frac > 0.0) & (frac < 1.0)
        lam_boundary = float(system.energy_density(state)[cut].mean()) if cut.any() else lam
        phi_s, n_new = _seed_holes(phi, ls, model, g_nodes, lam_boundary, hole_radius, st.hole_spacing, X, Y)
        if n_new:
            # No reinitialization here: the new holes lie deep in material, apart from the
            # boundary and from each other, so the union max(phi, disc) is already a signed
            # distance (the one after the update follows).
            phi = ls.clamp(phi_s, model.solid_sdf, model.empty_sdf)
            S.last_seed = it
            lam = _multiplier(phi, ws, vscale, S.step, S.target + S.lost, ls, model)
    return phi, lam


def _multiplier(phi, ws, vscale, step, target, ls, model, now=None) -> float:
    """Volume multiplier whose one-step (linearized) update lands on the target fraction.

    The predicted volume is monotone in the multiplier (the speed is clipped and the
    upwind norms are fixed), so a bracketing root finder needs ~15 cheap evaluations
    instead of re-running the whole sub-stepped update.
    """
    grow, shrink = ls.upwind_norms(phi)
    a = ls.node_active
    # Only cells near the boundary can change: a node moves by at most step * |grad phi|,
    # so a cell whose corners all lie farther than that (plus a cell diagonal) from the zero
    # level keeps its fraction (0 or 1). Evaluate the band only.
    # grow and shrink are 0 off the domain (no differences there)
    reach = step * float(max(grow.max(initial=0.0), shrink.max(initial=0.0))) + 1.5 * ls.h
    flat = lambda arr: np.ascontiguousarray(arr, dtype=float).ravel()  # noqa: E731
    phi_f, ws_f, grow_f, shrink_f = flat(phi), flat(ws), flat(grow), flat(shrink)
    solid_f, empty_f = flat(model.solid_sdf), flat(model.empty_sdf)
    near = np.empty(ls.cell_nodes.shape[0], bool)
    kernels.near_cells(phi_f, ls.cell_nodes, reach, near)
    band = np.flatnonzero(near)
    now = ls.fractions(phi) if now is None else now  # cell fractions of phi, if known
    fixed_sum = float(now.sum() - now[band].sum())
    n_cells = ls.cell_nodes.shape[0]
    trial = np.empty(phi_f.size)
    partial = np.empty(kernels.n_chunks(band.size))

    def predicted(lam):
        # compiled: the trial node values, clamped, then the areas of the band's cells
        area = kernels.trial_area_sum(float(lam), vscale, step, phi_f, ws_f, grow_f, shrink_f, solid_f, empty_f,
                                      ls.cell_nodes, band, trial, partial)
        return (fixed_sum + area) / n_cells - target

    lo = float(ws[a].min()) - vscale
    hi = float(ws[a].max()) + vscale
    f_lo, f_hi = predicted(lo), predicted(hi)
    if f_lo <= 0.0:
        return lo
    if f_hi >= 0.0:
        return hi
    return brentq(predicted, lo, hi, xtol=1e-6 * vscale, rtol=1e-10, maxiter=60)
