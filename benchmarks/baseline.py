"""Record, or check against a record, every example's results (a guard for refactors).

Runs each problem in examples/ (and the demo) through the command line exactly as a user
would: ``levelform run`` with each method, then ``levelform compare``. It keeps every number
of summary.json, verify.json and comparison.json (timings, versions and paths left out),
history.csv, and a SHA-256 of each outline file (SVG, DXF, GeoJSON).

    python benchmarks/baseline.py record /tmp/baseline.json      # before a change
    python benchmarks/baseline.py check /tmp/baseline.json       # after: numbers to 1e-10
                                                                  # relative, outlines byte-identical
    python benchmarks/baseline.py check base.json --only two_bar  # a subset by file stem

Takes about two minutes per problem on two cores (three runs and a comparison each). Not a test: a guard a refactoring session runs by hand.
"""
from __future__ import annotations

import argparse
import hashlib
import json
import math
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
METHODS = ("levelset", "density", "evolutionary")
OUTLINES = ("outline.svg", "outline.dxf", "outline.geojson")
JSONS = ("summary.json", "verify.json")
VOLATILE = ("seconds", "version", "source", "time", "path", "results")  # key substrings
RTOL = 1e-10


def problems() -> list[Path]:
    files = sorted((ROOT / "examples").glob("*.toml"))
    return files + sorted((ROOT / "src" / "levelform" / "demo").glob("*.toml"))


def flatten(obj, prefix="") -> dict:
    """Leaves of a JSON value by dotted path, volatile keys left out."""
    out = {}
    if isinstance(obj, dict):
        for k, v in obj.items():
            if any(s in str(k).lower() for s in VOLATILE):
                continue
            out.update(flatten(v, f"{prefix}{k}."))
    elif isinstance(obj, list):
        for i, v in enumerate(obj):
            out.update(flatten(v, f"{prefix}{i}."))
    else:
        out[prefix.rstrip(".")] = obj
    return out


def levelform(*args) -> None:
    exe = Path(sys.executable).with_name("levelform")
    proc = subprocess.run([str(exe), *map(str, args)], capture_output=True, text=True)
    if proc.returncode not in (0,):
        raise SystemExit(f"levelform {' '.join(map(str, args))} failed ({proc.returncode}):\n{proc.stderr}")


def record_one(path: Path, work: Path) -> dict:
    rec = {}
    for m in METHODS:
        out = work / f"{path.stem}-{m}"
        levelform("run", path, "-o", out, "--method", m, "-q", "--overwrite")
        entry = {}
        for name in JSONS:
            if (out / name).is_file():
                entry[name] = flatten(json.loads((out / name).read_text(encoding="utf-8")))
        for name in OUTLINES:
            entry[name] = hashlib.sha256((out / name).read_bytes()).hexdigest()
        entry["history.csv"] = (out / "history.csv").read_text(encoding="utf-8")
        rec[m] = entry
    out = work / f"{path.stem}-compare"
    levelform("compare", path, "-o", out, "-q", "--overwrite")
    rec["compare"] = {"comparison.json": flatten(json.loads((out / "comparison.json").read_text(encoding="utf-8")))}
    return rec


def same(a, b) -> bool:
    if isinstance(a, float) and isinstance(b, (int, float)) or isinstance(b, float) and isinstance(a, (int, float)):
        if math.isnan(a) and math.isnan(b):
            return True
        return a == b or abs(a - b) <= RTOL * max(abs(a), abs(b))
    return a == b


def diff(old, new, where="") -> list[str]:
    if isinstance(old, dict) and isinstance(new, dict):
        out = []
        for k in sorted(set(old) | set(new)):
            if k not in new:
                out.append(f"{where}{k}: missing now")
            elif k not in old:
                out.append(f"{where}{k}: new (not in the record)")
            else:
                out.extend(diff(old[k], new[k], f"{where}{k} / "))
        return out
    if isinstance(old, str) and isinstance(new, str) and "\n" in old:  # CSV: compare cell by cell
        ro, rn = old.splitlines(), new.splitlines()
        if len(ro) != len(rn):
            return [f"{where}: {len(ro)} rows recorded, {len(rn)} now"]
        for i, (lo, ln) in enumerate(zip(ro, rn)):
            co, cn = lo.split(","), ln.split(",")
            vals = []
            for x, y in zip(co, cn):
                try:
                    vals.append(same(float(x), float(y)))
                except ValueError:
                    vals.append(x == y)
            if len(co) != len(cn) or not all(vals):
                return [f"{where}row {i + 1}: {lo!r} recorded, {ln!r} now"]
        return []
    return [] if same(old, new) else [f"{where.rstrip(' / ')}: {old!r} recorded, {new!r} now"]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("action", choices=("record", "check"))
    ap.add_argument("file", type=Path)
    ap.add_argument("--only", help="comma-separated file stems (default: all)")
    args = ap.parse_args(argv)
    paths = problems()
    if args.only:
        keep = set(args.only.split(","))
        paths = [p for p in paths if p.stem in keep]
    work = Path(tempfile.mkdtemp(prefix="levelform-baseline-"))
    try:
        now = {}
        for p in paths:
            print(f"{p.name} ...", flush=True)
            now[f"{p.parent.name}/{p.stem}"] = record_one(p, work)
    finally:
        shutil.rmtree(work, ignore_errors=True)
    if args.action == "record":
        args.file.write_text(json.dumps(now, indent=1, sort_keys=True), encoding="utf-8")
        print(f"recorded {len(now)} problems into {args.file}")
        return 0
    old = json.loads(args.file.read_text(encoding="utf-8"))
    problems_found = []
    for key, rec in now.items():
        if key not in old:
            problems_found.append(f"{key}: not in the record")
            continue
        problems_found.extend(f"{key} / {d}" for d in diff(old[key], rec))
    for line in problems_found:
        print(line)
    print(f"{'IDENTICAL' if not problems_found else 'DIFFERENT'}: {len(now)} problems, "
          f"{len(problems_found)} differences (numbers to {RTOL:g} relative, outlines byte for byte)")
    return 0 if not problems_found else 1


if __name__ == "__main__":
    sys.exit(main())
