"""Read a TOML problem file into the frozen values of ``levelform.spec``.

Every mistake in a file is collected before anything is raised, so the user can fix them
all in one go. Each message starts with the key path, with 1-based indices as users count
(``load[2].force``), then says what was found and what would be valid. The format itself
is documented in docs/problem-format.md.
"""
from __future__ import annotations

import difflib
import json
import math
import re
import sys
from pathlib import Path

import numpy as np
from shapely.geometry import LineString, Polygon
from shapely.geometry import Point as _ShapelyPoint
from shapely.geometry import box as _shapely_box
from shapely.ops import unary_union
from shapely.validation import explain_validity

from .. import resources
from ..spec import (
    Domain,
    Fabrication,
    Goal,
    Load,
    LoadCase,
    Material,
    Method,
    Problem,
    ProblemError,
    Region,
    Support,
    Units,
)

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised only on old interpreters
    import tomli as tomllib

__all__ = ["load_problem", "parse_problem", "METHOD_NAMES", "SOLVERS"]

# Adding an optimization method to the accepted names is one entry here.
METHOD_NAMES = ("levelset", "density", "evolutionary")
FILTERS = ("density", "sensitivity")
SOLVERS = ("auto", "direct", "pardiso", "multigrid", "pyamg")
SOLVER_ALIASES = {"iterative": "multigrid"}  # an earlier name, still read
FIXES = ("x", "y", "xy")
KEEPS = ("solid", "empty")
MAX_ITERATIONS = 100_000
MIN_CELLS_ACROSS = 4
MAX_MAGNITUDE = 1e100  # keeps squares and areas far from float overflow
MAX_UNIT_CHARS = 16

_TOP_KEYS = ("name", "description", "units", "material", "domain", "support", "load",
             "case", "region", "goal", "method", "fabrication")
_UNITS_KEYS = ("length", "force")
_MATERIAL_KEYS = ("E", "nu", "thickness")
_DOMAIN_KEYS = ("outline", "holes", "cell")
_SUPPORT_KEYS = ("point", "segment", "box", "fix", "pad")
_LOAD_KEYS = ("point", "segment", "force", "force_per_length", "case", "pad")
_CASE_KEYS = ("name", "weight")
_REGION_KEYS = ("keep", "circle", "box", "polygon")
_GOAL_KEYS = ("material", "min_member", "min_hole")
_FABRICATION_KEYS = ("min_member", "min_hole")
_METHOD_LENGTHS = ("smoothing", "pad_radius", "step", "hole_spacing", "filter_radius")
_METHOD_KEYS = ("name", "iterations", "smoothing", "seed_holes", "initial_holes", "pads", "pad_radius",
                "step", "hole_spacing", "volume_step", "ersatz", "solver", "penalty", "filter_radius",
                "filter", "projection", "evolution_rate", "admission_cap")
# Settings of one method are accepted (and checked) under every method name and ignored by
# the others, so one file can be run with each method by changing ``name`` only.
_METHOD_FRACTIONS = {  # key: (low, high, what); each must lie in (low, high]
    "evolution_rate": (0.0, 0.2, "the volume reduction per iteration, a number"),
    "admission_cap": (0.0, 1.0, "the most of the domain switched from soft to solid per "
                                "iteration, a number"),
}


# ---------------------------------------------------------------------------
# public entry points
# ---------------------------------------------------------------------------

def load_problem(path) -> Problem:
    """Read and check the TOML problem file at ``path``.

    Raises
    ------
    ProblemError
        With one message per mistake: a missing or unreadable file, malformed TOML
        (one message naming line and column) or every problem found in the content.
    """
    p = Path(path)
    label = str(path)
    try:
        raw = p.read_bytes()
    except FileNotFoundError:
        raise ProblemError([f"{label}: file not found"]) from None
    except IsADirectoryError:
        raise ProblemError([f"{label}: is a folder, not a problem file"]) from None
    except OSError as exc:
        raise ProblemError([f"{label}: cannot be read ({exc.strerror or exc})"]) from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise ProblemError([f"{label}: not UTF-8 text (undecodable byte at offset "
                            f"{exc.start}); save the file with UTF-8 encoding"]) from None
    if text.startswith("\ufeff"):
        text = text[1:]
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ProblemError([_toml_error_message(label, exc, text)]) from None
    except RecursionError:
        raise ProblemError([f"{label}: not valid TOML: nested too deeply"]) from None
    except Exception as exc:  # a last guard: the reader must never end in a traceback
        raise ProblemError([f"{label}: could not be read as TOML ({exc})"]) from None
    return parse_problem(data, name=p.stem, source=str(p))


def parse_problem(data: dict, name: str = "problem", source=None) -> Problem:
    """Check an already parsed TOML table and build a ``Problem`` from it.

    ``name`` is the title used when the table has no top-level ``name``; ``source`` is
    stored as ``Problem.source``. Raises ``ProblemError`` listing every problem found.
    """
    errs: list[str] = []
    if not isinstance(data, dict):
        raise ProblemError([f"{source or name}: expected a table of keys at the top level, "
                            f"got {_show(data)}"])
    _check_keys(data, _TOP_KEYS, "", errs)

    title = _optional_text(data, "name", "", errs, default=name, allow_empty=False)
    _optional_text(data, "description", "", errs, default="")  # kept in ``raw`` only
    units = _parse_units(data, errs)
    material = _parse_material(data, units, errs)
    domain, domain_shape = _parse_domain(data, units, errs)
    supports = _parse_array(data, "support", _parse_support, units, errs,
                            missing="no supports given; add at least one [[support]] "
                                    "table with point, segment or box and fix")
    loads = _parse_array(data, "load", _parse_load, units, errs,
                         missing="no loads given; add at least one [[load]] table with "
                                 "point and force, or segment and force_per_length")
    declared = _parse_array(data, "case", _parse_case, units, errs, missing=None)
    regions = _parse_array(data, "region", _parse_region, units, errs, missing=None)
    goal = _parse_goal(data, errs)
    method = _parse_method(data, units, errs)
    fabrication = _parse_fabrication(data, units, errs)

    cases = _check_cases(data, declared, loads, errs)
    placed = True
    if domain is not None:
        placed = _check_placement(supports, loads, domain_shape, domain.cell, units, errs)
    if placed:  # a support off the plate would only add a confusing second message
        _check_rigid_body(supports, domain_shape, _outline_bounds(data), errs)
    _check_regions(regions, supports, loads, domain_shape, goal, units, errs)
    if placed and domain_shape is not None:
        _check_load_paths(regions, supports, loads, domain_shape, errs)
    if domain is not None:
        _check_grid(domain_shape, domain.cell, units, errs)

    if errs:
        raise ProblemError(errs)
    return Problem(
        units=units,
        material=material,
        domain=domain,
        supports=tuple(supports),
        loads=tuple(loads),
        cases=tuple(cases),
        regions=tuple(regions),
        goal=goal,
        method=method,
        fabrication=fabrication,
        name=title,
        source=None if source is None else str(source),
        raw=data,
    )


