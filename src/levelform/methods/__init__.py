"""Optimization methods. Each is a module with ``run(problem, progress=None) -> Result``
that never writes files; ``registry.METHODS`` lists them for every caller."""
from __future__ import annotations

from .registry import METHODS, MethodInfo, get_method, method_names

__all__ = ["METHODS", "MethodInfo", "get_method", "method_names", "optimize"]


def optimize(problem, progress=None, checkpoint=None):
    """Run the method named in ``problem.method.name``.

    Parameters
    ----------
    problem : levelform.spec.Problem
    progress : called with each levelform.spec.IterationRecord, or None
    checkpoint : a levelform.io.checkpoint.CheckpointFile, used by the methods that
        checkpoint (``MethodInfo.checkpoints``) and ignored by the others
    """
    return get_method(problem.method.name).run(problem, progress=progress, checkpoint=checkpoint)
