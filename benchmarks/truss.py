"""Time and peak memory of the truss reference against the size of the ground structure.

One run per size, each in a fresh Python process so that its peak resident memory is its
own: a 2:1 plate held along one short edge with a point load at the middle of the other
(an invented bracket arm, 400 x 200 mm), at spacings that give about 10k to 1M candidate
bars (node pairs). Prints one table row per size.

    .venv/bin/python benchmarks/truss.py            # 10k, 30k, 100k, 300k, 1M candidate bars
    .venv/bin/python benchmarks/truss.py 10000 1e6  # chosen sizes
"""
from __future__ import annotations

import json
import math
import resource
import subprocess
import sys
import time

SIZES = (1e4, 3e4, 1e5, 3e5, 1e6)
WIDTH, HEIGHT = 400.0, 200.0


def _problem():
    from levelform.spec import Domain, Goal, Load, LoadCase, Material, Method, Problem, Support, Units

    return Problem(
        units=Units("mm", "N"), material=Material(E=70000.0, nu=0.3, thickness=6.0),
        domain=Domain(outline=((0, 0), (WIDTH, 0), (WIDTH, HEIGHT), (0, HEIGHT)), holes=(), cell=2.0),
        supports=(Support("segment", ((0.0, 0.0), (0.0, HEIGHT)), "xy", key="support[1]"),),
        loads=(Load("point", (WIDTH, HEIGHT / 2), (0.0, -1500.0), key="load[1]"),),
        cases=(LoadCase("main"),), regions=(), goal=Goal(0.2), method=Method(), name="bracket arm",
    )


def one(pairs: float) -> dict:
    """Solve at the spacing whose lattice has about ``pairs`` node pairs; figures as a dict."""
    from levelform.truss import truss_reference

    n = 0.5 + math.sqrt(0.25 + 2.0 * pairs)  # nodes with n (n - 1) / 2 = pairs
    # lattice nodes (WIDTH / s + 1) (HEIGHT / s + 1) = n
    a, b = WIDTH * HEIGHT, WIDTH + HEIGHT
    s = (b + math.sqrt(b * b + 4 * a * (n - 1))) / (2 * (n - 1))
    t0 = time.perf_counter()
    r = truss_reference(_problem(), spacing=s)
    seconds = time.perf_counter() - t0
    c = r.cases[0]
    return {"spacing": s, "nodes": r.nodes, "pairs": r.node_pairs, "bars_in_lp": c.bars_in_lp,
            "bars_kept": int(c.force.size), "rounds": c.rounds, "W": c.W, "gap": c.W / c.W_lower - 1.0,
            "status": c.status, "seconds": seconds,
            "peak_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0}


def main(argv) -> int:
    if argv[:1] == ["--one"]:
        print(json.dumps(one(float(argv[1]))))
        return 0
    sizes = [float(v) for v in argv] or list(SIZES)
    print(f"{'candidate bars':>14s} {'nodes':>6s} {'spacing':>8s} {'bars in LP':>10s} {'kept':>5s} "
          f"{'rounds':>6s} {'W':>12s} {'gap':>8s} {'time [s]':>9s} {'peak [MiB]':>10s}  status", flush=True)
    for size in sizes:
        out = subprocess.run([sys.executable, __file__, "--one", repr(size)], capture_output=True, text=True)
        if out.returncode != 0:
            print(f"{size:14.0f}  failed: {out.stderr.strip().splitlines()[-1:]}", flush=True)
            continue
        d = json.loads(out.stdout)
        print(f"{d['pairs']:14d} {d['nodes']:6d} {d['spacing']:8.3f} {d['bars_in_lp']:10d} {d['bars_kept']:5d} "
              f"{d['rounds']:6d} {d['W']:12.6g} {d['gap']:8.1e} {d['seconds']:9.2f} {d['peak_mib']:10.0f}  "
              f"{d['status']}", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
