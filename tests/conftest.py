"""Problem builders shared by the test files, written once.

Plain functions, not fixtures: the tests call them with their own grids, loads and method
settings. Import them with ``from conftest import ...`` (pytest puts tests/ on the path, as
for ``reference``).
"""
from __future__ import annotations

import dataclasses as dc
from pathlib import Path

from levelform import load_problem
from levelform.spec import Domain, Goal, LoadCase, Material, Method, Problem, Units

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"
ONE_CASE = (LoadCase("main"),)


def example_problem(name, cell=None, **method):
    """One of the problems in examples/, optionally on another grid or with other method settings.

    Parameters
    ----------
    name : str
        File name in examples/, e.g. ``"mbb_half_beam.toml"``.
    cell : float, optional
        Cell size replacing the file's ``domain.cell``.
    **method
        Fields of :class:`levelform.spec.Method` replacing the file's ``[method]`` values.

    Returns
    -------
    levelform.spec.Problem
    """
    p = load_problem(EXAMPLES / name)
    if cell is not None:
        p = dc.replace(p, domain=dc.replace(p.domain, cell=cell))
    if method:
        p = dc.replace(p, method=dc.replace(p.method, **method))
    return p


def rectangle(x0, y0, x1, y1):
    """The corners of an axis-aligned rectangle, counter-clockwise from (x0, y0)."""
    return ((x0, y0), (x1, y0), (x1, y1), (x0, y1))


def plate_problem(outline, cell, supports=(), loads=(), *, holes=(), regions=(), cases=ONE_CASE,
                  E=1.0, nu=0.3, t=1.0, length="mm", goal=0.5, method=None, name="problem", source=None):
    """A Problem built straight from the dataclasses of levelform.spec, without a file.

    Parameters
    ----------
    outline : sequence of (x, y)
        Outer boundary of the plate.
    cell : float
        Grid cell size.
    supports, loads, regions : sequence
        :class:`~levelform.spec.Support`, :class:`~levelform.spec.Load` and
        :class:`~levelform.spec.Region` values, used as given.
    holes : sequence of rings
        Fixed holes in the domain.
    cases : sequence of LoadCase
        Load cases; by default the one case "main" with weight 1.
    E, nu, t : float
        Young's modulus, Poisson's ratio and thickness.
    length : str
        Length unit; the force unit is N.
    goal : float
        Material fraction to reach.
    method : dict, optional
        Fields of :class:`~levelform.spec.Method`; every other field keeps its default.
    name : str
        The problem's name.
    source : str, optional
        The file the problem is said to come from.

    Returns
    -------
    levelform.spec.Problem
    """
    return Problem(
        units=Units(length, "N"),
        material=Material(E=E, nu=nu, thickness=t),
        domain=Domain(outline=tuple(outline), holes=tuple(tuple(h) for h in holes), cell=cell),
        supports=tuple(supports), loads=tuple(loads), cases=tuple(cases), regions=tuple(regions),
        goal=Goal(goal), method=Method(**(method or {})), name=name, source=source,
    )


# A small plate problem file (40 x 20, a clamped edge, a tip load) for the command-line
# and API tests.
SMALL_PLATE_TOML = """
name = "small test plate"
[material]
E = 1000.0
nu = 0.3
thickness = 1.0
[domain]
outline = [[0, 0], [40, 0], [40, 20], [0, 20]]
cell = 2.0
[[support]]
segment = [[0, 0], [0, 20]]
fix = "xy"
[[load]]
point = [40, 10]
force = [0, -1]
[goal]
material = 0.5
[method]
iterations = 30
"""
