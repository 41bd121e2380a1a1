"""Optimization methods. Each is a function ``run(problem, progress=None) -> Result`` and
never writes files."""
from __future__ import annotations

from ..spec import ProblemError


def _levelset(problem, progress=None):
    from .levelset import run

    return run(problem, progress=progress)


METHODS = {"levelset": _levelset}


def optimize(problem, progress=None):
    """Run the method named in ``problem.method.name``."""
    name = problem.method.name
    if name not in METHODS:
        raise ProblemError([f"method.name: unknown method {name!r}; valid: {', '.join(sorted(METHODS))}"])
    return METHODS[name](problem, progress=progress)