# ---------------------------------------------------------------------------
# message helpers
# ---------------------------------------------------------------------------

def _err(errs, path, text):
    errs.append(f"{path}: {text}" if path else text)


def _join(path, key):
    key = str(key)
    if not re.fullmatch(r"[A-Za-z0-9_-]+", key):
        key = json.dumps(key, ensure_ascii=False)
    return f"{path}.{key}" if path else key


def _g(x):
    """A number as a person would write it: 6 significant digits, no trailing zeros."""
    if isinstance(x, float) and x.is_integer() and abs(x) < 1e15:
        return str(int(x))
    return f"{x:.6g}"


def _pt(p):
    return f"({_g(p[0])}, {_g(p[1])})"


def _toml_repr(v, depth=0):
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return _g(v)
    if isinstance(v, dict):
        return "a table" if depth == 0 else "{...}"
    if isinstance(v, (list, tuple)):
        if depth > 3:
            return "[...]"
        items = [_toml_repr(x, depth + 1) for x in v[:8]]
        if len(v) > 8:
            items.append("...")
        return "[" + ", ".join(items) + "]"
    if hasattr(v, "isoformat"):
        return f"{v.isoformat()} (a date/time)"
    return repr(v)


def _show(v, limit=70):
    s = _toml_repr(v)
    return s if len(s) <= limit else s[: limit - 3] + "..."


def _quoted_list(options):
    q = [f'"{o}"' for o in options]
    return q[0] if len(q) == 1 else ", ".join(q[:-1]) + " or " + q[-1]


def _hint(word, options):
    """A ``; did you mean 'x'?`` suffix, or "" when nothing is close."""
    word = str(word)
    by_lower = {o.lower(): o for o in options}
    match = by_lower.get(word.lower())
    if match is None:
        close = difflib.get_close_matches(word, list(options), n=1, cutoff=0.6)
        if not close:
            close = difflib.get_close_matches(word.lower(), list(by_lower), n=1, cutoff=0.6)
            close = [by_lower[c] for c in close]
        match = close[0] if close else None
    return f"; did you mean '{match}'?" if match else ""


def _check_keys(table, allowed, path, errs, special=None):
    special = special or {}
    for key in table:
        if key in allowed:
            continue
        if key in special:
            _err(errs, _join(path, key), special[key])
            continue
        hint = _hint(key, allowed)
        sep = " " if hint else "; "
        _err(errs, _join(path, key),
             f"unknown key{hint}{sep}valid keys here: {', '.join(allowed)}")


# ---------------------------------------------------------------------------
# value readers: each returns the parsed value, or None after adding a message
# ---------------------------------------------------------------------------

def _is_number(v):
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _finite(v):
    """``v`` as a float if it is a finite, not absurdly large number, else None."""
    if not _is_number(v):
        return None
    try:
        x = float(v)
    except OverflowError:
        return None
    if not math.isfinite(x) or abs(x) > MAX_MAGNITUDE:
        return None
    return x


def _number(v, path, errs, what):
    x = _finite(v)
    if x is not None:
        return x
    if _is_number(v):
        why = ("NaN and infinite values are not allowed" if isinstance(v, float)
               and not math.isfinite(v) else f"numbers must be at most {MAX_MAGNITUDE:g} "
               "in size")
        _err(errs, path, f"expected {what}, got {_show(v)} ({why})")
    else:
        _err(errs, path, f"expected {what}, got {_show(v)}")
    return None


def _field(table, key, path, errs, what, required=True, missing_hint=""):
    """Read a numeric field; None when absent (after a message if required) or bad."""
    full = _join(path, key)
    if key not in table:
        if required:
            _err(errs, full, f"missing; expected {what}{missing_hint}")
        return None
    return _number(table[key], full, errs, what)


def _vector(v, path, errs, names=("x", "y")):
    what = f"two finite numbers [{', '.join(names)}]"
    if isinstance(v, list) and len(v) == 2:
        xs = [_finite(c) for c in v]
        if all(x is not None for x in xs):
            return (xs[0], xs[1])
    _err(errs, path, f"expected {what}, got {_show(v)}")
    return None


def _ring(v, path, errs, what="polygon"):
    shape = "an array of at least 3 points [[x, y], ...]"
    if not isinstance(v, list):
        _err(errs, path, f"expected {shape} for the {what}, got {_show(v)}")
        return None
    if len(v) < 3:
        _err(errs, path, f"expected {shape} for the {what}, got {len(v)} point"
                         f"{'' if len(v) == 1 else 's'}")
        return None
    pts = [_vector(p, f"{path}[{i}]", errs) for i, p in enumerate(v, 1)]
    if any(p is None for p in pts):
        return None
    return tuple(pts)


