"""levelform: stiffest plate layouts by the level-set method, exported as clean outlines.

Typical use::

    import levelform
    problem = levelform.load_problem("bracket.toml")
    result = levelform.optimize(problem, progress=lambda rec: print(rec.iteration, rec.compliance))
    levelform.export(result, "out/")
    check = levelform.verify(problem, result.outline)     # body-fitted re-analysis
    table = levelform.compare(problem)                    # every method, one common analysis

A concept-design aid, not a code check: verify with local codes and a licensed engineer.
"""
from __future__ import annotations

from .version import __version__

__all__ = ["load_problem", "optimize", "export", "verify", "compare", "ProblemError", "__version__"]

from .spec import ProblemError


def load_problem(path):
    """Read and validate a TOML problem file; raises ProblemError listing every problem."""
    from .problem.reader import load_problem as _load

    return _load(path)


def optimize(problem, progress=None):
    """Run the method named in ``problem.method.name``; returns a Result.

    Parameters
    ----------
    problem : Problem
        What :func:`load_problem` returned (change the method with
        ``dataclasses.replace(problem, method=dataclasses.replace(problem.method, name=...))``).
    progress : callable, optional
        Called after every analysis with a ``levelform.spec.IterationRecord`` (iteration,
        compliance, material_fraction, target_fraction, boundary_change, step).
    """
    from .methods import optimize as _optimize

    return _optimize(problem, progress=progress)


def export(result, outdir, *, overwrite=False):
    """Write outlines, figures, history and summary of a Result into ``outdir``.

    Parameters
    ----------
    result : Result
        What :func:`optimize` returned.
    outdir : str or path-like
        The folder to write into, created if missing.
    overwrite : bool, default False
        A folder that already holds anything is refused (ProblemError naming it) unless
        this is true; then levelform's files in it are replaced and other files kept.

    Returns
    -------
    dict of str to Path
        {file name: path} of every file written.
    """
    from .io.export import export as _export

    return _export(result, outdir, overwrite=overwrite)


def verify(problem, outline, *, mesh_size=None, grid_compliance=None):
    """Re-analyse an outline on a body-fitted mesh of quadratic triangles.

    Parameters
    ----------
    problem : Problem
        Supplies material, supports and loads.
    outline : shapely Polygon or MultiPolygon
        For example ``result.outline``, or one read back with
        ``levelform.io.outline_read.read_outline("edited.dxf")``.
    mesh_size : float, optional
        Element size, a length (default: the problem's cell size).
    grid_compliance : float, optional
        The grid's figure, to report the difference against.

    Returns
    -------
    levelform.bodyfitted.check.Verification
        Compliance, largest displacement, peak von Mises stress and where, warnings and
        problems (``ok`` is False when a support or load lies off the outline). Write its
        files with ``levelform.io.verification.write_verification(v, outdir, problem)``.
    """
    from .bodyfitted.check import verify_outline

    return verify_outline(problem, outline, mesh_size=mesh_size, grid_compliance=grid_compliance)


def compare(problem, methods=None, progress=None):
    """Run several methods on one problem and analyse every crisp outline alike.

    Parameters
    ----------
    problem : Problem
    methods : sequence of str or one comma-separated str, optional
        Method names (default: every registered method, ``levelform.methods.method_names()``).
    progress : callable, optional
        Called as ``progress(method_name, iteration_record)``.

    Returns
    -------
    levelform.comparison.Comparison
        ``rows[name]`` holds each method's crisp compliance, ratio to the level set,
        body-fitted compliance, material, outline figures, iterations and time. Write the
        files with ``levelform.comparison.write_comparison(comparison, outdir)``.
    """
    from .comparison import DEFAULT_METHODS, compare_methods

    return compare_methods(problem, methods=DEFAULT_METHODS if methods is None else methods, progress=progress)
