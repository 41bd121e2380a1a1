"""The one list of optimization methods, read by the problem reader, the command line
and the comparison alike. A fourth method is one new module and one entry here."""
from __future__ import annotations

import importlib
from dataclasses import dataclass

__all__ = ["MethodInfo", "METHODS", "method_names", "get_method"]


@dataclass(frozen=True)
class MethodInfo:
    """One optimization method.

    Attributes
    ----------
    name : the value of ``[method] name`` and of ``--method``
    summary : one line for help texts
    module : the module (under levelform.methods) whose ``run(problem, progress=None, ...)``
        returns a levelform.spec.Result and never writes files
    checkpoints : whether ``run`` takes ``checkpoint=`` and can resume its loop
    keys : the ``[method]`` keys this method reads (the others are checked and ignored)
    """

    name: str
    summary: str
    module: str
    checkpoints: bool
    keys: tuple

    def run(self, problem, progress=None, checkpoint=None, **kwargs):
        """Run the method on ``problem``; ``checkpoint`` is used only where ``checkpoints``."""
        run = importlib.import_module(f"levelform.methods.{self.module}").run
        if self.checkpoints:
            kwargs["checkpoint"] = checkpoint
        return run(problem, progress=progress, **kwargs)


_COMMON = ("name", "iterations", "pads", "pad_radius", "ersatz", "solver")

METHODS: dict[str, MethodInfo] = {m.name: m for m in (
    MethodInfo("levelset", "level set: a signed-distance boundary moved by the shape sensitivity",
               "levelset_method", True,
               _COMMON + ("smoothing", "seed_holes", "initial_holes", "step", "hole_spacing", "volume_step")),
    MethodInfo("density", "density-based (SIMP) with a filter, thresholded to a crisp outline",
               "density", False,
               _COMMON + ("penalty", "filter_radius", "filter", "projection")),
    MethodInfo("evolutionary", "bi-directional evolutionary, soft-kill (BESO)",
               "evolutionary", False,
               _COMMON + ("penalty", "filter_radius", "evolution_rate", "admission_cap")),
)}


def method_names() -> tuple:
    """The method names, in the order the comparison runs them."""
    return tuple(METHODS)


def get_method(name: str) -> MethodInfo:
    """The method called ``name``; raises levelform.ProblemError naming the valid ones."""
    from ..spec import ProblemError

    if name not in METHODS:
        raise ProblemError([f"method.name: unknown method {name!r}; valid: {', '.join(sorted(METHODS))}"])
    return METHODS[name]
