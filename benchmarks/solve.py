"""Linear-solver benchmark on an MBB-type plate (takes many minutes; not a test).

The plate: a 2:1 rectangle, roller along the left edge (symmetry line), roller at the
lower right corner, a unit downward point force at the top left, as in
examples/mbb_half_beam.toml but 2:1. The design is a smooth random field thresholded at
50 % material (ersatz stiffness 1e-3), the same geometry at every grid size, solid within
a few cells of the load and the roller. Every timing is the median of ``--repeat`` runs
in one process; each solver runs in its own process so that its peak memory (ru_maxrss)
is its own. Ratios are taken between numbers of the same run.

    python benchmarks/solve.py                          # 80k, 320k, 1.28M cells
    python benchmarks/solve.py --sizes 400x200,800x400  # chosen grids
    python benchmarks/solve.py --crossover              # direct vs multigrid on small grids
    python benchmarks/solve.py --tolerance              # compliance error vs stopping rule
"""
from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "src"))

from levelform.fem import solvers as fem  # noqa: E402
from levelform.fem.assembly import Assembler
from levelform.fem.elements import element_stiffness  # noqa: E402
from levelform.fem.model import build_model  # noqa: E402
from levelform.fem.multigrid import GridMultigrid, LatticeAssembler  # noqa: E402
from levelform.fem.solvers import DirectSolver  # noqa: E402
from levelform.spec import Domain, Goal, Load, LoadCase, Material, Method, Problem, Support, Units  # noqa: E402

WIDTH, HEIGHT = 120.0, 60.0
ERSATZ = 1e-3
SOLVERS = ("superlu-default", "superlu-mmd", "multigrid", "multigrid-1thread", "multigrid-1e-8", "pyamg")
SKIP_AT_1M = ("superlu-default", "superlu-mmd", "pyamg")  # need > 12 GB or many minutes there


def plate(nx: int) -> Problem:
    h = WIDTH / nx
    return Problem(
        units=Units(), material=Material(E=1.0, nu=0.3, thickness=1.0),
        domain=Domain(outline=((0, 0), (WIDTH, 0), (WIDTH, HEIGHT), (0, HEIGHT)), holes=(), cell=h),
        supports=(Support("segment", ((0, 0), (0, HEIGHT)), "x", pad=False),
                  Support("point", (WIDTH, 0), "y", pad=False)),
        loads=(Load("point", (0.0, HEIGHT), (0.0, -1.0)),), cases=(LoadCase("main"),), regions=(),
        goal=Goal(0.5), method=Method(pads=False, solver="direct"), name="solver benchmark",
    )


def random_field(model, seed: int = 3) -> np.ndarray:
    """A smooth random field at the cell centres: 60 random plane waves of wavelength about
    a sixth of the height. Resolution independent, so every grid gets the same design."""
    g = model.grid
    j, i = np.divmod(model.cells, g.nx)
    x, y = g.x0 + g.h * (i + 0.5), g.y0 + g.h * (j + 0.5)
    rng = np.random.default_rng(seed)
    k = 2 * np.pi / (HEIGHT / 6.0) * rng.uniform(0.7, 1.3, 60)
    ang, ph = rng.uniform(0, np.pi, 60), rng.uniform(0, 2 * np.pi, 60)
    f = np.zeros(x.size)
    for kk, a, p in zip(k, ang, ph):
        f += np.cos(kk * (x * np.cos(a) + y * np.sin(a)) + p)
    near = (np.hypot(x, y - HEIGHT) < 0.04 * HEIGHT) | (np.hypot(x - WIDTH, y) < 0.04 * HEIGHT)
    f[near] = f.max() + 1.0
    return f


def design(field: np.ndarray, material: float) -> np.ndarray:
    return np.where(field > np.quantile(field, 1.0 - material), 1.0, ERSATZ)


def peak_gib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20


def timed(fn, repeat: int):
    out, ts = None, []
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        ts.append(time.perf_counter() - t)
    return out, float(np.median(ts))