def _segment(v, path, errs):
    if not (isinstance(v, list) and len(v) == 2):
        _err(errs, path, f"expected two points [[x0, y0], [x1, y1]], got {_show(v)}")
        return None
    a = _vector(v[0], f"{path}[1]", errs)
    b = _vector(v[1], f"{path}[2]", errs)
    if a is None or b is None:
        return None
    if math.hypot(b[0] - a[0], b[1] - a[1]) == 0.0:
        _err(errs, path, f"the segment has zero length: both ends are at {_pt(a)}")
        return None
    return (a, b)


def _box(v, path, errs):
    if not (isinstance(v, list) and len(v) == 4 and all(_finite(c) is not None for c in v)):
        _err(errs, path, f"expected four finite numbers [x0, y0, x1, y1], got {_show(v)}")
        return None
    x0, y0, x1, y1 = (float(c) for c in v)
    bad = []
    if not x1 > x0:
        bad.append(f"x1 > x0 (got x0 = {_g(x0)}, x1 = {_g(x1)})")
    if not y1 > y0:
        bad.append(f"y1 > y0 (got y0 = {_g(y0)}, y1 = {_g(y1)})")
    if bad:
        _err(errs, path, "a box [x0, y0, x1, y1] needs " + " and ".join(bad))
        return None
    return (x0, y0, x1, y1)


def _circle(v, path, errs, lu):
    if not (isinstance(v, list) and len(v) == 3 and all(_finite(c) is not None for c in v)):
        _err(errs, path, f"expected three finite numbers [cx, cy, r], got {_show(v)}")
        return None
    cx, cy, r = (float(c) for c in v)
    if not r > 0:
        _err(errs, path, f"the radius r must be > 0 {lu}, got {_g(r)}")
        return None
    return (cx, cy, r)


# Words users may write for a valid value; only used to suggest the right one.
_ALIASES = {"void": "empty", "hole": "empty", "none": "empty", "full": "solid",
            "material": "solid", "both": "xy", "yx": "xy", "all": "xy", "xz": "xy",
            "fixed": "xy", "pinned": "xy", "level-set": "levelset", "level_set": "levelset",
            "simp": "density", "beso": "evolutionary", "evolution": "evolutionary"}


def _choice(v, path, errs, options, what):
    if isinstance(v, str) and v in options:
        return v
    hint = ""
    if isinstance(v, str):
        alias = _ALIASES.get(v.strip().lower())
        hint = f"; did you mean '{alias}'?" if alias in options else _hint(v, options)
    _err(errs, path, f"expected {what}: {_quoted_list(options)}, got {_show(v)}{hint}")
    return None


def _flag(table, key, path, errs):
    """An optional true/false; None when absent or bad."""
    if key not in table:
        return None
    v = table[key]
    if isinstance(v, bool):
        return v
    _err(errs, _join(path, key), f"expected true or false, got {_show(v)}")
    return None


def _text(v, path, errs, allow_empty=True):
    if isinstance(v, str) and (allow_empty or v.strip()):
        return v
    _err(errs, path, f"expected a {'' if allow_empty else 'non-empty '}string, "
                     f"got {_show(v)}")
    return None


def _optional_text(table, key, path, errs, default, allow_empty=True):
    if key not in table:
        return default
    v = _text(table[key], _join(path, key), errs, allow_empty)
    return default if v is None else v


def _make_polygon(shell, holes=()):
    """``(polygon, None)`` or ``(None, why)`` for a ring that is no simple polygon."""
    try:
        poly = Polygon(shell, holes)
    except Exception:  # shapely refuses rings with too few distinct points
        return None, "has too few distinct points"
    if not poly.is_valid:
        why = explain_validity(poly)
        why = re.sub(r"\[(\S+) (\S+)\]",
                     lambda m: f" at ({_g(float(m[1]))}, {_g(float(m[2]))})", why)
        return None, f"is not a simple polygon ({why})"
    if not poly.area > 0:
        return None, "has zero area (are all points on one line?)"
    return poly, None


# ---------------------------------------------------------------------------
# sections
# ---------------------------------------------------------------------------

def _section(data, key, errs, missing=None):
    """The table under ``key``; None when absent (message if ``missing``) or not a table."""
    if key not in data:
        if missing:
            _err(errs, key, f"missing; {missing}")
        return None
    v = data[key]
    if isinstance(v, list) and v and all(isinstance(x, dict) for x in v):
        _err(errs, key, f"expected one [{key}] table, got an array of tables; write "
                        f"[{key}] instead of [[{key}]]")
        return None
    if not isinstance(v, dict):
        _err(errs, key, f"expected a [{key}] table, got {_show(v)}")
        return None
    return v


def _parse_units(data, errs):
    t = _section(data, "units", errs)
    if t is None:
        return Units()
    _check_keys(t, _UNITS_KEYS, "units", errs)
    got = {}
    for key, example in (("length", '"mm", "m" or "in"'), ("force", '"N", "kN" or "lbf"')):
        if key not in t:
            continue
        v = t[key]
        if (isinstance(v, str) and 0 < len(v) <= MAX_UNIT_CHARS and v.isprintable()
                and not any(c.isspace() for c in v)):
            got[key] = v
        else:
            _err(errs, f"units.{key}", f"expected a short unit name such as {example} "
                                       f"(1 to {MAX_UNIT_CHARS} characters, no spaces), "
                                       f"got {_show(v)}")
    return Units(**got)


def _parse_material(data, units, errs):
    t = _section(data, "material", errs,
                 missing="add a [material] table with E, nu and thickness")
    if t is None:
        return None
    _check_keys(t, _MATERIAL_KEYS, "material", errs)
    E = _field(t, "E", "material", errs, f"Young's modulus, a number in {units.stress}")
    nu = _field(t, "nu", "material", errs, "Poisson's ratio, a number")
    th = _field(t, "thickness", "material", errs,
                f"the plate thickness, a number in {units.length}")
    if E is not None and not E > 0:
        _err(errs, "material.E", f"Young's modulus must be > 0 {units.stress}, got {_g(E)}")
        E = None
    if nu is not None and not -1.0 < nu < 0.5:
        _err(errs, "material.nu", f"Poisson's ratio must lie between -1 and 0.5 (both "
                                  f"excluded) for an isotropic material, got {_g(nu)}")
        nu = None
    if th is not None and not th > 0:
        _err(errs, "material.thickness",
             f"the thickness must be > 0 {units.length}, got {_g(th)}")
        th = None
    if None in (E, nu, th):
        return None
    return Material(E=E, nu=nu, thickness=th)


