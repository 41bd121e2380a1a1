"""levelform: stiffest plate layouts by the level-set method, exported as clean outlines.

Typical use::

    import levelform
    problem = levelform.load_problem("bracket.toml")
    result = levelform.optimize(problem)
    levelform.export(result, "out/")

A concept-design aid, not a code check: verify with local codes and a licensed engineer.
"""
from __future__ import annotations

__version__ = "0.1.0"

__all__ = ["load_problem", "optimize", "export", "ProblemError", "__version__"]

from .spec import ProblemError


def load_problem(path):
    """Read and validate a TOML problem file; raises ProblemError listing every problem."""
    from .problem.reader import load_problem as _load

    return _load(path)


def optimize(problem, progress=None):
    """Run the method named in ``problem.method.name``; returns a Result."""
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
