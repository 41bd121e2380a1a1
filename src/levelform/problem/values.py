"""Readers of single values in a problem table: numbers, points, segments, boxes, circles,
rings, choices, flags and text; and the check of a table's keys.

Each reader returns the value in the form ``levelform.spec`` keeps it (floats, tuples), or
None after adding a message naming its key path to ``errs``.
"""
from __future__ import annotations

import math
import re

from shapely.geometry import Polygon
from shapely.validation import explain_validity

from .messages import (
    add_error,
    join_key,
    number_text,
    point_text,
    quoted_list,
    show,
    spelling_hint,
)

__all__ = ["MAX_MAGNITUDE", "check_keys", "finite_float", "is_number", "make_polygon", "read_box",
           "read_choice", "read_circle", "read_field", "read_flag", "read_number",
           "read_optional_text", "read_ring", "read_segment", "read_text", "read_vector"]

MAX_MAGNITUDE = 1e100  # keeps squares and areas far from float overflow


def check_keys(table, allowed, path, errs, special=None):
    """Report every key of ``table`` that is not allowed there.

    Parameters
    ----------
    table : dict
        The table as parsed.
    allowed : sequence of str
        The valid keys, listed in the message.
    path : str
        The table's key path ("" at the top level).
    errs : list of str
        Messages so far; a message naming ``path`` is added on failure.
    special : dict, optional
        Key -> message for known misplaced keys (``force`` in a support, ...), used instead
        of the generic "unknown key" message.
    """
    special = special or {}
    for key in table:
        if key in allowed:
            continue
        if key in special:
            add_error(errs, join_key(path, key), special[key])
            continue
        hint = spelling_hint(key, allowed)
        sep = " " if hint else "; "
        add_error(errs, join_key(path, key),
                  f"unknown key{hint}{sep}valid keys here: {', '.join(allowed)}")


def is_number(v):
    """Whether ``v`` is an int or float (booleans, which TOML keeps apart, are not).

    Parameters
    ----------
    v : object

    Returns
    -------
    bool
    """
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def finite_float(v):
    """``v`` as a float if it is a finite number of at most ``MAX_MAGNITUDE`` in size.

    Parameters
    ----------
    v : object

    Returns
    -------
    float or None
        None for anything else (text, booleans, NaN, infinities, huge integers).
    """
    if not is_number(v):
        return None
    try:
        x = float(v)
    except OverflowError:
        return None
    if not math.isfinite(x) or abs(x) > MAX_MAGNITUDE:
        return None
    return x


def read_number(v, path, errs, what):
    """A finite number, as :func:`finite_float`.

    Parameters
    ----------
    v : object
        The value as parsed.
    path : str
        Its key path.
    errs : list of str
        Messages so far; a message naming ``path`` is added on failure.
    what : str
        What was expected, for the message ("a length in mm").

    Returns
    -------
    float or None
    """
    x = finite_float(v)
    if x is not None:
        return x
    if is_number(v):
        why = ("NaN and infinite values are not allowed" if isinstance(v, float)
               and not math.isfinite(v) else f"numbers must be at most {MAX_MAGNITUDE:g} "
               "in size")
        add_error(errs, path, f"expected {what}, got {show(v)} ({why})")
    else:
        add_error(errs, path, f"expected {what}, got {show(v)}")
    return None


def read_field(table, key, path, errs, what, required=True, missing_hint=""):
    """The number under ``key`` of ``table``.

    Parameters
    ----------
    table : dict
    key : str
    path : str
        The table's key path.
    errs : list of str
        Messages so far; a message naming ``path`` is added on failure.
    what : str
        What was expected, for the message.
    required : bool, optional
        Whether a missing key is a mistake (then reported) or left to a default.
    missing_hint : str, optional
        Appended to the "missing" message.

    Returns
    -------
    float or None
        None when the key is absent or its value is no finite number.
    """
    full = join_key(path, key)
    if key not in table:
        if required:
            add_error(errs, full, f"missing; expected {what}{missing_hint}")
        return None
    return read_number(table[key], full, errs, what)


