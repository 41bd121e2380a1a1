"""Where a level-set iteration spends its time, from 80k to 1.28M cells (minutes; not a test).

For each grid size, in a process of its own (so that its peak memory is its own), runs
``--iterations`` iterations of the level-set method on the 2:1 MBB-type plate of
benchmarks/solve.py with the chosen solver, timing every part of every iteration with a
levelform.timing.PhaseClock. The run starts from the perforated design (``initial_holes``),
so that every measured iteration analyses a design with many members and holes (from a
solid start the first iterations analyse a nearly uniform plate, which multigrid solves
in a few iterations: unrepresentative). The first ``--skip`` iterations (cold start of
the solver) are left out; the phases are averaged over the rest (hole seeding and
checkpoints happen in some iterations only; means add up to the mean iteration), and the
ratio of each iteration to its own solve is reported as a median with its range (steadier
on a shared machine). Then, in another process, scipy's default sparse solve
(``scipy.sparse.linalg.spsolve``: SuperLU, COLAMD ordering) solves the system of the last
analysed design of that run, for the speed-up "in the same run". Prints one table row per
size and the fitted exponent of the per-iteration time against the number of cells.

    python benchmarks/iteration.py                              # 80k, 320k, 1.28M cells
    python benchmarks/iteration.py --sizes 400x200 --iterations 10 --solver direct
    python benchmarks/iteration.py --superlu-max 400000         # skip SuperLU above this
"""
from __future__ import annotations

import argparse
import dataclasses
import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "src"))
sys.path.insert(0, str(ROOT / "benchmarks"))

# Phases of levelform.methods.levelset_method, in loop order; "other" is the rest of the iteration.
PHASES = ("fractions", "assembly", "solve", "sensitivity", "load path", "smoothing", "volume control",
          "hole seeding", "update", "reinitialization", "checkpoint")


def peak_gib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20


def run_size(nx: int, ny: int, iterations: int, skip: int, solver: str, save: str) -> dict:
    from solve import plate

    from levelform.methods import levelset_method as levelset
    from levelform.timing import PhaseClock

    base = plate(nx)
    problem = dataclasses.replace(base, method=dataclasses.replace(base.method, iterations=iterations, solver=solver,
                                                                    initial_holes=True))
    clock = PhaseClock()
    t0 = time.perf_counter()
    first = []
    result = levelset.run(problem, progress=lambda rec: first.append(time.perf_counter()) if not first else None,
                          clock=clock)
    total = time.perf_counter() - t0
    its = clock.iterations[skip:]
    med = {p: float(np.mean([it.get(p, 0.0) for it in its])) for p in PHASES + ("total",)}
    med["other"] = med["total"] - sum(med[p] for p in PHASES)
    # the ratio of each iteration to its own solve: on a shared machine a burst of load
    # slows one iteration's parts together, so the median of these ratios is the steadier
    ratios = [it["total"] / it["solve"] for it in its if it.get("solve")]
    # the system of the last analysed design, for the SuperLU comparison
    from levelform.fem.model import build_model
    from levelform.levelset.operators import LevelSetGrid

    model = build_model(problem)
    ls = LevelSetGrid(model.node_active, model.cell_nodes, model.grid.h, model.settings.smoothing)
    phi = np.where(np.isnan(result.phi), 1.0, result.phi)
    scale = model.settings.ersatz + (1.0 - model.settings.ersatz) * ls.stiffness_fractions(phi)
    np.save(save, scale)
    return {
        "nx": nx, "ny": ny, "cells": nx * ny, "free": int(model.n_free), "solver": result.settings["solver_used"],
        "iterations": len(clock.iterations), "measured": len(its), "run_s": total,
        "setup_s": first[0] - t0 if first else total, "median": med, "peak_gib": peak_gib(),
        "compliance": result.compliance, "ratio_median": float(np.median(ratios)) if ratios else float("nan"),
        "ratio_range": [float(min(ratios)), float(max(ratios))] if ratios else [],
    }


def superlu_size(nx: int, save: str) -> dict:
    import scipy.sparse.linalg as spla
    from solve import plate

    from levelform.fem.elements import element_stiffness
    from levelform.fem.model import build_model
    from levelform.fem.multigrid import LatticeAssembler

    model = build_model(plate(nx))
    scale = np.load(save)
    K = LatticeAssembler(model, element_stiffness(1.0, 0.3, 1.0)).matrix(scale)
    t = time.perf_counter()
    u = spla.spsolve(K, model.forces[:, 0])
    return {"superlu_s": time.perf_counter() - t, "superlu_peak_gib": peak_gib(),
            "superlu_compliance": float(model.forces[:, 0] @ u)}


