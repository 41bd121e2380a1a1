"""Plain, frozen values that describe a problem as the user stated it.

Every length is in the problem's own length unit (``units.length``), every force in
``units.force``; stresses are force / length^2. Nothing here depends on the grid.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Optional

Point = tuple[float, float]

CAUTION = (
    "Concept-design aid, not a code check: verify any design with the applicable local "
    "codes and a licensed engineer before it is built."
)


class ProblemError(ValueError):
    """Bad input a user can fix. ``problems`` holds one message per problem found.

    Each message names the key path (``load[2].force``) and what would be valid.
    """

    def __init__(self, problems):
        if isinstance(problems, str):
            problems = [problems]
        self.problems = list(problems)
        super().__init__("\n".join(self.problems))


@dataclass(frozen=True)
class Units:
    length: str = "mm"
    force: str = "N"

    @property
    def stress(self) -> str:
        return f"{self.force}/{self.length}^2"

    @property
    def compliance(self) -> str:
        return f"{self.force}*{self.length}"


@dataclass(frozen=True)
class Material:
    E: float
    nu: float
    thickness: float


@dataclass(frozen=True)
class Domain:
    outline: tuple[Point, ...]
    holes: tuple[tuple[Point, ...], ...]
    cell: float


@dataclass(frozen=True)
class Support:
    """``kind`` is "point", "segment", "box" or "circle"; ``where`` holds its coordinates:
    a point (x, y), a segment ((x0, y0), (x1, y1)), a box (x0, y0, x1, y1) or a circle
    (cx, cy, r). A box or circle holds the material inside it; a bolt's support is the
    circle of its hole, so it holds the hole's rim."""

    kind: str
    where: tuple
    fix: str  # "x", "y" or "xy"
    pad: Optional[bool] = None  # None: follow [method] pads
    key: str = "support"  # key path for messages, e.g. "support[1]"


@dataclass(frozen=True)
class Load:
    """``kind`` is "point" (``force`` is a force) or "segment" (``force`` is a force
    per length, acting along the whole segment)."""

    kind: str
    where: tuple
    force: tuple[float, float]
    case: str = "main"
    pad: Optional[bool] = None
    key: str = "load"


@dataclass(frozen=True)
class LoadCase:
    name: str
    weight: float = 1.0


@dataclass(frozen=True)
class Region:
    """A keep region: ``keep`` is "solid" or "empty"; ``kind`` is "circle"
    (cx, cy, r), "box" (x0, y0, x1, y1) or "polygon" ((x, y), ...)."""

    keep: str
    kind: str
    where: tuple
    key: str = "region"


@dataclass(frozen=True)
class Goal:
    material: float


@dataclass(frozen=True)
class Method:
    """Optimizer settings. Lengths are in the problem's length unit; ``None`` means
    "derive a default from the domain size" (see ``levelform.defaults``)."""

    name: str = "levelset"
    iterations: int = 300
    smoothing: Optional[float] = None
    seed_holes: bool = True
    initial_holes: bool = False
    pads: bool = True
    pad_radius: Optional[float] = None
    step: Optional[float] = None
    hole_spacing: Optional[float] = None
    volume_step: float = 0.02
    ersatz: float = 1e-3
    solver: str = "auto"
    # density-based (SIMP) and evolutionary (BESO) settings; lengths in model units
    penalty: float = 3.0
    filter_radius: Optional[float] = None
    filter: str = "density"
    projection: bool = False
    evolution_rate: float = 0.02
    admission_cap: float = 0.02


@dataclass(frozen=True)
class Fabrication:
    """Manufacturing limits, lengths in model units; None means no limit. ``process``
    (laser, waterjet, punch) is the cutting process whose defaults filled the limits not
    given; ``edge_distance`` is the least distance from a hole to the outline, kept as a
    solid band inside it."""

    min_member: Optional[float] = None
    min_hole: Optional[float] = None
    process: Optional[str] = None
    edge_distance: Optional[float] = None


