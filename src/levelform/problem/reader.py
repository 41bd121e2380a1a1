"""Read a TOML problem file into the frozen values of ``levelform.spec``.

Every mistake in a file is collected before anything is raised, so the user can fix them
all in one go. Each message starts with the key path, with 1-based indices as users count
(``load[2].force``), then says what was found and what would be valid. The format itself
is documented in docs/problem-format.md.

This module reads the sections, one function each; single values are read by
``values``, the checks across sections are in ``checks``, and the wording of messages
in ``messages``.
"""
from __future__ import annotations

import sys
from pathlib import Path

from dataclasses import replace

import numpy as np
from shapely.geometry import Polygon

from ..methods.registry import method_names
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
from .checks import (
    check_cases,
    check_grid,
    check_load_paths,
    check_placement,
    check_regions,
    check_rigid_body,
)
from .patterns import (
    PROCESSES,
    apply_bolts,
    border_region,
    check_pattern,
    parse_bolts,
    parse_export,
    parse_pattern,
    process_defaults,
)
from .messages import add_error, number_text, quoted_list, show, toml_error_message
from .values import (
    check_keys,
    make_polygon,
    read_box,
    read_choice,
    read_circle,
    read_field,
    read_flag,
    read_number,
    read_optional_text,
    read_ring,
    read_segment,
    read_text,
    read_vector,
)

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised only on old interpreters
    import tomli as tomllib

__all__ = ["load_problem", "parse_problem", "METHOD_NAMES", "SOLVERS", "TOP_KEYS"]

# Adding an optimization method to the accepted names is one entry here.
METHOD_NAMES = method_names()  # the methods registry is the one list
FILTERS = ("density", "sensitivity")
SOLVERS = ("auto", "direct", "pardiso", "multigrid", "pyamg")
SOLVER_ALIASES = {"iterative": "multigrid"}  # an earlier name, still read
FIXES = ("x", "y", "xy")
KEEPS = ("solid", "empty")
MAX_ITERATIONS = 100_000
MAX_UNIT_CHARS = 16

TOP_KEYS = ("name", "description", "units", "material", "domain", "support", "load",
            "case", "region", "goal", "method", "fabrication", "pattern", "bolt", "export")
_UNITS_KEYS = ("length", "force")
_MATERIAL_KEYS = ("E", "nu", "thickness")
_DOMAIN_KEYS = ("outline", "holes", "cell")
_SUPPORT_KEYS = ("point", "segment", "box", "circle", "fix", "pad")
_LOAD_KEYS = ("point", "segment", "force", "force_per_length", "case", "pad")
_CASE_KEYS = ("name", "weight")
_REGION_KEYS = ("keep", "circle", "box", "polygon", "border")
_GOAL_KEYS = ("material", "open_area", "min_member", "min_hole")
_FABRICATION_KEYS = ("min_member", "min_hole")
_FABRICATION_OTHER = ("process", "edge_distance")
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