def read_vector(v, path, errs, names=("x", "y")):
    """A pair of finite numbers, ``[x, y]`` in the file.

    Parameters
    ----------
    v : object
    path : str
    errs : list of str
        Messages so far; a message naming ``path`` is added on failure.
    names : tuple of str, optional
        The components' names for the message ("fx", "fy").

    Returns
    -------
    tuple of float or None
    """
    what = f"two finite numbers [{', '.join(names)}]"
    if isinstance(v, list) and len(v) == 2:
        xs = [finite_float(c) for c in v]
        if all(x is not None for x in xs):
            return (xs[0], xs[1])
    add_error(errs, path, f"expected {what}, got {show(v)}")
    return None


def read_ring(v, path, errs, what="polygon"):
    """A ring of at least 3 points ``[[x, y], ...]``; each bad point is reported.

    Parameters
    ----------
    v : object
    path : str
    errs : list of str
        Messages so far; a message naming ``path`` is added on failure.
    what : str, optional
        What the ring outlines ("outline", "hole", "region").

    Returns
    -------
    tuple of (float, float) or None
    """
    shape = "an array of at least 3 points [[x, y], ...]"
    if not isinstance(v, list):
        add_error(errs, path, f"expected {shape} for the {what}, got {show(v)}")
        return None
    if len(v) < 3:
        add_error(errs, path, f"expected {shape} for the {what}, got {len(v)} point"
                              f"{'' if len(v) == 1 else 's'}")
        return None
    pts = [read_vector(p, f"{path}[{i}]", errs) for i, p in enumerate(v, 1)]
    if any(p is None for p in pts):
        return None
    return tuple(pts)


def read_segment(v, path, errs):
    """A segment ``[[x0, y0], [x1, y1]]`` of nonzero length.

    Parameters
    ----------
    v : object
    path : str
    errs : list of str
        Messages so far; a message naming ``path`` is added on failure.

    Returns
    -------
    tuple of two points or None
    """
    if not (isinstance(v, list) and len(v) == 2):
        add_error(errs, path, f"expected two points [[x0, y0], [x1, y1]], got {show(v)}")
        return None
    a = read_vector(v[0], f"{path}[1]", errs)
    b = read_vector(v[1], f"{path}[2]", errs)
    if a is None or b is None:
        return None
    if math.hypot(b[0] - a[0], b[1] - a[1]) == 0.0:
        add_error(errs, path, f"the segment has zero length: both ends are at {point_text(a)}")
        return None
    return (a, b)


def read_box(v, path, errs):
    """A box ``[x0, y0, x1, y1]`` with x1 > x0 and y1 > y0.

    Parameters
    ----------
    v : object
    path : str
    errs : list of str
        Messages so far; a message naming ``path`` is added on failure.

    Returns
    -------
    tuple of four floats or None
    """
    if not (isinstance(v, list) and len(v) == 4 and all(finite_float(c) is not None for c in v)):
        add_error(errs, path, f"expected four finite numbers [x0, y0, x1, y1], got {show(v)}")
        return None
    x0, y0, x1, y1 = (float(c) for c in v)
    bad = []
    if not x1 > x0:
        bad.append(f"x1 > x0 (got x0 = {number_text(x0)}, x1 = {number_text(x1)})")
    if not y1 > y0:
        bad.append(f"y1 > y0 (got y0 = {number_text(y0)}, y1 = {number_text(y1)})")
    if bad:
        add_error(errs, path, "a box [x0, y0, x1, y1] needs " + " and ".join(bad))
        return None
    return (x0, y0, x1, y1)


def read_circle(v, path, errs, lu):
    """A circle ``[cx, cy, r]`` with r > 0.

    Parameters
    ----------
    v : object
    path : str
    errs : list of str
        Messages so far; a message naming ``path`` is added on failure.
    lu : str
        The length unit, for the message.

    Returns
    -------
    tuple of three floats or None
    """
    if not (isinstance(v, list) and len(v) == 3 and all(finite_float(c) is not None for c in v)):
        add_error(errs, path, f"expected three finite numbers [cx, cy, r], got {show(v)}")
        return None
    cx, cy, r = (float(c) for c in v)
    if not r > 0:
        add_error(errs, path, f"the radius r must be > 0 {lu}, got {number_text(r)}")
        return None
    return (cx, cy, r)