def pyamg_solver(K, F, model):
    """pyamg smoothed aggregation with the three rigid-body modes as near-null space (its
    other options at their defaults: measured best of a few here) as a CG preconditioner,
    relative residual 1e-8."""
    import pyamg
    import scipy.sparse.linalg as spla

    X, Y = model.node_xy()
    act = np.flatnonzero(model.node_active.ravel())
    x, y = X.ravel()[act], Y.ravel()[act]
    B = np.zeros((model.n_dof, 3))
    B[0::2, 0] = 1.0
    B[1::2, 1] = 1.0
    B[0::2, 2], B[1::2, 2] = -y, x
    B = B[model.free >= 0]
    ml = pyamg.smoothed_aggregation_solver(K.tocsr(), B=B, symmetry="hermitian")
    x, info = spla.cg(K, F[:, 0], rtol=1e-8, maxiter=2000, M=ml.aspreconditioner(cycle="V"))
    return x[:, None]


def run_one(nx: int, ny: int, solver: str, repeat: int) -> dict:
    """Everything for one grid and one solver; returns plain numbers."""
    res = {"nx": nx, "ny": ny, "solver": solver}
    t = time.perf_counter()
    model = build_model(plate(nx))
    res["build_s"] = time.perf_counter() - t
    res["cells"], res["free"] = model.n_cells, model.n_free
    KE = element_stiffness(1.0, 0.3, 1.0)
    field = random_field(model)
    s1, s2 = design(field, 0.50), design(field, 0.49)  # s2: the boundary moved (1 % of cells)
    t = time.perf_counter()
    asm = LatticeAssembler(model, KE)
    res["assembly_setup_s"] = time.perf_counter() - t
    K1, res["assembly_s"] = timed(lambda: asm.matrix(s1), repeat)
    K2 = asm.matrix(s2)
    F = model.forces
    if solver == "superlu-default":
        import scipy.sparse.linalg as spla

        U, res["solve_s"] = timed(lambda: spla.spsolve(K1, F)[:, None], repeat)  # COLAMD, general mode
    elif solver == "superlu-mmd":
        U, res["solve_s"] = timed(lambda: DirectSolver().solve(K1, F), repeat)
        if nx * ny <= 400 * 200:  # the old assembler, for comparison (its set-up is the cost)
            t = time.perf_counter()
            Assembler(model.edofs, model.free, model.n_free, KE)
            res["old_assembly_setup_s"] = time.perf_counter() - t
    elif solver == "pyamg":
        try:
            U, res["solve_s"] = timed(lambda: pyamg_solver(K1, F, model), repeat)
        except ImportError:
            return {**res, "skipped": "pyamg not installed"}
    else:
        kw = {"rtol": fem.MULTIGRID_RTOL, "ctol": fem.MULTIGRID_CTOL, "coarse_size": fem.MULTIGRID_COARSE_SIZE}
        if solver == "multigrid-1e-8":
            kw.update(rtol=1e-8, ctol=0.0)
        if solver == "multigrid-1thread":
            kw["threads"] = 1
        t = time.perf_counter()
        mg = GridMultigrid(model, KE, **kw)
        res["mg_init_s"] = time.perf_counter() - t
        res["levels"] = [L.n_free for L in mg.lattices]
        U, res["solve_s"] = timed(lambda: mg.solve(K1, F, scale=s1), repeat)
        res["mg_setup_s"], res["iterations"] = mg.info.setup_seconds, mg.info.iterations[0]
        _, res["warm_s"] = timed(lambda: mg.solve(K2, F, x0=U, scale=s2), repeat)
        res["warm_iterations"] = mg.info.iterations[0]
        res["cold2_s"] = timed(lambda: mg.solve(K2, F, scale=s2), 1)[1]
        res["cold2_iterations"] = mg.info.iterations[0]
    res["compliance"] = float(F[:, 0] @ U[:, 0])
    res["peak_gib"] = peak_gib()
    return res


def subprocess_one(nx, ny, solver, repeat) -> dict:
    cmd = [sys.executable, __file__, "--one", f"{nx}x{ny}", "--solver", solver, "--repeat", str(repeat)]
    p = subprocess.run(cmd, capture_output=True, text=True)
    line = [s for s in p.stdout.splitlines() if s.startswith("{")]
    if p.returncode != 0 or not line:
        return {"nx": nx, "ny": ny, "solver": solver, "skipped": f"failed: {p.stderr.strip()[-300:]}"}
    return json.loads(line[-1])


