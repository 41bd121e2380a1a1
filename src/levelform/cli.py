"""The ``levelform`` command: demo, run, check."""
from __future__ import annotations

import argparse
import os
import sys
from importlib import resources
from pathlib import Path

from .methods.registry import method_names
from .spec import CAUTION, ProblemError
from .version import __version__

EXIT_OK, EXIT_FAIL, EXIT_BAD_INPUT, EXIT_INTERRUPTED = 0, 1, 2, 130


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="levelform",
        description="Stiffest plate layouts by the level-set method, exported as clean outlines "
        "(SVG, DXF, GeoJSON) with figures and a summary.",
        epilog=CAUTION,
    )
    p.add_argument("--version", action="version", version=f"levelform {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")

    d = sub.add_parser("demo", help="write an example problem into a folder, run it, show where the results are")
    d.add_argument("folder", nargs="?", default="levelform-demo", help="folder for the demo (default: levelform-demo)")
    d.add_argument("-q", "--quiet", action="store_true", help="no per-iteration progress lines")

    r = sub.add_parser("run", help="optimize a problem file and write outlines, figures and a summary")
    r.add_argument("problem", help="problem file (TOML, see docs/problem-format.md)")
    r.add_argument("-o", "--out", metavar="OUTDIR", help="output folder (default: <problem file name>-results next to the file)")
    r.add_argument("--method", help=f"override [method] name: {', '.join(method_names())}")
    r.add_argument("--overwrite", action="store_true", help="replace the results in an existing output folder")
    r.add_argument("--resume", action="store_true", help="continue an interrupted run from its last checkpoint in OUTDIR")
    r.add_argument("--no-verify", action="store_true", help="skip the body-fitted re-check of the exported outline")
    r.add_argument("-q", "--quiet", action="store_true", help="no per-iteration progress lines")

    c = sub.add_parser("check", help="validate a problem file and estimate its size, without solving")
    c.add_argument("problem", help="problem file (TOML)")

    v = sub.add_parser("verify", help="re-check an exported outline on a body-fitted mesh: compliance, "
                       "displacement, peak von Mises stress")
    v.add_argument("target", help="a results folder of `levelform run`, or a problem file (TOML) with --outline")
    v.add_argument("--outline", metavar="FILE", help="outline to check (GeoJSON or DXF), e.g. one edited in CAD")
    v.add_argument("-o", "--out", metavar="OUTDIR", help="where to write verify.json, stress.png, verify.vtu "
                   "(default: the results folder, or <outline name>-verify)")
    v.add_argument("--mesh-size", type=float, metavar="LENGTH", help="element size (default: the cell size)")
    v.add_argument("--overwrite", action="store_true", help="replace verify.json, stress.png and verify.vtu "
                   "of an earlier check in the output folder")

    k = sub.add_parser("compare", help="optimize one problem with several methods and compare their crisp outlines "
                       "by one common analysis")
    k.add_argument("problem", help="problem file (TOML, see docs/problem-format.md)")
    k.add_argument("-o", "--out", metavar="OUTDIR", help="output folder (default: <problem file name>-compare next to the file)")
    k.add_argument("--methods", default=",".join(method_names()),
                   help=f"comma-separated method names (default: {','.join(method_names())})")
    k.add_argument("--overwrite", action="store_true", help="replace the results in an existing output folder")
    k.add_argument("-q", "--quiet", action="store_true", help="no per-iteration progress lines")

    t = sub.add_parser("truss", help="the stiffest truss the domain, supports and loads allow (a ground-structure "
                       "reference for the compliance of any design)")
    t.add_argument("problem", help="problem file (TOML, see docs/problem-format.md)")
    t.add_argument("-o", "--out", metavar="OUTDIR", help="output folder (default: <problem file name>-truss next to the file)")
    t.add_argument("--spacing", type=float, metavar="LENGTH", help="distance between ground-structure nodes, in the "
                   "problem's length unit (default: see docs/truss.md)")
    t.add_argument("--overwrite", action="store_true", help="replace the results in an existing output folder")
    return p


def _errors(problems) -> int:
    for msg in problems:
        print(f"error: {msg}", file=sys.stderr)
    return EXIT_BAD_INPUT