def child(args: list[str]) -> dict:
    p = subprocess.run([sys.executable, __file__, *args], capture_output=True, text=True)
    line = [s for s in p.stdout.splitlines() if s.startswith("{")]
    if p.returncode != 0 or not line:
        return {"failed": p.stderr.strip()[-1500:] or f"exit {p.returncode}"}
    return json.loads(line[-1])


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="400x200,800x400,1600x800", help="grids as NXxNY, comma-separated")
    ap.add_argument("--iterations", type=int, default=8, help="iterations per size (default 8)")
    ap.add_argument("--skip", type=int, default=2, help="first iterations left out of the medians (default 2)")
    ap.add_argument("--solver", default="auto", help="[method] solver for the run (default auto)")
    ap.add_argument("--superlu-max", type=int, default=400_000,
                    help="largest grid (cells) for the SuperLU comparison (default 400000; 1.28M needs >12 GB)")
    ap.add_argument("--one", help=argparse.SUPPRESS)
    ap.add_argument("--superlu", help=argparse.SUPPRESS)
    ap.add_argument("--save", help=argparse.SUPPRESS)
    a = ap.parse_args()
    if a.one:
        nx, ny = (int(v) for v in a.one.split("x"))
        print(json.dumps(run_size(nx, ny, a.iterations, a.skip, a.solver, a.save)))
        return
    if a.superlu:
        print(json.dumps(superlu_size(int(a.superlu), a.save)))
        return
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for size in a.sizes.split(","):
            nx, ny = (int(v) for v in size.split("x"))
            save = str(Path(tmp) / f"scale_{size}.npy")
            r = child(["--one", size, "--iterations", str(a.iterations), "--skip", str(a.skip),
                       "--solver", a.solver, "--save", save])
            if "failed" in r:
                print(f"{size}: failed\n{r['failed']}", flush=True)
                continue
            if nx * ny <= a.superlu_max:
                r.update(child(["--superlu", str(nx), "--save", save]))
            rows.append(r)
            m = r["median"]
            print(f"{r['cells']:,} cells ({size}, {r['free']:,} unknowns), solver {r['solver']}: "
                  f"{r['iterations']} iterations, means of the last {r['measured']}; set-up before the "
                  f"first analysis {r['setup_s']:.1f} s; peak memory {r['peak_gib']:.2f} GiB", flush=True)
            print("  " + ", ".join(f"{p} {m[p]:.3f}" for p in PHASES + ("other", "total")) + " (s)", flush=True)
    print()
    cols = ("assembly", "solve", "sensitivity", "smoothing", "volume control", "update", "reinitialization")
    print("| cells | solver | " + " | ".join(cols) + " | rest | iteration s | iteration / solve "
          "| median of per-iteration ratios (range) | peak GiB | SuperLU (spsolve) s | speed-up of the solve |")
    print("|---" * (len(cols) + 9) + "|")
    for r in rows:
        m = r["median"]
        rest = m["total"] - sum(m[c] for c in cols)
        slu = f"{r['superlu_s']:.1f}" if "superlu_s" in r else "not run"
        up = f"{r['superlu_s'] / m['solve']:.1f}x" if "superlu_s" in r else "-"
        print(f"| {r['cells']:,} | {r['solver']} | " + " | ".join(f"{m[c]:.3f}" for c in cols)
              + f" | {rest:.3f} | {m['total']:.2f} | {m['total'] / m['solve']:.2f} | {r['ratio_median']:.2f} "
              f"({r['ratio_range'][0]:.2f}-{r['ratio_range'][1]:.2f}) | {r['peak_gib']:.2f} | {slu} | {up} |")
    if len(rows) >= 2:
        n = np.log([r["cells"] for r in rows])
        t = np.log([r["median"]["total"] for r in rows])
        s = np.log([r["median"]["solve"] for r in rows])
        print(f"\nper-iteration time grows like cells^{np.polyfit(n, t, 1)[0]:.2f} "
              f"(the solve alone: cells^{np.polyfit(n, s, 1)[0]:.2f}), least squares over "
              f"{rows[0]['cells']:,} .. {rows[-1]['cells']:,} cells")


if __name__ == "__main__":
    main()