_ALIASES = {"void": "empty", "hole": "empty", "none": "empty", "full": "solid",
            "material": "solid", "both": "xy", "yx": "xy", "all": "xy", "xz": "xy",
            "fixed": "xy", "pinned": "xy", "level-set": "levelset", "level_set": "levelset",
            "simp": "density", "beso": "evolutionary", "evolution": "evolutionary"}


def read_choice(v, path, errs, options, what):
    """One of ``options``, spelt exactly.

    A wrong word gets a hint: the valid word for a common synonym (``void`` -> 'empty',
    ``SIMP`` -> 'density'), else a close spelling
    (:func:`~levelform.problem.messages.spelling_hint`).

    Parameters
    ----------
    v : object
    path : str
    errs : list of str
        Messages so far; a message naming ``path`` is added on failure.
    options : sequence of str
    what : str
        What is chosen, for the message ("the fixed directions").

    Returns
    -------
    str or None
    """
    if isinstance(v, str) and v in options:
        return v
    hint = ""
    if isinstance(v, str):
        alias = _ALIASES.get(v.strip().lower())
        hint = f"; did you mean '{alias}'?" if alias in options else spelling_hint(v, options)
    add_error(errs, path, f"expected {what}: {quoted_list(options)}, got {show(v)}{hint}")
    return None


def read_flag(table, key, path, errs):
    """An optional true/false under ``key`` of ``table``.

    Parameters
    ----------
    table : dict
    key : str
    path : str
        The table's key path.
    errs : list of str
        Messages so far; a message naming ``path`` is added on failure.

    Returns
    -------
    bool or None
        None when the key is absent or not a boolean.
    """
    if key not in table:
        return None
    v = table[key]
    if isinstance(v, bool):
        return v
    add_error(errs, join_key(path, key), f"expected true or false, got {show(v)}")
    return None


def read_text(v, path, errs, allow_empty=True):
    """A string.

    Parameters
    ----------
    v : object
    path : str
    errs : list of str
        Messages so far; a message naming ``path`` is added on failure.
    allow_empty : bool, optional
        Whether "" (or only spaces) is accepted.

    Returns
    -------
    str or None
    """
    if isinstance(v, str) and (allow_empty or v.strip()):
        return v
    add_error(errs, path, f"expected a {'' if allow_empty else 'non-empty '}string, "
                          f"got {show(v)}")
    return None


def read_optional_text(table, key, path, errs, default, allow_empty=True):
    """The string under ``key`` of ``table``, or ``default``.

    Parameters
    ----------
    table : dict
    key : str
    path : str
        The table's key path.
    errs : list of str
        Messages so far; a message naming ``path`` is added on failure.
    default : object
        Returned when the key is absent or its value is bad (which is reported).
    allow_empty : bool, optional

    Returns
    -------
    str or object
    """
    if key not in table:
        return default
    v = read_text(table[key], join_key(path, key), errs, allow_empty)
    return default if v is None else v


def make_polygon(shell, holes=()):
    """A simple polygon from a ring and holes, or why there is none.

    Parameters
    ----------
    shell : sequence of (x, y)
    holes : sequence of rings, optional

    Returns
    -------
    tuple
        ``(polygon, None)``, or ``(None, why)`` where ``why`` completes the sentence
        "the outline ..." (self-crossing with the place, too few points, zero area).
    """
    try:
        poly = Polygon(shell, holes)
    except Exception:  # shapely refuses rings with too few distinct points
        return None, "has too few distinct points"
    if not poly.is_valid:
        why = explain_validity(poly)
        why = re.sub(r"\[(\S+) (\S+)\]",
                     lambda m: f" at ({number_text(float(m[1]))}, {number_text(float(m[2]))})", why)
        return None, f"is not a simple polygon ({why})"
    if not poly.area > 0:
        return None, "has zero area (are all points on one line?)"
    return poly, None