def _outline_bounds(data):
    """(xmin, ymin, xmax, ymax) of the outline points, or None if they do not parse."""
    t = data.get("domain")
    if not isinstance(t, dict):
        return None
    pts = _ring(t.get("outline"), "", [])
    if pts is None:
        return None
    a = np.asarray(pts)
    return (a[:, 0].min(), a[:, 1].min(), a[:, 0].max(), a[:, 1].max())


def _parse_domain(data, units, errs):
    """``(Domain, shapely polygon with holes)``; parts are None when something is wrong."""
    t = _section(data, "domain", errs,
                 missing="add a [domain] table with outline = [[x, y], ...] and cell")
    if t is None:
        return None, None
    _check_keys(t, _DOMAIN_KEYS, "domain", errs)
    lu = units.length
    ok = True
    outline = None
    if "outline" in t:
        outline = _ring(t["outline"], "domain.outline", errs, "outline")
    else:
        _err(errs, "domain.outline", "missing; expected an array of at least 3 points "
                                     "[[x, y], ...] going around the plate")
    ok &= outline is not None

    holes = []
    if "holes" in t:
        v = t["holes"]
        if isinstance(v, list):
            for i, h in enumerate(v, 1):
                ring = _ring(h, f"domain.holes[{i}]", errs, "hole")
                ok &= ring is not None
                holes.append(ring)
        else:
            _err(errs, "domain.holes", f"expected an array of holes, each an array of "
                                       f"points [[[x, y], ...], ...], got {_show(v)}")
            ok = False

    cell = _field(t, "cell", "domain", errs, f"the grid cell size, a length in {lu}")
    if cell is not None and not cell > 0:
        _err(errs, "domain.cell", f"the cell size must be > 0 {lu}, got {_g(cell)}")
        cell = None
    ok &= cell is not None

    shell = None
    if outline is not None:
        shell, why = _make_polygon(outline)
        if why:
            _err(errs, "domain.outline", f"the outline {why}; list the corners in order "
                                         "around the plate so that no two edges cross")
            ok = False
    hole_shapes = []
    for i, ring in enumerate(holes, 1):
        if ring is None:
            continue
        hp, why = _make_polygon(ring)
        if why:
            _err(errs, f"domain.holes[{i}]", f"the hole {why}")
            ok = False
            continue
        if shell is not None and not shell.contains(hp):
            where = "lies outside" if not shell.intersects(hp) else "crosses"
            _err(errs, f"domain.holes[{i}]", f"the hole {where} domain.outline; every hole "
                                             "must lie inside the outline")
            ok = False
        for j, other in hole_shapes:
            if hp.intersection(other).area > 0:
                _err(errs, f"domain.holes[{i}]", f"the hole overlaps domain.holes[{j}]; "
                                                 "merge overlapping holes into one")
                ok = False
        hole_shapes.append((i, hp))

    if not ok:
        return None, None
    shape, why = _make_polygon(outline, [h for h in holes])
    if why:
        _err(errs, "domain.holes", f"the outline with its holes {why}; holes may touch the "
                                   "outline or each other at single points only")
        return None, None
    return Domain(outline=outline, holes=tuple(holes), cell=cell), shape


def _parse_array(data, key, parse_item, units, errs, missing):
    """Parse a ``[[key]]`` array of tables; returns the items that parsed, in order.

    A failed item is left out (its messages are already in ``errs``); the returned list
    carries ``complete = False`` in that case so later checks can stand back.
    """
    items = _Items()
    if key not in data:
        if missing:
            _err(errs, key, missing)
        return items
    v = data[key]
    if isinstance(v, dict):
        _err(errs, key, f"expected [[{key}]] tables (an array of tables), got a single "
                        f"table; write [[{key}]] instead of [{key}]")
        items.complete = False
        return items
    if not isinstance(v, list):
        _err(errs, key, f"expected [[{key}]] tables (an array of tables), got {_show(v)}")
        items.complete = False
        return items
    if not v and missing:
        _err(errs, key, missing)
    for i, t in enumerate(v, 1):
        path = f"{key}[{i}]"
        if not isinstance(t, dict):
            _err(errs, path, f"expected a table, got {_show(t)}")
            items.complete = False
            continue
        item = parse_item(t, path, units, errs)
        if item is None:
            items.complete = False
        else:
            items.append(item)
    return items


class _Items(list):
    """A list that remembers whether every entry parsed."""

    complete = True


def _location(t, path, errs, kinds, what):
    """Exactly one of ``kinds`` (point, segment, box) -> ``(kind, where)`` or None."""
    given = [k for k in kinds if k in t]
    spelled = {"point": "point = [x, y]", "segment": "segment = [[x0, y0], [x1, y1]]",
               "box": "box = [x0, y0, x1, y1]"}
    options = " or ".join(spelled[k] for k in kinds)
    if not given:
        _err(errs, path, f"no location; give exactly one of {options} for the {what}")
    elif len(given) > 1:
        _err(errs, path, f"several locations ({' and '.join(given)}); give exactly one of "
                         f"{', '.join(kinds)} for the {what}")
    parsed = {}
    for k in given:
        sub = f"{path}.{k}"
        if k == "point":
            parsed[k] = _vector(t[k], sub, errs)
        elif k == "segment":
            parsed[k] = _segment(t[k], sub, errs)
        else:
            parsed[k] = _box(t[k], sub, errs)
    if len(given) != 1 or parsed[given[0]] is None:
        return None
    return given[0], parsed[given[0]]


