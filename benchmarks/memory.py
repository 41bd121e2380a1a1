"""Up-front memory estimate against the measured peak memory of real runs.

For three grid sizes of the MBB half-beam, runs a few level-set iterations in a fresh
process and compares its peak resident memory with levelform.resources.estimate_memory_bytes.
Usage: python benchmarks/memory.py [ITERATIONS]
"""
from __future__ import annotations

import resource
import subprocess
import sys
from pathlib import Path

from levelform.resources import estimate_memory_bytes

ROOT = Path(__file__).resolve().parents[1]
CHILD = """
import dataclasses as dc, sys
from levelform import load_problem, optimize
p = load_problem({path!r})
p = dc.replace(p, domain=dc.replace(p.domain, cell={cell}), method=dc.replace(p.method, iterations={its}))
r = optimize(p)
print(r.grid.nx * r.grid.ny)
"""


def peak_of_child(code: str) -> tuple[int, str]:
    before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    after = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    # ru_maxrss of children is the largest child so far (KiB on Linux): run sizes in
    # increasing order so each new maximum is this child's.
    return max(after, before) * 1024, out.strip()


def main() -> None:
    its = int(sys.argv[1]) if len(sys.argv) > 1 else 5
    path = str(ROOT / "examples" / "mbb_half_beam.toml")
    print(f"{'cells':>8}  {'estimate MB':>11}  {'measured MB':>11}  {'ratio':>6}")
    for cell in (0.5, 0.25, 0.125, 0.1):
        peak, cells = peak_of_child(CHILD.format(path=path, cell=cell, its=its))
        est = estimate_memory_bytes(int(cells))
        print(f"{int(cells):8d}  {est / 1e6:11.0f}  {peak / 1e6:11.0f}  {est / peak:6.2f}")


if __name__ == "__main__":
    main()