@dataclass(frozen=True)
class Pattern:
    """Symmetry and repetition imposed on the design by construction (docs/patterns.md).

    ``mirror`` is None, "left-right", "top-bottom" or "both", about the lines through
    ``centre``; ``rotate`` None, 2 or 4 (fold, about ``centre``); ``repeat`` None or
    (nx, ny) tiles over ``tiled`` = (x0, y0, x1, y1), the outline's bounding box less any
    frame. With ``repeat``, mirror and rotation act on each tile about its own centre."""

    mirror: Optional[str] = None
    centre: Optional[Point] = None
    rotate: Optional[int] = None
    repeat: Optional[tuple[int, int]] = None
    tiled: Optional[tuple[float, float, float, float]] = None

    def describe(self) -> str:
        parts = []
        if self.repeat:
            parts.append(f"repeat {self.repeat[0]} x {self.repeat[1]}")
        if self.mirror:
            parts.append(f"mirror {self.mirror}")
        if self.rotate:
            parts.append(f"rotate {self.rotate}-fold")
        return ", ".join(parts) or "none"


@dataclass(frozen=True)
class Bolt:
    """A bolt: a hole of ``diameter`` at ``at`` that stays open (a domain hole), a solid
    ring of width ``ring`` around it (a keep-solid region) and a support ``fix`` on the
    hole's rim."""

    at: Point
    diameter: float
    ring: float
    fix: str
    key: str = "bolt"


@dataclass(frozen=True)
class Export:
    """Export settings: ``arc_tolerance`` (a length) is how far the arcs fitted to the
    outline in outline.dxf may stray from it; None: a twentieth of the cell."""

    arc_tolerance: Optional[float] = None


@dataclass(frozen=True)
class Problem:
    units: Units
    material: Material
    domain: Domain
    supports: tuple[Support, ...]
    loads: tuple[Load, ...]
    cases: tuple[LoadCase, ...]
    regions: tuple[Region, ...]
    goal: Goal
    method: Method
    fabrication: Fabrication = field(default_factory=Fabrication)
    name: str = "problem"
    source: Optional[str] = None
    raw: dict = field(default_factory=dict, compare=False, repr=False)
    pattern: Optional[Pattern] = None
    bolts: tuple[Bolt, ...] = ()
    export: Export = field(default_factory=Export)


@dataclass(frozen=True)
class GridInfo:
    """The fixed grid: ``nx`` x ``ny`` square cells of side ``h`` whose lower-left
    corner is at (``x0``, ``y0``). Node (i, j) sits at (x0 + i h, y0 + j h);
    nodal arrays have shape (ny + 1, nx + 1), cell arrays (ny, nx)."""

    nx: int
    ny: int
    x0: float
    y0: float
    h: float


@dataclass(frozen=True)
class IterationRecord:
    iteration: int
    compliance: float
    material_fraction: float
    target_fraction: float
    boundary_change: float
    step: float


@dataclass(frozen=True)
class Result:
    """What an optimization method returns. ``outline`` is a shapely (Multi)Polygon
    in model coordinates, valid and oriented (outer rings counter-clockwise)."""

    problem: Problem
    method: str
    outline: object
    compliance: float
    material_fraction: float
    iterations: int
    converged: bool
    status: str
    seconds: float
    history: tuple[IterationRecord, ...]
    settings: dict
    grid: GridInfo
    phi: object = None  # nodal level set (ny+1, nx+1), NaN outside the domain
    density: object = None  # cell material fraction (ny, nx), NaN outside the domain
    case_compliance: dict = field(default_factory=dict)
    # For methods whose own design is not crisp (density, evolutionary): the compliance of the
    # crisp outline re-analysed on the method's grid. None when the design is crisp already.
    crisp_compliance: Optional[float] = None
    # Fabrication limits asked for and what the outline achieves (see geometry.fabrication_report).
    fabrication: dict = field(default_factory=dict)
    # The iteration whose design is exported: the best feasible one the run reached (at the
    # goal volume, load path intact), which need not be the last. None: the last.
    exported_iteration: Optional[int] = None