def _parse_support(t, path, units, errs):
    _check_keys(t, _SUPPORT_KEYS, path, errs,
                special={"force": "supports take no force; put forces in a [[load]] table",
                         "case": "supports hold in every load case; case belongs to "
                                 "[[load]] tables"})
    loc = _location(t, path, errs, ("point", "segment", "box"), "support")
    fix = None
    if "fix" in t:
        fix = _choice(t["fix"], f"{path}.fix", errs, FIXES, "the fixed directions")
    else:
        _err(errs, f"{path}.fix", f"missing; expected the fixed directions: "
                                  f"{_quoted_list(FIXES)}")
    pad_ok = "pad" not in t or isinstance(t["pad"], bool)
    pad = _flag(t, "pad", path, errs)
    if loc is None or fix is None or not pad_ok:
        return None
    return Support(kind=loc[0], where=loc[1], fix=fix, pad=pad, key=path)


def _parse_load(t, path, units, errs):
    _check_keys(t, _LOAD_KEYS, path, errs,
                special={"box": "loads go at a point or along a segment; box is for "
                                "supports and regions",
                         "fix": "loads fix nothing; fix belongs to [[support]] tables"})
    loc = _location(t, path, errs, ("point", "segment"), "load")
    kind = loc[0] if loc else None
    lu, fu = units.length, units.force
    force = None
    if kind == "point" and "force" not in t:
        if "force_per_length" in t:
            _err(errs, f"{path}.force_per_length", f"a point load takes force = [fx, fy] "
                                                   f"(a force in {fu}), not force_per_length")
        else:
            _err(errs, f"{path}.force", f"missing; a point load needs force = [fx, fy] "
                                        f"in {fu}")
    elif kind == "segment" and "force_per_length" not in t:
        if "force" in t:
            _err(errs, f"{path}.force", f"a segment load takes force_per_length = [qx, qy] "
                                        f"(in {fu}/{lu} along the segment), not force")
        else:
            _err(errs, f"{path}.force_per_length", f"missing; a segment load needs "
                                                   f"force_per_length = [qx, qy] in {fu}/{lu}")
    elif kind is not None and "force" in t and "force_per_length" in t:
        other = "force_per_length" if kind == "point" else "force"
        _err(errs, f"{path}.{other}", f"a {kind} load takes only "
                                      f"{'force' if kind == 'point' else 'force_per_length'}")
    for key, names in (("force", ("fx", "fy")), ("force_per_length", ("qx", "qy"))):
        if key not in t:
            continue
        vec = _vector(t[key], f"{path}.{key}", errs, names)
        if vec is not None and vec == (0.0, 0.0):
            _err(errs, f"{path}.{key}", f"the force is zero; give a nonzero "
                                        f"[{', '.join(names)}]")
            vec = None
        wanted = "force" if kind == "point" else "force_per_length"
        if key == wanted:
            force = vec
    case = "main"
    case_ok = True
    if "case" in t:
        c = _text(t["case"], f"{path}.case", errs, allow_empty=False)
        case_ok = c is not None
        case = c if c is not None else case
    pad_ok = "pad" not in t or isinstance(t["pad"], bool)
    pad = _flag(t, "pad", path, errs)
    if loc is None or force is None or not case_ok or not pad_ok:
        return None
    return Load(kind=kind, where=loc[1], force=force, case=case, pad=pad, key=path)


def _parse_case(t, path, units, errs):
    _check_keys(t, _CASE_KEYS, path, errs)
    name = None
    if "name" in t:
        name = _text(t["name"], f"{path}.name", errs, allow_empty=False)
    else:
        _err(errs, f"{path}.name", "missing; expected the case name, a non-empty string "
                                   "used by case = \"...\" in [[load]] tables")
    weight = 1.0
    if "weight" in t:
        weight = _number(t["weight"], f"{path}.weight", errs, "a finite number > 0")
        if weight is not None and not weight > 0:
            _err(errs, f"{path}.weight", f"the weight must be > 0, got {_g(weight)}")
            weight = None
    if name is None or weight is None:
        return None
    return LoadCase(name=name, weight=weight)


def _parse_region(t, path, units, errs):
    _check_keys(t, _REGION_KEYS, path, errs,
                special={"point": "a region is an area: use circle, box or polygon",
                         "segment": "a region is an area: use circle, box or polygon"})
    keep = None
    if "keep" in t:
        keep = _choice(t["keep"], f"{path}.keep", errs, KEEPS, "what to keep")
    else:
        _err(errs, f"{path}.keep", f"missing; expected what to keep: {_quoted_list(KEEPS)}")
    kinds = [k for k in ("circle", "box", "polygon") if k in t]
    if len(kinds) != 1:
        what = "no shape" if not kinds else f"several shapes ({' and '.join(kinds)})"
        _err(errs, path, f"{what}; give exactly one of circle = [cx, cy, r], "
                         "box = [x0, y0, x1, y1] or polygon = [[x, y], ...]")
    where = {}
    for k in kinds:
        sub = f"{path}.{k}"
        if k == "circle":
            where[k] = _circle(t[k], sub, errs, units.length)
        elif k == "box":
            where[k] = _box(t[k], sub, errs)
        else:
            ring = _ring(t[k], sub, errs, "region")
            if ring is not None:
                _, why = _make_polygon(ring)
                if why:
                    _err(errs, sub, f"the polygon {why}")
                    ring = None
            where[k] = ring
    if keep is None or len(kinds) != 1 or where[kinds[0]] is None:
        return None
    return Region(keep=keep, kind=kinds[0], where=where[kinds[0]], key=path)


def _parse_goal(data, errs):
    t = _section(data, "goal", errs,
                 missing="add a [goal] table with material = <target fraction, e.g. 0.4>")
    if t is None:
        return None
    _check_keys(t, _GOAL_KEYS, "goal", errs)
    m = _field(t, "material", "goal", errs,
               "the target material fraction of the domain area, a number between 0 and 1")
    if m is not None and not 0.0 < m < 1.0:
        _err(errs, "goal.material", f"the material fraction must lie between 0 and 1 (both "
                                    f"excluded), got {_g(m)}")
        m = None
    return None if m is None else Goal(material=m)


