"""Wall-clock time per phase of an optimization loop, for benchmarks/ and profiling.

A loop that is given a PhaseClock wraps its parts in ``with clock("solve"):``; without one
(the default) ``phase(None, name)`` is a no-op context, so normal runs pay nothing.
Nested phases are not subtracted: give parts that do not overlap.
"""
from __future__ import annotations

import time
from contextlib import contextmanager, nullcontext


class PhaseClock:
    """Seconds spent in each named phase, per iteration (``tick()`` closes an iteration)."""

    def __init__(self):
        self.current: dict[str, float] = {}
        self.iterations: list[dict[str, float]] = []
        self._opened = time.perf_counter()

    @contextmanager
    def __call__(self, name: str):
        t = time.perf_counter()
        try:
            yield
        finally:
            self.current[name] = self.current.get(name, 0.0) + time.perf_counter() - t

    def tick(self) -> None:
        """End an iteration: record its phases and its whole wall time ("total")."""
        now = time.perf_counter()
        self.current["total"] = now - self._opened
        self.iterations.append(self.current)
        self.current, self._opened = {}, now


def phase(clock: PhaseClock | None, name: str):
    return nullcontext() if clock is None else clock(name)
