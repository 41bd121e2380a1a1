"""Reading a problem file into the frozen values of ``levelform.spec``, with every mistake
reported at once, naming its key."""
from __future__ import annotations

from .reader import load_problem, parse_problem

__all__ = ["load_problem", "parse_problem"]