def _parse_fabrication(data, units, errs):
    """Fabrication limits, lengths, from a [fabrication] table or from [goal] (not both)."""
    found = {}
    for section in ("goal", "fabrication"):
        t = data.get(section)
        if section == "fabrication" and t is not None and not isinstance(t, dict):
            _err(errs, "fabrication", f"expected a table [fabrication], got {_show(t)}")
            continue
        if not isinstance(t, dict):
            continue
        if section == "fabrication":
            _check_keys(t, _FABRICATION_KEYS, "fabrication", errs)
        for key in _FABRICATION_KEYS:
            if key not in t:
                continue
            path = f"{section}.{key}"
            if key in found:
                _err(errs, path, f"also given as {found[key][0]}; give each limit once")
                continue
            v = _number(t[key], path, errs, f"a length in {units.length}")
            if v is not None and not v > 0:
                _err(errs, path, f"must be > 0 {units.length}, got {_g(v)}")
                v = None
            found[key] = (path, v)
    return Fabrication(**{k: v for k, (_, v) in found.items()})


def _check_load_paths(regions, supports, loads, domain, errs):
    """Keep-empty regions must not cut a load off from every support."""
    empties = [_region_shape(r) for r in regions if r.keep == "empty"]
    if not empties or not supports or not loads:
        return
    free = domain.difference(unary_union(empties))
    pieces = list(getattr(free, "geoms", [free]))
    held = {k for k, piece in enumerate(pieces)
            if any(piece.intersects(_shape_of(s)) for s in supports)}
    for ld in loads:
        shape = _shape_of(ld)
        touched = {k for k, piece in enumerate(pieces) if piece.intersects(shape)}
        if touched and not touched & held:
            _err(errs, ld.key, "the keep-empty regions cut this load off from every support: no "
                               "material could carry it; move or shrink the regions")


def _parse_method(data, units, errs):
    t = _section(data, "method", errs)
    if t is None:
        return Method() if "method" not in data else None
    _check_keys(t, _METHOD_KEYS, "method", errs)
    got, ok = {}, True

    def keep(key, value):
        nonlocal ok
        if value is None:
            ok = False
        else:
            got[key] = value

    if "name" in t:
        keep("name", _choice(t["name"], "method.name", errs, METHOD_NAMES, "a method name"))
    if "solver" in t:
        v = SOLVER_ALIASES.get(t["solver"], t["solver"]) if isinstance(t["solver"], str) else t["solver"]
        keep("solver", _choice(v, "method.solver", errs, SOLVERS, "a solver"))
    if "iterations" in t:
        v = t["iterations"]
        if isinstance(v, int) and not isinstance(v, bool) and 1 <= v <= MAX_ITERATIONS:
            keep("iterations", v)
        else:
            _err(errs, "method.iterations", f"expected a whole number from 1 to "
                                            f"{MAX_ITERATIONS}, got {_show(v)}")
            ok = False
    for key in ("seed_holes", "initial_holes", "pads"):
        if key in t:
            keep(key, _flag(t, key, "method", errs))
    for key in _METHOD_LENGTHS:
        if key in t:
            v = _number(t[key], f"method.{key}", errs, f"a length in {units.length}")
            if v is not None and not v > 0:
                _err(errs, f"method.{key}", f"must be > 0 {units.length}, got {_g(v)}")
                v = None
            keep(key, v)
    if "volume_step" in t:
        v = _number(t["volume_step"], "method.volume_step", errs,
                    "a fraction per iteration, a number")
        if v is not None and not 0.0 < v <= 0.5:
            _err(errs, "method.volume_step", f"must lie in (0, 0.5] (greater than 0, at "
                                             f"most 0.5), got {_g(v)}")
            v = None
        keep("volume_step", v)
    if "ersatz" in t:
        v = _number(t["ersatz"], "method.ersatz", errs,
                    "the void stiffness ratio, a number")
        if v is not None and not 1e-9 <= v <= 0.1:
            _err(errs, "method.ersatz", f"must lie in [1e-9, 0.1], got {_g(v)}")
            v = None
        keep("ersatz", v)
    if "penalty" in t:
        v = _number(t["penalty"], "method.penalty", errs, "the SIMP penalty exponent, a number")
        if v is not None and not 1.0 <= v <= 10.0:
            _err(errs, "method.penalty", f"must lie in [1, 10], got {_g(v)}")
            v = None
        keep("penalty", v)
    if "filter" in t:
        keep("filter", _choice(t["filter"], "method.filter", errs, FILTERS, "a filter"))
    if "projection" in t:
        keep("projection", _flag(t, "projection", "method", errs))
    for key, (low, high, what) in _METHOD_FRACTIONS.items():
        if key in t:
            v = _number(t[key], f"method.{key}", errs, what)
            if v is not None and not low < v <= high:
                _err(errs, f"method.{key}", f"must lie in ({_g(low)}, {_g(high)}] (greater than "
                                            f"{_g(low)}, at most {_g(high)}), got {_g(v)}")
                v = None
            keep(key, v)
    if (ok and got.get("name") == "density" and got.get("projection")
            and got.get("filter") == "sensitivity"):
        _err(errs, "method.projection", 'projection acts on filtered densities: it needs '
                                        'filter = "density", got filter = "sensitivity"')
        ok = False
    return Method(**got) if ok else None


# ---------------------------------------------------------------------------
# checks across sections
# ---------------------------------------------------------------------------