def load_problem(path) -> Problem:
    """Read and check the TOML problem file at ``path``.

    Parameters
    ----------
    path : str or os.PathLike
        The problem file (UTF-8 TOML; a byte-order mark is accepted).

    Returns
    -------
    Problem
        Titled by the file's ``name``, else by the file name without its suffix.

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
        raise ProblemError([toml_error_message(label, exc, text)]) from None
    except RecursionError:
        raise ProblemError([f"{label}: not valid TOML: nested too deeply"]) from None
    except Exception as exc:  # a last guard: the reader must never end in a traceback
        raise ProblemError([f"{label}: could not be read as TOML ({exc})"]) from None
    return parse_problem(data, name=p.stem, source=str(p))


def parse_problem(data: dict, name: str = "problem", source=None) -> Problem:
    """Check an already parsed TOML table and build a ``Problem`` from it.

    Every section is read first, then the checks across sections run (cases, placement,
    rigid body, regions, load paths, grid size and memory), each only where the values it
    needs were read.

    Parameters
    ----------
    data : dict
        The parsed TOML document.
    name : str, optional
        The title used when the table has no top-level ``name``.
    source : str or os.PathLike, optional
        Stored as ``Problem.source``.

    Returns
    -------
    Problem

    Raises
    ------
    ProblemError
        Listing every problem found.
    """
    errs: list[str] = []
    if not isinstance(data, dict):
        raise ProblemError([f"{source or name}: expected a table of keys at the top level, "
                            f"got {show(data)}"])
    check_keys(data, TOP_KEYS, "", errs)

    title = read_optional_text(data, "name", "", errs, default=name, allow_empty=False)
    read_optional_text(data, "description", "", errs, default="")  # kept in ``raw`` only
    units = _parse_units(data, errs)
    material = _parse_material(data, units, errs)
    domain, domain_shape = _parse_domain(data, units, errs)
    supports = _parse_array(data, "support", _parse_support, units, errs,
                            missing=None if data.get("bolt") else
                            "no supports given; add at least one [[support]] table with "
                            "point, segment, box or circle and fix, or a [[bolt]]")
    loads = _parse_array(data, "load", _parse_load, units, errs,
                         missing="no loads given; add at least one [[load]] table with "
                                 "point and force, or segment and force_per_length")
    declared = _parse_array(data, "case", _parse_case, units, errs, missing=None)
    regions = _parse_array(data, "region", _parse_region, units, errs, missing=None)
    goal = _parse_goal(data, errs)
    method = _parse_method(data, units, errs)
    fabrication = _parse_fabrication(data, units, errs, material)
    pattern_raw = parse_pattern(data, errs)
    bolts = parse_bolts(data, units, errs, FIXES)
    export = parse_export(data, units, errs)

    # Bolts become a domain hole, a keep-solid ring and a support on the hole's rim; a
    # border and the edge distance become keep-solid bands inside the outline.
    if domain is not None:
        outline_shape = Polygon(domain.outline) if domain_shape is not None else None
        rings, bolt_regions, bolt_supports = apply_bolts(bolts, outline_shape, domain_shape, units, errs)
        regions = _Items(_resolve_borders(regions, domain))
        if fabrication is not None and fabrication.edge_distance:
            regions.append(border_region(fabrication.edge_distance, domain.outline, domain.holes,
                                         "fabrication.edge_distance"))
        if rings:
            domain = replace(domain, holes=tuple(domain.holes) + tuple(rings))
            domain_shape, _ = make_polygon(domain.outline, list(domain.holes))
        regions.extend(bolt_regions)
        supports.extend(bolt_supports)
    else:
        regions = _Items(r for r in regions if r.kind != "border")
        regions.complete = False

    cases = check_cases(data, declared, loads, errs)
    placed = True
    if domain is not None:
        placed = check_placement(supports, loads, domain_shape, domain.cell, units, errs)
    if placed:  # a support off the plate would only add a confusing second message
        check_rigid_body(supports, domain_shape, _outline_bounds(data), errs)
    check_regions(regions, supports, loads, domain_shape, goal, units, errs)
    if placed and domain_shape is not None:
        check_load_paths(regions, supports, loads, domain_shape, errs)
    pattern = None
    if domain is not None and domain_shape is not None and pattern_raw is not None:
        pattern = check_pattern(pattern_raw, domain_shape, regions, domain.cell,
                                Polygon(domain.outline).bounds, units, errs)
    if domain is not None:
        check_grid(domain_shape, domain.cell, units, errs)

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
        pattern=pattern,
        bolts=tuple(bolts),
        export=export,
    )


def _section(data, key, errs, missing=None):
    """The table under ``key``; None when absent (message if ``missing``) or not a table."""
    if key not in data:
        if missing:
            add_error(errs, key, f"missing; {missing}")
        return None
    v = data[key]
    if isinstance(v, list) and v and all(isinstance(x, dict) for x in v):
        add_error(errs, key, f"expected one [{key}] table, got an array of tables; write "
                             f"[{key}] instead of [[{key}]]")
        return None
    if not isinstance(v, dict):
        add_error(errs, key, f"expected a [{key}] table, got {show(v)}")
        return None
    return v


def _parse_units(data, errs):
    t = _section(data, "units", errs)
    if t is None:
        return Units()
    check_keys(t, _UNITS_KEYS, "units", errs)
    got = {}
    for key, example in (("length", '"mm", "m" or "in"'), ("force", '"N", "kN" or "lbf"')):
        if key not in t:
            continue
        v = t[key]
        if (isinstance(v, str) and 0 < len(v) <= MAX_UNIT_CHARS and v.isprintable()
                and not any(c.isspace() for c in v)):
            got[key] = v
        else:
            add_error(errs, f"units.{key}", f"expected a short unit name such as {example} "
                                            f"(1 to {MAX_UNIT_CHARS} characters, no spaces), "
                                            f"got {show(v)}")
    return Units(**got)


def _parse_material(data, units, errs):
    t = _section(data, "material", errs,
                 missing="add a [material] table with E, nu and thickness")
    if t is None:
        return None
    check_keys(t, _MATERIAL_KEYS, "material", errs)
    E = read_field(t, "E", "material", errs, f"Young's modulus, a number in {units.stress}")
    nu = read_field(t, "nu", "material", errs, "Poisson's ratio, a number")
    th = read_field(t, "thickness", "material", errs,
                    f"the plate thickness, a number in {units.length}")
    if E is not None and not E > 0:
        add_error(errs, "material.E", f"Young's modulus must be > 0 {units.stress}, "
                                      f"got {number_text(E)}")
        E = None
    if nu is not None and not -1.0 < nu < 0.5:
        add_error(errs, "material.nu", f"Poisson's ratio must lie between -1 and 0.5 (both "
                                       f"excluded) for an isotropic material, "
                                       f"got {number_text(nu)}")
        nu = None
    if th is not None and not th > 0:
        add_error(errs, "material.thickness",
                  f"the thickness must be > 0 {units.length}, got {number_text(th)}")
        th = None
    if None in (E, nu, th):
        return None
    return Material(E=E, nu=nu, thickness=th)


def _outline_bounds(data):
    """(xmin, ymin, xmax, ymax) of the outline points, or None if they do not parse."""
    t = data.get("domain")
    if not isinstance(t, dict):
        return None
    pts = read_ring(t.get("outline"), "", [])
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
    check_keys(t, _DOMAIN_KEYS, "domain", errs)
    lu = units.length
    ok = True
    outline = None
    if "outline" in t:
        outline = read_ring(t["outline"], "domain.outline", errs, "outline")
    else:
        add_error(errs, "domain.outline", "missing; expected an array of at least 3 points "
                                          "[[x, y], ...] going around the plate")
    ok &= outline is not None

    holes = []
    if "holes" in t:
        v = t["holes"]
        if isinstance(v, list):
            for i, h in enumerate(v, 1):
                ring = read_ring(h, f"domain.holes[{i}]", errs, "hole")
                ok &= ring is not None
                holes.append(ring)
        else:
            add_error(errs, "domain.holes", f"expected an array of holes, each an array of "
                                            f"points [[[x, y], ...], ...], got {show(v)}")
            ok = False

    cell = read_field(t, "cell", "domain", errs, f"the grid cell size, a length in {lu}")
    if cell is not None and not cell > 0:
        add_error(errs, "domain.cell", f"the cell size must be > 0 {lu}, got {number_text(cell)}")
        cell = None
    ok &= cell is not None

    shell = None
    if outline is not None:
        shell, why = make_polygon(outline)
        if why:
            add_error(errs, "domain.outline", f"the outline {why}; list the corners in order "
                                              "around the plate so that no two edges cross")
            ok = False
    hole_shapes = []
    for i, ring in enumerate(holes, 1):
        if ring is None:
            continue
        hp, why = make_polygon(ring)
        if why:
            add_error(errs, f"domain.holes[{i}]", f"the hole {why}")
            ok = False
            continue
        if shell is not None and not shell.contains(hp):
            where = "lies outside" if not shell.intersects(hp) else "crosses"
            add_error(errs, f"domain.holes[{i}]", f"the hole {where} domain.outline; every hole "
                                                  "must lie inside the outline")
            ok = False
        for j, other in hole_shapes:
            if hp.intersection(other).area > 0:
                add_error(errs, f"domain.holes[{i}]", f"the hole overlaps domain.holes[{j}]; "
                                                      "merge overlapping holes into one")
                ok = False
        hole_shapes.append((i, hp))

    if not ok:
        return None, None
    shape, why = make_polygon(outline, [h for h in holes])
    if why:
        add_error(errs, "domain.holes", f"the outline with its holes {why}; holes may touch the "
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
            add_error(errs, key, missing)
        return items
    v = data[key]
    if isinstance(v, dict):
        add_error(errs, key, f"expected [[{key}]] tables (an array of tables), got a single "
                             f"table; write [[{key}]] instead of [{key}]")
        items.complete = False
        return items
    if not isinstance(v, list):
        add_error(errs, key, f"expected [[{key}]] tables (an array of tables), got {show(v)}")
        items.complete = False
        return items
    if not v and missing:
        add_error(errs, key, missing)
    for i, t in enumerate(v, 1):
        path = f"{key}[{i}]"
        if not isinstance(t, dict):
            add_error(errs, path, f"expected a table, got {show(t)}")
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
               "box": "box = [x0, y0, x1, y1]", "circle": "circle = [cx, cy, r]"}
    options = " or ".join(spelled[k] for k in kinds)
    if not given:
        add_error(errs, path, f"no location; give exactly one of {options} for the {what}")
    elif len(given) > 1:
        add_error(errs, path, f"several locations ({' and '.join(given)}); give exactly one of "
                              f"{', '.join(kinds)} for the {what}")
    parsed = {}
    for k in given:
        sub = f"{path}.{k}"
        if k == "point":
            parsed[k] = read_vector(t[k], sub, errs)
        elif k == "segment":
            parsed[k] = read_segment(t[k], sub, errs)
        elif k == "circle":
            parsed[k] = read_circle(t[k], sub, errs, "length units")
        else:
            parsed[k] = read_box(t[k], sub, errs)
    if len(given) != 1 or parsed[given[0]] is None:
        return None
    return given[0], parsed[given[0]]


def _parse_support(t, path, units, errs):
    check_keys(t, _SUPPORT_KEYS, path, errs,
               special={"force": "supports take no force; put forces in a [[load]] table",
                        "case": "supports hold in every load case; case belongs to "
                                "[[load]] tables"})
    loc = _location(t, path, errs, ("point", "segment", "box", "circle"), "support")
    fix = None
    if "fix" in t:
        fix = read_choice(t["fix"], f"{path}.fix", errs, FIXES, "the fixed directions")
    else:
        add_error(errs, f"{path}.fix", f"missing; expected the fixed directions: "
                                       f"{quoted_list(FIXES)}")
    pad_ok = "pad" not in t or isinstance(t["pad"], bool)
    pad = read_flag(t, "pad", path, errs)
    if loc is None or fix is None or not pad_ok:
        return None
    return Support(kind=loc[0], where=loc[1], fix=fix, pad=pad, key=path)


def _parse_load(t, path, units, errs):
    check_keys(t, _LOAD_KEYS, path, errs,
               special={"box": "loads go at a point or along a segment; box is for "
                               "supports and regions",
                        "fix": "loads fix nothing; fix belongs to [[support]] tables"})
    loc = _location(t, path, errs, ("point", "segment"), "load")
    kind = loc[0] if loc else None
    lu, fu = units.length, units.force
    force = None
    if kind == "point" and "force" not in t:
        if "force_per_length" in t:
            add_error(errs, f"{path}.force_per_length", f"a point load takes force = [fx, fy] "
                                                        f"(a force in {fu}), not force_per_length")
        else:
            add_error(errs, f"{path}.force", f"missing; a point load needs force = [fx, fy] "
                                             f"in {fu}")
    elif kind == "segment" and "force_per_length" not in t:
        if "force" in t:
            add_error(errs, f"{path}.force", f"a segment load takes force_per_length = [qx, qy] "
                                             f"(in {fu}/{lu} along the segment), not force")
        else:
            add_error(errs, f"{path}.force_per_length", f"missing; a segment load needs "
                                                        f"force_per_length = [qx, qy] in {fu}/{lu}")
    elif kind is not None and "force" in t and "force_per_length" in t:
        other = "force_per_length" if kind == "point" else "force"
        add_error(errs, f"{path}.{other}", f"a {kind} load takes only "
                                           f"{'force' if kind == 'point' else 'force_per_length'}")
    for key, names in (("force", ("fx", "fy")), ("force_per_length", ("qx", "qy"))):
        if key not in t:
            continue
        vec = read_vector(t[key], f"{path}.{key}", errs, names)
        if vec is not None and vec == (0.0, 0.0):
            add_error(errs, f"{path}.{key}", f"the force is zero; give a nonzero "
                                             f"[{', '.join(names)}]")
            vec = None
        wanted = "force" if kind == "point" else "force_per_length"
        if key == wanted:
            force = vec
    case = "main"
    case_ok = True
    if "case" in t:
        c = read_text(t["case"], f"{path}.case", errs, allow_empty=False)
        case_ok = c is not None
        case = c if c is not None else case
    pad_ok = "pad" not in t or isinstance(t["pad"], bool)
    pad = read_flag(t, "pad", path, errs)
    if loc is None or force is None or not case_ok or not pad_ok:
        return None
    return Load(kind=kind, where=loc[1], force=force, case=case, pad=pad, key=path)


def _parse_case(t, path, units, errs):
    check_keys(t, _CASE_KEYS, path, errs)
    name = None
    if "name" in t:
        name = read_text(t["name"], f"{path}.name", errs, allow_empty=False)
    else:
        add_error(errs, f"{path}.name", "missing; expected the case name, a non-empty string "
                                        "used by case = \"...\" in [[load]] tables")
    weight = 1.0
    if "weight" in t:
        weight = read_number(t["weight"], f"{path}.weight", errs, "a finite number > 0")
        if weight is not None and not weight > 0:
            add_error(errs, f"{path}.weight", f"the weight must be > 0, got {number_text(weight)}")
            weight = None
    if name is None or weight is None:
        return None
    return LoadCase(name=name, weight=weight)


def _parse_region(t, path, units, errs):
    check_keys(t, _REGION_KEYS, path, errs,
               special={"point": "a region is an area: use circle, box or polygon",
                        "segment": "a region is an area: use circle, box or polygon"})
    keep = None
    if "keep" in t:
        keep = read_choice(t["keep"], f"{path}.keep", errs, KEEPS, "what to keep")
    else:
        add_error(errs, f"{path}.keep", f"missing; expected what to keep: {quoted_list(KEEPS)}")
    kinds = [k for k in ("circle", "box", "polygon", "border") if k in t]
    if len(kinds) != 1:
        what = "no shape" if not kinds else f"several shapes ({' and '.join(kinds)})"
        add_error(errs, path, f"{what}; give exactly one of circle = [cx, cy, r], "
                              "box = [x0, y0, x1, y1], polygon = [[x, y], ...] or border = <width>")
    where = {}
    for k in kinds:
        sub = f"{path}.{k}"
        if k == "border":
            w = read_number(t[k], sub, errs, f"the width of the frame inside the outline, a length in {units.length}")
            if w is not None and not w > 0:
                add_error(errs, sub, f"must be > 0 {units.length}, got {number_text(w)}")
                w = None
            if w is not None and keep == "empty":
                add_error(errs, f"{path}.keep", 'a border is a solid frame: keep = "solid"')
                w = None
            where[k] = None if w is None else (w,)
        elif k == "circle":
            where[k] = read_circle(t[k], sub, errs, units.length)
        elif k == "box":
            where[k] = read_box(t[k], sub, errs)
        else:
            ring = read_ring(t[k], sub, errs, "region")
            if ring is not None:
                _, why = make_polygon(ring)
                if why:
                    add_error(errs, sub, f"the polygon {why}")
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
    check_keys(t, _GOAL_KEYS, "goal", errs)
    if "open_area" in t:
        if "material" in t:
            add_error(errs, "goal.open_area", "give either material or open_area (open_area = "
                                              "1 - material), not both")
            return None
        a = read_number(t["open_area"], "goal.open_area", errs,
                        "the open share of the panel, a number between 0 and 1")
        if a is not None and not 0.0 < a < 1.0:
            add_error(errs, "goal.open_area", f"the open share must lie between 0 and 1 (both "
                                              f"excluded), got {number_text(a)}")
            a = None
        return None if a is None else Goal(material=1.0 - a)
    m = read_field(t, "material", "goal", errs,
                   "the target material fraction of the domain area, a number between 0 and 1")
    if m is not None and not 0.0 < m < 1.0:
        add_error(errs, "goal.material", f"the material fraction must lie between 0 and 1 (both "
                                         f"excluded), got {number_text(m)}")
        m = None
    return None if m is None else Goal(material=m)


def _parse_fabrication(data, units, errs, material=None):
    """Fabrication limits, lengths, from a [fabrication] table or from [goal] (not both);
    a ``process`` fills the limits not given from the sheet thickness."""
    found = {}
    extra = {}
    t = data.get("fabrication")
    if isinstance(t, dict):
        if "process" in t:
            v = t["process"]
            if isinstance(v, str) and v in PROCESSES:
                extra["process"] = v
            else:
                add_error(errs, "fabrication.process", f"no thickness rule for {show(v)}; use "
                                                       f"{quoted_list(tuple(PROCESSES))}")
        if "edge_distance" in t:
            v = read_number(t["edge_distance"], "fabrication.edge_distance", errs,
                            f"a length in {units.length}")
            if v is not None and not v > 0:
                add_error(errs, "fabrication.edge_distance", f"must be > 0 {units.length}, "
                                                             f"got {number_text(v)}")
                v = None
            if v is not None:
                extra["edge_distance"] = v
    for section in ("goal", "fabrication"):
        t = data.get(section)
        if section == "fabrication" and t is not None and not isinstance(t, dict):
            add_error(errs, "fabrication", f"expected a table [fabrication], got {show(t)}")
            continue
        if not isinstance(t, dict):
            continue
        if section == "fabrication":
            check_keys(t, _FABRICATION_KEYS + _FABRICATION_OTHER, "fabrication", errs)
        for key in _FABRICATION_KEYS:
            if key not in t:
                continue
            path = f"{section}.{key}"
            if key in found:
                add_error(errs, path, f"also given as {found[key][0]}; give each limit once")
                continue
            v = read_number(t[key], path, errs, f"a length in {units.length}")
            if v is not None and not v > 0:
                add_error(errs, path, f"must be > 0 {units.length}, got {number_text(v)}")
                v = None
            found[key] = (path, v)
    limits = {k: v for k, (_, v) in found.items()}
    if "process" in extra and material is not None:
        member, hole, edge = process_defaults(extra["process"], material.thickness)
        limits.setdefault("min_member", member)
        limits.setdefault("min_hole", hole)
        extra.setdefault("edge_distance", edge)
    return Fabrication(**limits, **extra)


def _resolve_borders(regions, domain):
    """A border region's band runs inside the outline: give it the outline's points."""
    out = []
    for r in regions:
        if r.kind == "border":
            r = border_region(r.where[0], domain.outline, (), f"{r.key}.border")
        out.append(r)
    return out


def _parse_method(data, units, errs):
    t = _section(data, "method", errs)
    if t is None:
        return Method() if "method" not in data else None
    check_keys(t, _METHOD_KEYS, "method", errs)
    got, ok = {}, True

    def keep(key, value):
        nonlocal ok
        if value is None:
            ok = False
        else:
            got[key] = value

    if "name" in t:
        keep("name", read_choice(t["name"], "method.name", errs, METHOD_NAMES, "a method name"))
    if "solver" in t:
        v = SOLVER_ALIASES.get(t["solver"], t["solver"]) if isinstance(t["solver"], str) else t["solver"]
        keep("solver", read_choice(v, "method.solver", errs, SOLVERS, "a solver"))
    if "iterations" in t:
        v = t["iterations"]
        if isinstance(v, int) and not isinstance(v, bool) and 1 <= v <= MAX_ITERATIONS:
            keep("iterations", v)
        else:
            add_error(errs, "method.iterations", f"expected a whole number from 1 to "
                                                 f"{MAX_ITERATIONS}, got {show(v)}")
            ok = False
    for key in ("seed_holes", "initial_holes", "pads"):
        if key in t:
            keep(key, read_flag(t, key, "method", errs))
    for key in _METHOD_LENGTHS:
        if key in t:
            v = read_number(t[key], f"method.{key}", errs, f"a length in {units.length}")
            if v is not None and not v > 0:
                add_error(errs, f"method.{key}", f"must be > 0 {units.length}, "
                                                 f"got {number_text(v)}")
                v = None
            keep(key, v)
    if "volume_step" in t:
        v = read_number(t["volume_step"], "method.volume_step", errs,
                        "a fraction per iteration, a number")
        if v is not None and not 0.0 < v <= 0.5:
            add_error(errs, "method.volume_step", f"must lie in (0, 0.5] (greater than 0, at "
                                                  f"most 0.5), got {number_text(v)}")
            v = None
        keep("volume_step", v)
    if "ersatz" in t:
        v = read_number(t["ersatz"], "method.ersatz", errs,
                        "the void stiffness ratio, a number")
        if v is not None and not 1e-9 <= v <= 0.1:
            add_error(errs, "method.ersatz", f"must lie in [1e-9, 0.1], got {number_text(v)}")
            v = None
        keep("ersatz", v)
    if "penalty" in t:
        v = read_number(t["penalty"], "method.penalty", errs, "the SIMP penalty exponent, a number")
        if v is not None and not 1.0 <= v <= 10.0:
            add_error(errs, "method.penalty", f"must lie in [1, 10], got {number_text(v)}")
            v = None
        keep("penalty", v)
    if "filter" in t:
        keep("filter", read_choice(t["filter"], "method.filter", errs, FILTERS, "a filter"))
    if "projection" in t:
        keep("projection", read_flag(t, "projection", "method", errs))
    for key, (low, high, what) in _METHOD_FRACTIONS.items():
        if key in t:
            v = read_number(t[key], f"method.{key}", errs, what)
            if v is not None and not low < v <= high:
                lo, hi = number_text(low), number_text(high)
                add_error(errs, f"method.{key}", f"must lie in ({lo}, {hi}] (greater than {lo}, "
                                                 f"at most {hi}), got {number_text(v)}")
                v = None
            keep(key, v)
    if (ok and got.get("name") == "density" and got.get("projection")
            and got.get("filter") == "sensitivity"):
        add_error(errs, "method.projection", 'projection acts on filtered densities: it needs '
                                             'filter = "density", got filter = "sensitivity"')
        ok = False
    return Method(**got) if ok else None