def main_table(sizes, repeat):
    rows = []
    for nx, ny in sizes:
        for solver in SOLVERS:
            if nx * ny >= 1_000_000 and solver in SKIP_AT_1M:
                rows.append({"nx": nx, "ny": ny, "solver": solver, "skipped": "needs > 12 GB / many minutes"})
                continue
            rep = 1 if solver in ("superlu-default", "superlu-mmd", "pyamg") and nx * ny > 100_000 else repeat
            r = subprocess_one(nx, ny, solver, rep)
            rows.append(r)
            print(json.dumps(r), flush=True)
    print()
    print("| cells | free dofs | solver | solve s | iterations | warm s (its) | peak GiB | speed-up vs SuperLU default |")
    print("|---|---|---|---|---|---|---|---|")
    for nx, ny in sizes:
        here = [r for r in rows if r["nx"] == nx and r["ny"] == ny]
        base = next((r.get("solve_s") for r in here if r["solver"] == "superlu-default" and "solve_s" in r), None)
        for r in here:
            if "skipped" in r:
                print(f"| {nx * ny:,} | | {r['solver']} | skipped: {r['skipped'][:60]} | | | | |")
                continue
            sp_ = f"{base / r['solve_s']:.1f}x" if base else "-"
            warm = f"{r['warm_s']:.2f} ({r['warm_iterations']})" if "warm_s" in r else "-"
            print(f"| {r['cells']:,} | {r['free']:,} | {r['solver']} | {r['solve_s']:.2f} | {r.get('iterations', '-')} "
                  f"| {warm} | {r['peak_gib']:.2f} | {sp_} |")
    print()
    for nx, ny in sizes:
        r = next((r for r in rows if r["nx"] == nx and r["ny"] == ny and "assembly_s" in r), None)
        if r:
            old = next((q.get("old_assembly_setup_s") for q in rows if q["nx"] == nx and "old_assembly_setup_s" in q), None)
            print(f"{nx * ny:,} cells: build_model {r['build_s']:.2f} s, lattice assembly set-up "
                  f"{r['assembly_setup_s']:.2f} s, per matrix {r['assembly_s']:.3f} s"
                  + (f", old fem.Assembler set-up {old:.2f} s" if old else ""))
    mg = {(r["nx"], r["ny"]): r for r in rows if r["solver"] == "multigrid" and "solve_s" in r}
    if len(mg) >= 2:
        (a, ra), (b, rb) = min(mg.items()), max(mg.items())
        expo = np.log(rb["solve_s"] / ra["solve_s"]) / np.log(rb["cells"] / ra["cells"])
        expo_w = np.log(rb["warm_s"] / ra["warm_s"]) / np.log(rb["cells"] / ra["cells"])
        print(f"multigrid solve time grows like cells^{expo:.2f} (cold), cells^{expo_w:.2f} (warm) "
              f"from {ra['cells']:,} to {rb['cells']:,} cells")