def _check_cases(data, declared, loads, errs):
    """The load cases of the problem; declared ones are checked against the loads."""
    if "case" not in data or data["case"] == []:
        names = list(dict.fromkeys(ld.case for ld in loads))
        return [LoadCase(name=n, weight=1.0) for n in names]
    raw = data["case"] if isinstance(data["case"], list) else []
    seen = {}
    for i, t in enumerate(raw, 1):
        name = t.get("name") if isinstance(t, dict) else None
        if not isinstance(name, str) or not name.strip():
            continue
        if name in seen:
            _err(errs, f"case[{i}].name", f'case "{name}" is already declared in '
                                          f"case[{seen[name]}]; case names must be unique")
        else:
            seen[name] = i
    if not seen:
        return list(declared)
    names = ", ".join(f'"{n}"' for n in seen)
    for ld in loads:
        if ld.case not in seen:
            given = "case" in _raw_item(data, ld.key)
            what = (f'case "{ld.case}" is not declared' if given
                    else f'no case given, so the load belongs to case "{ld.case}", which '
                         "is not declared")
            _err(errs, f"{ld.key}.case" if given else ld.key,
                 f"{what}; declared [[case]] names: {names}")
    used = {ld.case for ld in loads}
    if getattr(loads, "complete", True):
        for n, i in seen.items():
            if n not in used:
                _err(errs, f"case[{i}]", f'case "{n}" has no loads; add loads with '
                                         f'case = "{n}" or remove the case')
    return list(declared)


def _raw_item(data, key):
    m = re.fullmatch(r"(\w+)\[(\d+)\]", key)
    arr = data.get(m[1]) if m else None
    try:
        t = arr[int(m[2]) - 1]
    except (TypeError, IndexError):
        return {}
    return t if isinstance(t, dict) else {}


def _shape_of(item):
    """A support or load location as shapely geometry."""
    if item.kind == "point":
        return _ShapelyPoint(item.where)
    if item.kind == "segment":
        return LineString(item.where)
    return _shapely_box(*item.where)


def _region_shape(r):
    if r.kind == "circle":
        cx, cy, rad = r.where
        return _ShapelyPoint(cx, cy).buffer(rad, quad_segs=32)
    if r.kind == "box":
        return _shapely_box(*r.where)
    return Polygon(r.where)


def _check_placement(supports, loads, domain, cell, units, errs):
    """Every support and load must touch the domain (points within cell/2 of it).

    Returns whether all supports do.
    """
    lu = units.length
    x0, y0, x1, y1 = domain.bounds
    tol = max(0.5 * cell, 1e-9 * max(x1 - x0, y1 - y0))  # never below rounding noise
    grown = None
    supports_ok = True
    for item in list(supports) + list(loads):
        before = len(errs)
        path = f"{item.key}.{item.kind}"
        geom = _shape_of(item)
        if item.kind == "point":
            d = domain.distance(geom)
            if d > tol:
                _err(errs, path, f"{_pt(item.where)} lies {_g(d)} {lu} outside the domain; "
                                 f"a point must be within cell/2 = {_g(tol)} {lu} of it "
                                 "(holes count as outside)")
        elif item.kind == "segment":
            if grown is None:
                grown = domain.buffer(tol)
            if not (domain.covers(geom) or grown.covers(geom)):
                out = geom.difference(domain).length
                _err(errs, path, f"{_g(out)} {lu} of the segment's {_g(geom.length)} {lu} "
                                 f"lie outside the domain; the whole segment must be within "
                                 f"cell/2 = {_g(tol)} {lu} of it")
        elif not geom.intersects(domain):
            _err(errs, path, f"the box {_show(list(item.where))} does not touch the domain")
        if isinstance(item, Support) and len(errs) > before:
            supports_ok = False
    return supports_ok


def _support_points(s, bounds):
    """Points whose fixed directions stand for support ``s`` in the rigid-body check."""
    if s.kind == "point":
        return [s.where]
    if s.kind == "segment":
        return list(s.where)
    x0, y0, x1, y1 = s.where
    if bounds is not None:
        x0, y0 = max(x0, bounds[0]), max(y0, bounds[1])
        x1, y1 = min(x1, bounds[2]), min(y1, bounds[3])
        if x1 < x0 or y1 < y0:
            return []
    return [(x0, y0), (x1, y0), (x1, y1), (x0, y1)]


def _check_rigid_body(supports, domain, bounds, errs):
    """Refuse a support set that lets the plate slide or turn as a rigid body.

    A plane rigid motion is u = a (1, 0) + b (0, 1) + c (-y, x). Fixing x at (x, y)
    imposes a - c y = 0, fixing y imposes b + c x = 0; the supports hold the plate
    when these rows have rank 3. Coordinates are shifted and scaled by the domain size
    so the rank tolerance is relative to it.
    """
    if not supports or not getattr(supports, "complete", True):
        return
    if domain is not None:
        bounds = domain.bounds
    pts = [p for s in supports for p in _support_points(s, bounds)]
    if bounds is None:
        if not pts:
            return
        a = np.asarray(pts)
        bounds = (a[:, 0].min(), a[:, 1].min(), a[:, 0].max(), a[:, 1].max())
    xc, yc = 0.5 * (bounds[0] + bounds[2]), 0.5 * (bounds[1] + bounds[3])
    size = max(bounds[2] - bounds[0], bounds[3] - bounds[1])
    size = size if size > 0 else 1.0
    rows = []
    for s in supports:
        for x, y in _support_points(s, bounds):
            xs, ys = (x - xc) / size, (y - yc) / size
            if "x" in s.fix:
                rows.append([1.0, 0.0, -ys])
            if "y" in s.fix:
                rows.append([0.0, 1.0, xs])
    if not rows:
        return
    A = np.asarray(rows)
    tol = 1e-9 * max(1.0, math.sqrt(len(rows)))
    rank = int(np.linalg.matrix_rank(A, tol=tol))
    if rank >= 3:
        return
    has_x = any(r[0] for r in rows)
    has_y = any(r[1] for r in rows)
    if rank == 2:
        v = np.linalg.svd(A)[2][-1]
        a, b, c = v
        if abs(c) > 1e-9 * np.abs(v).sum():
            digits = 6 - math.floor(math.log10(size))  # drop rounding noise
            centre = (round(xc - b / c * size, digits) + 0.0,
                      round(yc + a / c * size, digits) + 0.0)
            free = f"rotate about {_pt(centre)}"
        else:
            free = "slide in x" if not has_x else "slide in y"
    else:
        slide = "slide in y" if has_x else "slide in x"
        free = f"{slide} and to rotate"
    _err(errs, "support", f"the supports leave the part free to {free}; add supports or "
                          "fixed directions so that sliding in x, sliding in y and rotation "
                          'are all stopped (for example fix = "xy" at two separate points)')