def _progress_line(rec) -> None:
    print(
        f"iter {rec.iteration:4d}  compliance {rec.compliance:12.6g}  material {rec.material_fraction:6.4f}"
        f" (target {rec.target_fraction:6.4f})  changed {rec.boundary_change:7.4f}  step {rec.step:8.4g}",
        flush=True,
    )


def _with_method(problem, name):
    import dataclasses

    if not name:
        return problem
    from .methods import METHODS

    if name not in METHODS:
        raise ProblemError([f"--method: unknown method {name!r}; valid: {', '.join(sorted(METHODS))}"])
    return dataclasses.replace(problem, method=dataclasses.replace(problem.method, name=name))


def _verify_and_report(problem, outline, outdir: Path, grid_compliance, mesh_size=None) -> dict:
    """Body-fitted re-check of ``outline``; writes verify.json, stress.png, verify.vtu and
    prints the figures, its warnings and its problems. Returns the files written."""
    from .bodyfitted.check import verify_outline
    from .io.verification import write_verification

    v = verify_outline(problem, outline, mesh_size=mesh_size, grid_compliance=grid_compliance)
    files = write_verification(v, outdir, problem)
    u = problem.units
    if v.compliance is not None:
        diff = "" if v.relative_difference is None else f" ({100 * v.relative_difference:+.1f} % against the grid)"
        print(f"body-fitted check ({v.elements} quadratic triangles of about {v.mesh_size:.3g} {u.length}):\n"
              f"  compliance         {v.compliance:.6g} {u.compliance}{diff}\n"
              f"  max displacement   {v.max_displacement:.4g} {u.length} at ({v.max_displacement_at[0]:.4g}, "
              f"{v.max_displacement_at[1]:.4g})\n"
              f"  peak von Mises     {v.max_von_mises:.4g} {u.stress} at ({v.max_von_mises_at[0]:.4g}, "
              f"{v.max_von_mises_at[1]:.4g})", flush=True)
    for w in v.warnings:
        print(f"warning: verify: {w}", file=sys.stderr)
    for msg in v.problems:
        print(f"error: verify: {msg}", file=sys.stderr)
    files["_ok"] = v.ok
    return files


