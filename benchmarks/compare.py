"""Fair method comparison on the benchmark set (takes minutes; not a test).

Runs every method on each benchmark problem, evaluates every crisp outline by the same
analysis (levelform.compare.evaluate_crisp), prints the full table of each problem and
then a markdown table for docs/comparison.md.

    python benchmarks/compare.py                      # all twelve problems, all methods
    python benchmarks/compare.py examples/portal_knee.toml   # only the files given
    python benchmarks/compare.py --methods levelset,density --out /tmp/cmp
"""
from __future__ import annotations

import argparse
import dataclasses
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
PROBLEMS = (
    "mbb_half_beam.toml", "cantilever.toml", "two_bar.toml", "plate_with_openings.toml",
    "shelf_bracket.toml", "deck_girder_web.toml", "duct_console.toml", "edge_welded_bracket.toml",
    "three_bolt_hanger.toml", "bolted_gusset.toml", "post_base_plate.toml", "portal_knee.toml",
)


def _num(v, digits=5):
    if v is None:
        return "-"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return f"{v:.{digits}g}"
    return str(v)


def full_table(comparison) -> str:
    """Every field of every method, one method per column."""
    from levelform.comparison import FIELDS

    names = list(comparison.methods)
    width = max(len(f) for f in FIELDS) + 2
    texts = [_num(comparison.rows[n][f], 7) for n in names for f in FIELDS]
    col = max(14, *(len(t) + 2 for t in texts + names))
    lines = ["".ljust(width) + "".join(n.rjust(col) for n in names)]
    for f in FIELDS[1:]:
        lines.append(f.ljust(width) + "".join(_num(comparison.rows[n][f], 7).rjust(col) for n in names))
    for case in comparison.problem.cases:
        key = f"crisp[{case.name}]"
        lines.append(key.ljust(width) + "".join(
            _num(comparison.rows[n]["case_compliance"].get(case.name), 7).rjust(col) for n in names))
    return "\n".join(lines)


MD_COLUMNS = (
    ("method", "method", None),
    ("crisp_compliance", "crisp compliance", 5),
    ("ratio_to_levelset", "ratio to level set", 3),
    ("ratio_to_truss", "ratio to truss", 3),
    ("bodyfitted_compliance", "body-fitted compliance", 5),
    ("material_fraction", "material fraction", 3),
    ("outline_length", "outline length", 4),
    ("holes", "holes", None),
    ("smallest_member_width", "smallest member", 3),
    ("iterations", "iterations", None),
    ("seconds", "time [s]", 3),
    ("own_compliance", "own compliance", 5),
    ("converged", "converged", None),
    ("limits_met", "limits met", None),
)


def markdown_table(comparison) -> str:
    p = comparison.problem
    ev = comparison.evaluation
    head = [
        f"### {p.name}",
        "",
        f"Goal material {p.goal.material:g}; problem cell {p.domain.cell:g} {p.units.length}, common "
        f"analysis cell {ev['grid_cell']:g} {p.units.length}, ersatz {ev['ersatz']:g}. Compliance in "
        f"{p.units.compliance}, lengths in {p.units.length}.",
        "",
        "| " + " | ".join(label for _, label, _ in MD_COLUMNS) + " |",
        "|" + "|".join("---" if k == "method" else "---:" for k, _, _ in MD_COLUMNS) + "|",
    ]
    rows = []
    for m in comparison.methods:
        r = comparison.rows[m]
        cells = []
        for key, _, digits in MD_COLUMNS:
            text = _num(r[key], digits or 5)
            if key == "bodyfitted_compliance" and r.get("bodyfitted_ok") is False:
                text += "*"
            cells.append(text)
        rows.append("| " + " | ".join(cells) + " |")
    return "\n".join(head + rows)


def main(argv=None) -> int:
    sys.path.insert(0, str(ROOT / "src"))
    from levelform import load_problem
    from levelform.comparison import compare_methods, write_comparison
    from levelform.methods import METHODS
    from levelform.spec import CAUTION

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("problems", nargs="*", help="problem files (default: the benchmark set in examples/)")
    ap.add_argument("--methods", default=",".join(METHODS), help="comma-separated method names")
    ap.add_argument("--iterations", type=int, help="override [method] iterations")
    ap.add_argument("--out", type=Path, help="also write comparison files, one folder per problem")
    args = ap.parse_args(argv)

    paths = [Path(p) for p in args.problems] or [ROOT / "examples" / n for n in PROBLEMS]
    tables = []
    for path in paths:
        problem = load_problem(path)
        if args.iterations:
            problem = dataclasses.replace(problem, method=dataclasses.replace(problem.method, iterations=args.iterations))
        t = time.perf_counter()
        comparison = compare_methods(problem, methods=args.methods)
        print(f"== {problem.name} ({path.name}): {time.perf_counter() - t:.1f} s", flush=True)
        print(full_table(comparison), flush=True)
        if args.out:
            files = write_comparison(comparison, args.out / path.stem)
            print(f"   wrote {', '.join(str(f) for f in files.values())}")
        print(flush=True)
        tables.append(markdown_table(comparison))
    print("---- markdown for docs/comparison.md ----\n")
    print("\n\n".join(tables))
    print("\n\\* a support or load lies partly off this outline; the body-fitted figure is for the "
          "outline as it is actually held and loaded.")
    print(f"\n> {CAUTION}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
