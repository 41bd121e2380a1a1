"""Optimization methods. Each is a function ``run(problem, progress=None) -> Result`` and
never writes files."""
from __future__ import annotations

from ..spec import ProblemError


def _levelset(problem, progress=None, checkpoint=None):
    from .levelset import run

    return run(problem, progress=progress, checkpoint=checkpoint)


def _density(problem, progress=None):
    from .density import run

    return run(problem, progress=progress)


def _evolutionary(problem, progress=None):
    from .evolutionary import run

    return run(problem, progress=progress)


METHODS = {"levelset": _levelset, "density": _density, "evolutionary": _evolutionary}


CHECKPOINTED = {"levelset"}  # methods that can save and resume their loop


def optimize(problem, progress=None, checkpoint=None):
    """Run the method named in ``problem.method.name``. ``checkpoint`` (see
    levelform.checkpoint) is used by the methods in CHECKPOINTED and ignored by the others."""
    name = problem.method.name
    if name not in METHODS:
        raise ProblemError([f"method.name: unknown method {name!r}; valid: {', '.join(sorted(METHODS))}"])
    if name in CHECKPOINTED:
        return METHODS[name](problem, progress=progress, checkpoint=checkpoint)
    return METHODS[name](problem, progress=progress)