def _solve_and_export(problem, outdir: Path, quiet: bool, overwrite: bool, resume: bool = False,
                      verify: bool = True) -> int:
    from .fem.model import resolution_warnings, resolve_settings
    from .geometry import domain_polygon, outline_holes
    from .io.checkpoint import CheckpointFile
    from .io.export import export
    from .methods import optimize

    if outdir.exists() and not outdir.is_dir():
        return _errors([f"-o: {outdir} exists and is not a folder"])
    checkpoint = CheckpointFile(outdir, problem)
    if resume:
        if not checkpoint.exists():
            return _errors([f"--resume: {outdir} holds no checkpoint to resume; run without --resume"])
        checkpoint.load()  # refuses a checkpoint of another problem before any work
    elif outdir.is_dir() and any(outdir.iterdir()):
        if not overwrite:
            hint = " (an unfinished run: pass --resume to continue it)" if checkpoint.exists() else ""
            return _errors([f"-o: output folder {outdir} is not empty{hint}; pass --overwrite to replace "
                            "its results or choose another folder"])
        checkpoint.remove()

    print(f"levelform {__version__}: {problem.name} ({problem.method.name})"
          + (" resuming from the last checkpoint" if resume else ""), flush=True)
    if problem.method.name == "levelset":  # the smoothing length is the level set's
        for msg in resolution_warnings(resolve_settings(problem), problem.domain.cell):
            print(f"warning: {msg}", file=sys.stderr)
    result = optimize(problem, progress=None if quiet else _progress_line, checkpoint=checkpoint)
    files = export(result, outdir, overwrite=True)  # the folder was checked above; it holds the checkpoint
    interrupted = result.status == "interrupted"
    if verify and not interrupted:
        from .io.outline_read import read_outline

        crisp = result.compliance if result.crisp_compliance is None else result.crisp_compliance
        # Check the outline as written (rounded coordinates): what `levelform verify OUTDIR` reads.
        files.update(_verify_and_report(problem, read_outline(files["outline.geojson"]), outdir, crisp,
                                        mesh_size=None))
    if not interrupted:
        checkpoint.remove()
    if not verify:  # an earlier check's files belong to another outline
        from .io.verification import FILES as VERIFY_FILES

        for name in VERIFY_FILES:
            (outdir / name).unlink(missing_ok=True)
    u = problem.units
    best = result.exported_iteration
    print(
        f"\n{result.status} after {result.iterations} iterations in {result.seconds:.1f} s"
        + (f"; the design exported is iteration {best}'s, the best reached at the goal"
           if best is not None and best != result.iterations else "") + "\n"
        f"  compliance         {result.compliance:.6g} {u.compliance}"
        + ("" if result.crisp_compliance is None else
           f" (the method's own design); crisp outline {result.crisp_compliance:.6g} {u.compliance}")
        + "\n"
        f"  material fraction  {result.material_fraction:.4f} (goal {problem.goal.material:.4f})\n"
        f"  outline area       {result.outline.area:.6g} {u.length}^2, "
        f"{outline_holes(result.outline, domain_polygon(result.problem)):d} holes\n"
        + (f"  linear solver      {result.settings['solver_used']}\n" if "solver_used" in result.settings else "")
        + f"  results in         {outdir}{os.sep} ({', '.join(sorted(k for k in files if not k.startswith('_')))})"
        f"\n\nCaution: {CAUTION}",
        flush=True,
    )
    for key, lim in (result.fabrication or {}).get("limits", {}).items():
        if not lim.get("met", True):
            measured = "nothing measurable" if lim.get("measured") is None else f"{lim['measured']:.4g} {u.length}"
            print(f"warning: fabrication.{key}: not met: the outline measures {measured} against the "
                  f"{lim['required']:.4g} {u.length} asked for", file=sys.stderr)
    if result.settings.get("solver_note"):
        print(f"note: {result.settings['solver_note']}", file=sys.stderr)
    if interrupted:
        print(f"interrupted: the current design is written; continue with --resume", file=sys.stderr)
        return EXIT_INTERRUPTED
    if not result.converged:
        print(f"warning: the run did not converge ({result.status}); check the history before using the outline",
              file=sys.stderr)
    return EXIT_OK


def cmd_run(args) -> int:
    from .problem.reader import load_problem

    problem = _with_method(load_problem(args.problem), args.method)
    out = Path(args.out) if args.out else Path(args.problem).with_name(f"{Path(args.problem).stem}-results")
    return _solve_and_export(problem, out, args.quiet, args.overwrite, args.resume, verify=not args.no_verify)


def cmd_verify(args) -> int:
    import json

    from .io.outline_read import read_outline_report
    from .io.verification import FILES as VERIFY_FILES
    from .problem.reader import load_problem

    target = Path(args.target)
    if args.mesh_size is not None and not (args.mesh_size > 0 and args.mesh_size < float("inf")):
        return _errors([f"--mesh-size: must be a positive length, got {args.mesh_size}"])
    grid_compliance = None
    if target.is_dir():
        summary_path = target / "summary.json"
        if not summary_path.is_file():
            return _errors([f"{target}: not a results folder of `levelform run` (no summary.json); "
                            "give a problem file and --outline instead"])
        try:
            summary = json.loads(summary_path.read_text(encoding="utf-8"))
            source = summary["problem"]["source"]
            grid_compliance = summary.get("crisp_compliance", summary.get("compliance"))
        except (ValueError, KeyError, TypeError) as exc:
            return _errors([f"{summary_path}: cannot be read ({exc})"])
        if not source or not Path(source).is_file():
            return _errors([f"{summary_path}: the problem file {source!r} it names is not there; "
                            "give a problem file and --outline instead"])
        problem = load_problem(source)
        outline_file = Path(args.outline) if args.outline else target / "outline.geojson"
        out = Path(args.out) if args.out else target
    else:
        if not args.outline:
            return _errors([f"--outline: needed when {target} is a problem file (or give a results folder)"])
        problem = load_problem(target)
        outline_file = Path(args.outline)
        out = Path(args.out) if args.out else outline_file.with_name(f"{outline_file.stem}-verify")
    if args.outline and target.is_dir():
        grid_compliance = None  # an edited outline: the grid figure belongs to another shape
    if out.exists() and not out.is_dir():
        return _errors([f"-o: {out} exists and is not a folder"])
    earlier = [name for name in VERIFY_FILES if (out / name).exists()]
    if earlier and not args.overwrite:
        return _errors([f"{out}: already holds {', '.join(earlier)} of an earlier check; pass --overwrite to "
                        "replace them, or -o OUTDIR to write the new check elsewhere"])
    read = read_outline_report(outline_file)
    print(read.read, flush=True)
    for w in read.warnings:
        print(f"warning: {w}", file=sys.stderr)
    files = _verify_and_report(problem, read.outline, out, grid_compliance, mesh_size=args.mesh_size)
    ok = files.pop("_ok")
    print(f"  results in         {out}{os.sep} ({', '.join(sorted(files))})\n\nCaution: {CAUTION}", flush=True)
    return EXIT_OK if ok else EXIT_FAIL