def crossover(repeat):
    """Direct (SuperLU MMD; PARDISO where installed, its second solve of the same pattern)
    against multigrid with the library defaults, on small grids."""
    print("| cells | free dofs | direct s | PARDISO s | multigrid cold s (its) | multigrid warm s (its) |")
    print("|---|---|---|---|---|---|")
    KE = element_stiffness(1.0, 0.3, 1.0)
    for nx in (60, 80, 100, 120, 141, 170, 200, 283, 400):
        model = build_model(plate(nx))
        field = random_field(model)
        s1, s2 = design(field, 0.50), design(field, 0.49)
        asm = LatticeAssembler(model, KE)
        K1, K2 = asm.matrix(s1), asm.matrix(s2)
        F = model.forces
        _, td = timed(lambda: DirectSolver().solve(K2, F), repeat)
        tp = "-"
        if fem.optional_solver_available("pardiso"):
            ps = fem.PardisoSolver()
            ps.solve(K1, F)  # the symbolic analysis, once
            tp = f"{timed(lambda: ps.solve(K2, F), repeat)[1]:.3f}"
        mg = GridMultigrid(model, KE, rtol=fem.MULTIGRID_RTOL, ctol=fem.MULTIGRID_CTOL,
                           coarse_size=fem.MULTIGRID_COARSE_SIZE)
        if len(mg.lattices) == 1:  # below the coarse size multigrid would be the direct solve
            mg = GridMultigrid(model, KE, rtol=fem.MULTIGRID_RTOL, ctol=fem.MULTIGRID_CTOL,
                               coarse_size=model.n_free // 4)
        U1 = mg.solve(K1, F, scale=s1)
        _, tc = timed(lambda: mg.solve(K2, F, scale=s2), repeat)
        ic = mg.info.iterations[0]
        _, tw = timed(lambda: mg.solve(K2, F, x0=U1, scale=s2), repeat)
        print(f"| {model.n_cells:,} | {model.n_free:,} | {td:.3f} | {tp} | {tc:.3f} ({ic}) | {tw:.3f} ({mg.info.iterations[0]}) |",
              flush=True)


def tolerance(sizes):
    """Compliance and cell-energy errors of the multigrid solve against a refined direct
    solve, along a sequence of designs whose boundary moves (material 60 % -> 50 %), each
    warm-started from the previous solution, for several stopping rules."""
    import scipy.sparse.linalg as spla

    KE = element_stiffness(1.0, 0.3, 1.0)
    for nx, ny in sizes:
        model = build_model(plate(nx))
        field = random_field(model)
        designs = [design(field, v) for v in np.linspace(0.60, 0.50, 6)]
        asm = LatticeAssembler(model, KE)
        F = model.forces[:, 0]
        fe = model.free[model.edofs]
        idx = np.where(fe >= 0, fe, -1)

        def energies(u, s):
            ue = np.append(u, 0.0)[idx]
            return s * np.einsum("ei,ij,ej->e", ue, KE, ue)  # the cell's share of the compliance

        refs = []
        for s in designs:
            K = asm.matrix(s)
            lu = spla.splu(K, permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0, options={"SymmetricMode": True})
            u = lu.solve(F)
            for _ in range(2):  # iterative refinement: the reference must beat the tolerances
                u += lu.solve(F - K @ u)
            refs.append((F @ u, energies(u, s)))
        print(f"\n{model.n_cells:,} cells, {model.n_free:,} free dofs, 6 designs (60 % -> 50 % material)")
        print("| residual tol | compliance tol | start | max compliance error | max cell-energy error | iterations |")
        print("|---|---|---|---|---|---|")
        for rtol, ctol in ((1e-2, 0), (1e-3, 0), (1e-4, 0), (1e-6, 0), (1e-8, 0), (1e-2, 1e-7), (1e-3, 1e-7), (1e-4, 1e-7)):
            for warm in (False, True):
                mg = GridMultigrid(model, KE, rtol=rtol, ctol=ctol, coarse_size=fem.MULTIGRID_COARSE_SIZE)
                x, ec, ee, its = None, 0.0, 0.0, []
                for s, (c, en) in zip(designs, refs):
                    x = mg.solve(asm.matrix(s), F, x0=x if warm else None, scale=s)
                    ec = max(ec, abs(F @ x - c) / c)
                    # relative to the 95th percentile: the scale the level-set velocity uses
                    ee = max(ee, float(np.abs(energies(x, s) - en).max() / np.percentile(en, 95)))
                    its.append(mg.info.iterations[0])
                print(f"| {rtol:g} | {ctol:g} | {'warm' if warm else 'zero'} | {ec:.1e} | {ee:.1e} | "
                      f"{' '.join(map(str, its))} |", flush=True)


def parse_sizes(text):
    return [tuple(int(v) for v in s.split("x")) for s in text.split(",")]


if __name__ == "__main__":
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="400x200,800x400,1600x800")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--crossover", action="store_true")
    ap.add_argument("--tolerance", action="store_true")
    ap.add_argument("--one", help=argparse.SUPPRESS)
    ap.add_argument("--solver", help=argparse.SUPPRESS)
    a = ap.parse_args()
    if a.one:
        nx, ny = parse_sizes(a.one)[0]
        print(json.dumps(run_one(nx, ny, a.solver, a.repeat)))
    elif a.crossover:
        crossover(a.repeat)
    elif a.tolerance:
        tolerance(parse_sizes(a.sizes if a.sizes != "400x200,800x400,1600x800" else "200x100,400x200"))
    else:
        main_table(parse_sizes(a.sizes), a.repeat)