def _check_regions(regions, supports, loads, domain, goal, units, errs):
    """Keep regions must not contradict each other, the loads, supports or the goal."""
    if not regions:
        return
    lu = units.length
    shapes = [(r, _region_shape(r)) for r in regions]
    solids = [(r, g) for r, g in shapes if r.keep == "solid"]
    empties = [(r, g) for r, g in shapes if r.keep == "empty"]
    for re_, ge in empties:
        for rs, gs in solids:
            overlap = ge.intersection(gs).area
            if overlap > 1e-9 * min(ge.area, gs.area):
                _err(errs, re_.key, f"this keep-empty region overlaps the keep-solid region "
                                    f"{rs.key} (by {_g(overlap)} {lu}^2); a spot cannot be "
                                    "both")
        for item in list(supports) + list(loads):
            geom = _shape_of(item)
            if ge.relate_pattern(geom, "T********"):
                what = "support" if isinstance(item, Support) else "load"
                _err(errs, re_.key, f"this keep-empty region covers {what} {item.key}; "
                                    f"a {what} needs material under it")
    if domain is None:
        return
    for r, g in shapes:
        if not g.intersection(domain).area > 0:
            _err(errs, r.key, "the region lies outside the domain, so it has no effect; "
                              "check its coordinates")
    if goal is None:
        return
    total = domain.area
    target = goal.material
    if solids:
        solid = unary_union([g for _, g in solids]).intersection(domain).area / total
        if solid >= target:
            _err(errs, "goal.material", f"the keep-solid regions alone fill {solid:.1%} of "
                                        f"the domain, not less than the target {target:.1%}; "
                                        "raise goal.material or shrink the regions")
    if empties:
        left = domain.difference(unary_union([g for _, g in empties])).area / total
        if left <= target:
            _err(errs, "goal.material", f"the keep-empty regions leave only {left:.1%} of the "
                                        f"domain, not more than the target {target:.1%}; "
                                        "lower goal.material or shrink the regions")


def _round_sig(x, up):
    """``x`` rounded up or down to 3 significant digits."""
    step = 10.0 ** (math.floor(math.log10(x)) - 2)
    n = math.ceil(x / step) if up else math.floor(x / step)
    return float(f"{n * step:.3g}")


def _check_grid(domain, cell, units, errs):
    """The grid must resolve the domain (>= 4 cells across) and fit into memory."""
    lu = units.length
    x0, y0, x1, y1 = domain.bounds
    narrow = min(x1 - x0, y1 - y0)
    across = narrow / cell
    if across < MIN_CELLS_ACROSS:
        largest = _round_sig(narrow / MIN_CELLS_ACROSS, up=False)
        _err(errs, "domain.cell", f"a cell of {_g(cell)} {lu} gives only {across:.3g} cells "
                                  f"across the domain's narrower side ({_g(narrow)} {lu}); "
                                  f"use a cell of at most {_g(largest)} {lu} (at least "
                                  f"{MIN_CELLS_ACROSS} cells across)")
        return
    area = domain.area
    wanted = area / cell / cell  # may be inf for absurdly small cells; that is fine
    n_cells = min(wanted, 1e15)  # beyond this the estimate only grows
    need = resources.estimate_memory_bytes(int(math.ceil(n_cells)))
    have = resources.available_memory_bytes()
    if need <= have:
        return
    gib = 1024.0**3
    if resources.estimate_memory_bytes(1) > have:
        _err(errs, "domain.cell", f"only {have / gib:.2f} GiB of memory is available, too "
                                  "little for any grid")
        return
    lo, hi = 1, int(math.ceil(n_cells))  # estimate(lo) fits, estimate(hi) does not
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if resources.estimate_memory_bytes(mid) <= have:
            lo = mid
        else:
            hi = mid
    smallest = _round_sig(math.sqrt(area / lo), up=True)
    count = "more than 1e+15" if wanted > 1e15 else f"about {wanted:.3g}"
    _err(errs, "domain.cell", f"a cell of {_g(cell)} {lu} gives {count} cells, "
                              f"estimated to need {need / gib:.1f} GiB of memory, but "
                              f"{have / gib:.1f} GiB is available; use a cell of at least "
                              f"{_g(smallest)} {lu}")


# ---------------------------------------------------------------------------

def _toml_error_message(label, exc, text):
    """One message naming line and column of a TOML syntax error."""
    msg = str(exc)
    line = getattr(exc, "lineno", None)
    col = getattr(exc, "colno", None)
    m = re.search(r"\s*\(at line (\d+), column (\d+)\)\s*$", msg)
    if m:
        line, col = int(m[1]), int(m[2])
        msg = msg[: m.start()]
    elif msg.rstrip().endswith("(at end of document)"):
        msg = msg.rstrip()[: -len("(at end of document)")].rstrip()
        lines = text.splitlines() or [""]
        line, col = len(lines), len(lines[-1]) + 1
    msg = getattr(exc, "msg", None) or msg
    where = f", line {line}, column {col}" if line else ""
    shown = ""
    if line:
        lines = text.splitlines()
        if 0 < line <= len(lines) and lines[line - 1].strip():
            src = lines[line - 1].strip()
            shown = f" (the line reads: {src if len(src) <= 60 else src[:57] + '...'})"
    return f"{label}{where}: not valid TOML: {msg[:1].lower()}{msg[1:]}{shown}"