def _output_folder(args, suffix: str):
    """The output folder of ``compare`` or ``truss`` (``-o``, else <problem>-<suffix> next to
    the problem file), or the list of problems with it (not a folder, not empty)."""
    out = Path(args.out) if args.out else Path(args.problem).with_name(f"{Path(args.problem).stem}-{suffix}")
    if out.exists() and not out.is_dir():
        return [f"-o: {out} exists and is not a folder"]
    if out.is_dir() and any(out.iterdir()) and not args.overwrite:
        return [f"-o: output folder {out} is not empty; pass --overwrite to replace its results or choose another folder"]
    return out


def cmd_compare(args) -> int:
    from .comparison import check_methods, compare_methods, write_comparison
    from .problem.reader import load_problem

    methods = check_methods(args.methods, key="--methods")
    problem = load_problem(args.problem)
    out = _output_folder(args, "compare")
    if isinstance(out, list):
        return _errors(out)

    def progress(method, rec):
        print(f"{method:>12s} ", end="")
        _progress_line(rec)

    print(f"levelform {__version__}: {problem.name}, comparing {', '.join(methods)}", flush=True)
    comparison = compare_methods(problem, methods=methods, progress=None if args.quiet else progress)
    files = write_comparison(comparison, out)
    u = problem.units
    print(f"\n{'method':>12s}  {'crisp compliance':>16s}  {'ratio':>6s}  {'material':>8s}  {'holes':>5s}  "
          f"{'iter':>5s}  {'time':>7s}  status")
    for m in methods:
        r = comparison.rows[m]
        ratio = "-" if r["ratio_to_levelset"] is None else f"{r['ratio_to_levelset']:.3f}"
        print(f"{m:>12s}  {r['crisp_compliance']:16.6g}  {ratio:>6s}  {r['material_fraction']:8.4f}  "
              f"{r['holes']:5d}  {r['iterations']:5d}  {r['seconds']:6.1f}s  {r['status']}")
    ev = comparison.evaluation
    if ev.get("truss_compliance"):
        ratios = ", ".join(f"{m} {comparison.rows[m]['ratio_to_truss']:.3f}" for m in methods)
        print(f"\n  truss reference {ev['truss_compliance']:.6g} {u.compliance} (the stiffest truss at this "
              f"material volume, docs/truss.md); crisp over it: {ratios}")
    elif ev.get("truss_note"):
        print(f"\n  {ev['truss_note']}")
    print(f"\n  compliance in {u.compliance}; every outline analysed on cells of {ev['grid_cell']:g} {u.length}, "
          f"void stiffness ratio {ev['ersatz']:g}\n"
          f"  results in {out}{os.sep} ({', '.join(sorted(files))})\n\nCaution: {CAUTION}", flush=True)
    return EXIT_OK


def cmd_truss(args) -> int:
    from .io.truss_files import write_truss
    from .problem.reader import load_problem
    from .truss import truss_reference

    if args.spacing is not None and not (0 < args.spacing < float("inf")):
        return _errors([f"--spacing: must be a positive length, got {args.spacing}"])
    problem = load_problem(args.problem)
    out = _output_folder(args, "truss")
    if isinstance(out, list):
        return _errors(out)
    print(f"levelform {__version__}: {problem.name}, truss ground-structure reference", flush=True)
    r = truss_reference(problem, spacing=args.spacing)
    files = write_truss(r, out)
    u = problem.units
    bars = max(c.bars_in_lp for c in r.cases)
    lines = [f"  ground structure   {r.nodes} nodes {r.spacing:.4g} {u.length} apart"
             + (" (default)" if r.spacing_default else "")
             + f", {r.node_pairs} candidate bars possible, {bars} in the final program",
             f"  material volume    {r.volume:.6g} {u.length}^3 (goal {problem.goal.material:g} of the domain)"]
    for c in r.cases:
        label = "compliance" if len(r.cases) == 1 else f"compliance, case {c.name}:"
        lines.append(f"  {label:<18s} {c.compliance:.6g} {u.compliance} (W {c.W:.6g} {u.force}*{u.length}, "
                     f"{len(c.force)} bars, {c.rounds} rounds, {c.status})")
    for note in r.notes:
        lines.append(f"  note               {note}")
    lines.append(f"  time               {r.seconds:.1f} s")
    lines.append(f"  results in         {out}{os.sep} ({', '.join(sorted(files))})")
    print("\n".join(lines) + f"\n\nCaution: {CAUTION}", flush=True)
    return EXIT_OK


def cmd_check(args) -> int:
    from .fem.model import build_model, resolution_warnings
    from .problem.reader import load_problem
    from .resources import estimate_memory_bytes

    problem = load_problem(args.problem)
    model = build_model(problem)
    if problem.method.name == "levelset":
        for msg in resolution_warnings(model.settings, model.grid.h):
            print(f"warning: {msg}", file=sys.stderr)
    g = model.grid
    st = model.settings
    u = problem.units.length
    print(
        f"{args.problem}: valid\n"
        f"  grid               {g.nx} x {g.ny} cells of {g.h:g} {u}, {model.n_cells} inside the domain\n"
        f"  degrees of freedom {model.n_dof} ({model.n_free} free)\n"
        f"  load cases         {', '.join(model.case_names)}\n"
        f"  memory estimate    {estimate_memory_bytes(model.n_cells) / 2**30:.2f} GiB\n"
        f"  smoothing {st.smoothing:.4g} {u}, pad radius {st.pad_radius:.4g} {u}, step {st.step:.4g} {u}, "
        f"hole spacing {st.hole_spacing:.4g} {u}"
    )
    return EXIT_OK


def cmd_demo(args) -> int:
    from .problem.reader import load_problem

    folder = Path(args.folder)
    folder.mkdir(parents=True, exist_ok=True)
    text = resources.files("levelform").joinpath("demo/sign_bracket.toml").read_text(encoding="utf-8")
    path = folder / "sign_bracket.toml"
    from .io.atomic import atomic_write_text

    atomic_write_text(path, text)
    print(f"wrote the demo problem {path}")
    problem = load_problem(path)
    return _solve_and_export(problem, folder / "results", args.quiet, overwrite=True)


def main(argv=None) -> int:
    parser = _parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return EXIT_BAD_INPUT
    handler = {"run": cmd_run, "check": cmd_check, "demo": cmd_demo, "compare": cmd_compare,
               "verify": cmd_verify, "truss": cmd_truss}[args.command]
    try:
        return handler(args)
    except ProblemError as exc:
        return _errors(exc.problems)
    except KeyboardInterrupt:
        print("interrupted before any design was analysed; nothing written", file=sys.stderr)
        return EXIT_INTERRUPTED
    except Exception as exc:  # an internal failure: short message, traceback only on request
        if os.environ.get("LEVELFORM_DEBUG"):
            raise
        print(f"error: internal failure ({type(exc).__name__}: {exc}); rerun with LEVELFORM_DEBUG=1 for details", file=sys.stderr)
        return EXIT_FAIL


if __name__ == "__main__":
    sys.exit(main())
