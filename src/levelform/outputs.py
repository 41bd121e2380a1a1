"""Write a Result to disk: outlines (SVG, DXF, GeoJSON), figures, history and summary.

Nothing here solves anything. Every file is written atomically (temporary file in the
same folder, then ``os.replace``), and :func:`export` renders every file in memory before
writing the first one, so a failure leaves no half-written or partial set of new files.
"""
from __future__ import annotations

import contextlib
import csv
import dataclasses
import io
import json
import math
import os
import re
import tempfile
from pathlib import Path
from xml.sax.saxutils import escape

import numpy as np
from shapely.geometry import Point, Polygon

from .geometry import _polygons, domain_polygon, keep_regions, outline_metrics
from .spec import CAUTION, IterationRecord, Result



# Our own restrained palette.
COLOR_MATERIAL = "#2f3e46"
COLOR_DOMAIN = "#8d99ae"
COLOR_DOMAIN_FILL = "#f4f5f7"
COLOR_KEEP_SOLID = "#52796f"
COLOR_KEEP_EMPTY = "#b08968"
COLOR_SUPPORT = "#386641"
COLOR_LOAD = "#bc4749"

FILES = ("outline.svg", "outline.dxf", "outline.geojson", "design.png",
         "history.png", "history.csv", "summary.json")


# --------------------------------------------------------------------------- writing

def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def atomic_write_bytes(path, data: bytes) -> Path:
    """Write ``data`` to ``path`` via a temporary file in the same folder and os.replace.

    Readers see either the old file or the complete new one; on any error the temporary
    file is removed and the exception propagates.
    """
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as f:
            f.write(data)
            f.flush()
            os.fsync(f.fileno())
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; give the usual mode
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise
    return path


def atomic_write_text(path, text: str, encoding: str = "utf-8") -> Path:
    """Atomically write ``text`` (``\\n`` line ends, no platform translation)."""
    return atomic_write_bytes(path, text.encode(encoding))


def _jsonable(obj):
    """Plain JSON values: NaN/inf -> None, numpy -> Python, tuples -> lists."""
    if isinstance(obj, bool) or obj is None or isinstance(obj, str):
        return obj
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        v = float(obj)
        return v if math.isfinite(v) else None
    if isinstance(obj, np.bool_):
        return bool(obj)
    if isinstance(obj, np.ndarray):
        return _jsonable(obj.tolist())
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple, set, frozenset)):
        items = sorted(obj, key=str) if isinstance(obj, (set, frozenset)) else obj
        return [_jsonable(v) for v in items]
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return _jsonable(dataclasses.asdict(obj))
    if isinstance(obj, os.PathLike):
        return os.fspath(obj)
    return str(obj)


def json_text(obj) -> str:
    """Deterministic JSON: sorted keys, indent 2, non-finite floats as null."""
    return json.dumps(_jsonable(obj), sort_keys=True, indent=2, allow_nan=False,
                      ensure_ascii=False) + "\n"


def write_json(path, obj) -> Path:
    """Atomically write ``obj`` as deterministic JSON (see :func:`json_text`)."""
    return atomic_write_text(path, json_text(obj))


# --------------------------------------------------------------------------- helpers

def _num(v: float) -> str:
    """10 significant digits, no negative zero: stable text for coordinates."""
    s = f"{float(v):.10g}"
    return "0" if s in ("-0", "0") else s


def _round(v: float) -> float:
    return float(_num(v))


def _rings(poly: Polygon):
    return [np.asarray(poly.exterior.coords)] + [np.asarray(r.coords) for r in poly.interiors]


def _length_unit(problem) -> str:
    return str(problem.units.length)


def _scene(result: Result):
    """Shared drawing inputs: domain, material polygons, keep regions, glyph size."""
    problem = result.problem
    domain = domain_polygon(problem)
    material = _polygons(result.outline)
    solid, empty = keep_regions(problem)
    minx, miny, maxx, maxy = domain.bounds
    size = math.hypot(maxx - minx, maxy - miny)
    return domain, material, solid, empty, size


def _unit(v):
    v = np.asarray(v, dtype=float)
    n = float(np.hypot(*v))
    return v / n if n > 0 else None


def _support_glyphs(support, s: float, domain: Polygon):
    """Marker geometry of one support in model coordinates.

    Returns ``(closed, open, label)``: closed polylines, open polylines (each an (n, 2)
    array) and a label anchor (point, text) or None. A point support is a triangle whose
    apex sits on the point and whose base faces the restrained direction ("x": base to
    the left, otherwise below); a single-direction support adds a roller line, "xy" adds
    ground ticks. Segments and boxes get a wall with ticks on the side outside the domain.
    """
    closed, lines, label = [], [], None
    fix = support.fix
    if support.kind == "point":
        p = np.asarray(support.where, dtype=float)
        n = np.array([-1.0, 0.0]) if fix == "x" else np.array([0.0, -1.0])
        t = np.array([-n[1], n[0]])
        closed.append(np.array([p, p + s * n + 0.6 * s * t, p + s * n - 0.6 * s * t]))
        if fix in ("x", "y"):
            off = p + 1.3 * s * n
            lines.append(np.array([off + 0.8 * s * t, off - 0.8 * s * t]))
        else:
            base = p + s * n
            k = np.linspace(-0.6, 0.6, 5)[:, None]
            starts = base + k * s * t
            ends = starts + 0.35 * s * (n - t)
            lines.extend(np.stack([starts, ends], axis=1))
        return closed, lines, label
    if support.kind == "segment":
        a, b = (np.asarray(q, dtype=float) for q in support.where)
        walls = [(a, b)]
        lines.append(np.array([a, b]))
        label = ((a + b) / 2.0, f"fix {fix}")
    elif support.kind == "box":
        x0, y0, x1, y1 = (float(v) for v in support.where)
        corners = np.array([[x0, y0], [x1, y0], [x1, y1], [x0, y1]])
        closed.append(corners)
        walls = []
        label = (np.array([(x0 + x1) / 2, (y0 + y1) / 2]), f"fix {fix}")
        return closed, lines, label
    else:
        return closed, lines, label
    for a, b in walls:
        d = _unit(b - a)
        if d is None:
            continue
        nrm = np.array([-d[1], d[0]])
        mid = (a + b) / 2.0
        if domain.contains(Point(*(mid + 0.5 * s * nrm))):
            nrm = -nrm  # ticks go on the side away from the material
        length = float(np.hypot(*(b - a)))
        count = int(min(max(length / (0.5 * s), 3), 60))
        starts = a + np.linspace(0.0, 1.0, count)[:, None] * (b - a)
        ends = starts + 0.5 * s * (nrm - d)
        lines.extend(np.stack([starts, ends], axis=1))
    return closed, lines, label


def _load_arrows(load, length: float):
    """Arrows of one load as (tails, heads) arrays; heads touch the loaded points.

    A segment load gets a row of arrows along the segment. Arrows show direction only.
    """
    d = _unit(load.force)
    if d is None:
        return np.zeros((0, 2)), np.zeros((0, 2))
    if load.kind == "segment":
        a, b = (np.asarray(q, dtype=float) for q in load.where)
        seg = float(np.hypot(*(b - a)))
        count = int(min(max(round(seg / (0.4 * length)) + 1, 3), 15))
        heads = a + np.linspace(0.0, 1.0, count)[:, None] * (b - a)
    else:
        heads = np.asarray(load.where, dtype=float).reshape(1, 2)
    return heads - length * d, heads


# --------------------------------------------------------------------------- SVG

def _svg_path(polys, flip_y: bool = True) -> str:
    parts = []
    for poly in polys:
        for ring in _rings(poly):
            pts = ring[:-1]
            ys = -pts[:, 1] if flip_y else pts[:, 1]
            coords = " ".join(f"{_num(x)},{_num(y)}" for x, y in zip(pts[:, 0], ys))
            parts.append(f"M{coords}Z")
    return " ".join(parts)


_SVG_UNITS = {"mm": (1.0, "mm"), "cm": (1.0, "cm"), "in": (1.0, "in"),
              "m": (1000.0, "mm"), "ft": (12.0, "in")}


def outline_svg(result: Result) -> str:
    """SVG of the material outline over the thin domain edge, at true scale when the
    length unit maps to an SVG unit. Model y points up; SVG y points down, so y is negated."""
    domain, material, _, _, size = _scene(result)
    minx, miny, maxx, maxy = domain.bounds
    m = 0.02 * max(maxx - minx, maxy - miny)
    vx, vy, vw, vh = minx - m, -(maxy + m), (maxx - minx) + 2 * m, (maxy - miny) + 2 * m
    unit = _length_unit(result.problem)
    scale, svg_unit = _SVG_UNITS.get(unit.lower(), (1.0, ""))
    name = escape(str(result.problem.name))
    lines = [
        '<?xml version="1.0" encoding="UTF-8"?>',
        f'<svg xmlns="http://www.w3.org/2000/svg" version="1.1" '
        f'width="{_num(vw * scale)}{svg_unit}" height="{_num(vh * scale)}{svg_unit}" '
        f'viewBox="{_num(vx)} {_num(vy)} {_num(vw)} {_num(vh)}">',
        f"  <title>{name}</title>",
        f"  <desc>Material outline in model units ({escape(unit)}); model y axis points up. "
        f"{escape(CAUTION)}</desc>",
        f'  <rect x="{_num(vx)}" y="{_num(vy)}" width="{_num(vw)}" height="{_num(vh)}" '
        f'fill="#ffffff"/>',
    ]
    if material:
        lines.append(f'  <path id="material" fill="{COLOR_MATERIAL}" fill-rule="evenodd" '
                     f'stroke="none" d="{_svg_path(material)}"/>')
    lines.append(f'  <path id="domain" fill="none" stroke="{COLOR_DOMAIN}" stroke-width="1" '
                 f'vector-effect="non-scaling-stroke" fill-rule="evenodd" '
                 f'd="{_svg_path([domain])}"/>')
    lines.append("</svg>")
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- DXF

_DXF_UNITS = {"mm": "MM", "millimeter": "MM", "millimetre": "MM",
              "cm": "CM", "centimeter": "CM", "centimetre": "CM",
              "m": "M", "meter": "M", "metre": "M",
              "in": "IN", "inch": "IN", "ft": "FT", "foot": "FT", "feet": "FT"}

DXF_LAYERS = {  # name: ACI colour
    "OUTLINE": 7, "HOLES": 7, "KEEP_SOLID": 3, "KEEP_EMPTY": 30,
    "SUPPORTS": 5, "LOADS": 1, "DOMAIN": 8,
}


@contextlib.contextmanager
def _fixed_dxf_metadata():
    """ezdxf stamps creation/update times and random GUIDs; its documented option
    ``write_fixed_meta_data_for_testing`` replaces them with constants, which makes the
    file a pure function of the design. Restored afterwards."""
    import ezdxf

    old = ezdxf.options.write_fixed_meta_data_for_testing
    ezdxf.options.write_fixed_meta_data_for_testing = True
    try:
        yield
    finally:
        ezdxf.options.write_fixed_meta_data_for_testing = old


def _sorted_dxf_classes(text: str) -> str:
    """ezdxf writes some CLASS records in the iteration order of a set of type names, which
    changes from one Python process to the next; sorting the records by name makes the file
    byte-identical across runs (the order of CLASS records carries no meaning)."""
    head = "  0\nSECTION\n  2\nCLASSES\n"
    start = text.find(head)
    if start < 0:
        return text
    body_start = start + len(head)
    end = text.find("  0\nENDSEC\n", body_start)
    body = text[body_start:end]
    records = ["  0\nCLASS\n" + r for r in body.split("  0\nCLASS\n") if r]
    records.sort(key=lambda r: r.split("\n", 4)[3])  # the class's DXF record name (group 1)
    return text[:body_start] + "".join(records) + text[end:]


def outline_dxf(result: Result) -> bytes:
    """DXF R2010 of the outline: closed LWPOLYLINEs on layers OUTLINE / HOLES, the
    domain, keep regions, support markers and load arrows on their own layers.
    Drawing units ($INSUNITS) follow the problem's length unit; an unknown unit is
    written unitless and named in the custom property LENGTH_UNIT."""
    import ezdxf
    from ezdxf import units as dxf_units

    domain, material, solid, empty, size = _scene(result)
    unit = _length_unit(result.problem)
    s = 0.03 * size
    with _fixed_dxf_metadata():
        doc = ezdxf.new("R2010", setup=False)
        code = _DXF_UNITS.get(unit.lower())
        doc.units = getattr(dxf_units, code) if code else 0
        doc.header["$MEASUREMENT"] = 0 if code in ("IN", "FT") else 1
        doc.header.custom_vars.append("LENGTH_UNIT", unit)
        if code is None:
            doc.header.custom_vars.append(
                "UNIT_NOTE", f"length unit {unit!r} has no DXF code; drawing is unitless")
        doc.header.custom_vars.append("PROBLEM", str(result.problem.name))
        doc.header.custom_vars.append("CAUTION", CAUTION)
        for name, color in DXF_LAYERS.items():
            doc.layers.add(name, color=color)
        msp = doc.modelspace()

        def ring(points, layer):
            pts = [(_round(x), _round(y)) for x, y in np.asarray(points)[:, :2]]
            if len(pts) > 1 and pts[0] == pts[-1]:
                pts = pts[:-1]
            msp.add_lwpolyline(pts, format="xy", close=True, dxfattribs={"layer": layer})

        def line(points, layer):
            pts = [(_round(x), _round(y)) for x, y in np.asarray(points)[:, :2]]
            msp.add_lwpolyline(pts, format="xy", close=False, dxfattribs={"layer": layer})

        for poly in material:
            ring(poly.exterior.coords, "OUTLINE")
            for r in poly.interiors:
                ring(r.coords, "HOLES")
        for r in _rings(domain):
            ring(r, "DOMAIN")
        for geom, layer in ((solid, "KEEP_SOLID"), (empty, "KEEP_EMPTY")):
            for poly in _polygons(geom):
                for r in _rings(poly):
                    ring(r, layer)
        for sup in result.problem.supports:
            closed, opens, label = _support_glyphs(sup, s, domain)
            for c in closed:
                ring(c, "SUPPORTS")
            for o in opens:
                line(o, "SUPPORTS")
            if label is not None:
                (lx, ly), text = label
                msp.add_text(text, height=0.5 * s, dxfattribs={"layer": "SUPPORTS"}
                             ).set_placement((_round(lx), _round(ly)))
        for load in result.problem.loads:
            tails, heads = _load_arrows(load, 3.5 * s)
            if load.kind == "segment":
                line(np.asarray(load.where, dtype=float), "LOADS")
            for tail, head in zip(tails, heads):
                line(np.array([tail, head]), "LOADS")
                d = _unit(head - tail)
                t = np.array([-d[1], d[0]])
                ring(np.array([head, head - 0.6 * s * d + 0.25 * s * t,
                               head - 0.6 * s * d - 0.25 * s * t]), "LOADS")
        stream = io.StringIO()
        doc.write(stream)
        return doc.encode(_sorted_dxf_classes(stream.getvalue()))


# --------------------------------------------------------------------------- GeoJSON

def _geojson_polygon(poly: Polygon):
    return [[[_round(x), _round(y)] for x, y in ring[:, :2]] for ring in _rings(poly)]


def outline_geojson(result: Result) -> str:
    """GeoJSON FeatureCollection: the material MultiPolygon, the domain and keep regions.

    Coordinates are planar model coordinates in the problem's length unit, not WGS84
    longitude/latitude; each feature says so in its properties. Rings follow RFC 7946
    (outer counter-clockwise), numbers carry 10 significant digits.
    """
    from shapely.geometry.polygon import orient

    domain, material, solid, empty, _ = _scene(result)
    unit = _length_unit(result.problem)
    crs_note = f"planar model coordinates in {unit}, not WGS84"

    def feature(role, polys, extra=None):
        props = {"role": role, "units": unit, "crs": crs_note}
        props.update(extra or {})
        return {
            "type": "Feature",
            "properties": props,
            "geometry": {"type": "MultiPolygon",
                         "coordinates": [_geojson_polygon(orient(p, 1.0)) for p in polys]},
        }

    features = [
        feature("material", material, {"name": str(result.problem.name),
                                        "area": _round(sum(p.area for p in material))}),
        feature("domain", [domain], {"area": _round(domain.area)}),
    ]
    if not solid.is_empty:
        features.append(feature("keep_solid", _polygons(solid)))
    if not empty.is_empty:
        features.append(feature("keep_empty", _polygons(empty)))
    doc = {"type": "FeatureCollection", "features": features}
    text = json.dumps(doc, indent=2, allow_nan=False, ensure_ascii=False)
    # One coordinate pair per line instead of one number per line.
    text = re.sub(r"\[\s+(-?[0-9][0-9.eE+-]*),\s+(-?[0-9][0-9.eE+-]*)\s+\]", r"[\1, \2]", text)
    return text + "\n"


# --------------------------------------------------------------------------- figures

def _figure(width: float, height: float):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height))
    FigureCanvasAgg(fig)
    return fig


def _png_bytes(fig, dpi: int = 150) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi, metadata={"Software": None})
    return buf.getvalue()


def _mpl_path(polys):
    from matplotlib.path import Path as MplPath

    verts, codes = [], []
    for poly in polys:
        for ring in _rings(poly):
            pts = ring[:, :2]
            verts.append(pts)
            c = np.full(len(pts), MplPath.LINETO, dtype=np.uint8)
            c[0] = MplPath.MOVETO
            c[-1] = MplPath.CLOSEPOLY
            codes.append(c)
    if not verts:
        return None
    return MplPath(np.concatenate(verts), np.concatenate(codes))


def design_png(result: Result) -> bytes:
    """Picture of the design: material over the domain, hatched keep regions, support
    markers, load arrows (direction only), caution line at the bottom."""
    from matplotlib.collections import LineCollection
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch, PathPatch, Polygon as MplPolygon

    domain, material, solid, empty, size = _scene(result)
    problem = result.problem
    unit = _length_unit(problem)
    minx, miny, maxx, maxy = domain.bounds
    w, h = max(maxx - minx, 1e-12), max(maxy - miny, 1e-12)
    fig_w = 8.0
    fig_h = min(max(fig_w * 0.75 * h / w + 1.4, 3.0), 10.0)
    fig = _figure(fig_w, fig_h)
    ax = fig.add_axes((0.08, 0.14, 0.68, 0.78))
    s = 0.03 * size

    ax.add_patch(PathPatch(_mpl_path([domain]), facecolor=COLOR_DOMAIN_FILL,
                           edgecolor=COLOR_DOMAIN, lw=0.8, zorder=1))
    mp = _mpl_path(material)
    if mp is not None:
        ax.add_patch(PathPatch(mp, facecolor=COLOR_MATERIAL, edgecolor="none", zorder=2))
    for geom, color, hatch in ((solid, COLOR_KEEP_SOLID, "////"),
                               (empty, COLOR_KEEP_EMPTY, "xxx")):
        p = _mpl_path(_polygons(geom))
        if p is not None:
            ax.add_patch(PathPatch(p, facecolor="none", edgecolor=color, hatch=hatch,
                                   lw=0.8, zorder=3))

    sup_lines = []
    for sup in problem.supports:
        closed, opens, label = _support_glyphs(sup, s, domain)
        for c in closed:
            filled = sup.fix == "xy" and sup.kind == "point"
            ax.add_patch(MplPolygon(c, closed=True, zorder=4, lw=1.0,
                                    edgecolor=COLOR_SUPPORT,
                                    facecolor=(COLOR_SUPPORT if filled else
                                               "white" if sup.kind == "point" else "none"),
                                    hatch=None if sup.kind == "point" else "\\\\\\"))
        sup_lines.extend(opens)
        if label is not None:
            (lx, ly), text = label
            ax.annotate(text, (lx, ly), xytext=(3, 3), textcoords="offset points",
                        fontsize=7, color=COLOR_SUPPORT, zorder=6,
                        bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none",
                              "alpha": 0.8})
    if sup_lines:
        ax.add_collection(LineCollection(sup_lines, colors=COLOR_SUPPORT, lw=1.0, zorder=4))

    arrow_len = 3.5 * s
    tails, heads = [], []
    for load in problem.loads:
        t, hd = _load_arrows(load, arrow_len)
        tails.append(t)
        heads.append(hd)
        if load.kind == "segment":
            seg = np.asarray(load.where, dtype=float)
            ax.plot(seg[:, 0], seg[:, 1], color=COLOR_LOAD, lw=1.2, zorder=5)
    if tails:
        t = np.concatenate(tails)
        hd = np.concatenate(heads)
        if len(t):
            d = hd - t
            ax.quiver(t[:, 0], t[:, 1], d[:, 0], d[:, 1], angles="xy", scale_units="xy",
                      scale=1.0, color=COLOR_LOAD, width=0.004, zorder=5)
            allpts = np.concatenate([t, hd])
            minx, miny = min(minx, allpts[:, 0].min()), min(miny, allpts[:, 1].min())
            maxx, maxy = max(maxx, allpts[:, 0].max()), max(maxy, allpts[:, 1].max())

    pad = 2.0 * s
    ax.set_xlim(minx - pad, maxx + pad)
    ax.set_ylim(miny - pad, maxy + pad)
    ax.set_aspect("equal", adjustable="box")
    ax.set_xlabel(f"x [{unit}]")
    ax.set_ylabel(f"y [{unit}]")
    ax.set_title(f"{problem.name}: material fraction {result.material_fraction:.3f}",
                 fontsize=10)
    handles = [Patch(facecolor=COLOR_MATERIAL, label="material"),
               Patch(facecolor="none", edgecolor=COLOR_DOMAIN, label="domain")]
    if not solid.is_empty:
        handles.append(Patch(facecolor="none", edgecolor=COLOR_KEEP_SOLID, hatch="////",
                             label="keep solid"))
    if not empty.is_empty:
        handles.append(Patch(facecolor="none", edgecolor=COLOR_KEEP_EMPTY, hatch="xxx",
                             label="keep empty"))
    if problem.supports:
        handles.append(Line2D([], [], color=COLOR_SUPPORT, marker="^", ls="none",
                              label="support"))
    if problem.loads:
        handles.append(Line2D([], [], color=COLOR_LOAD, marker=r"$\rightarrow$", ls="none",
                              markersize=10, label="load (direction)"))
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.02, 1.0), fontsize=8,
              frameon=False)
    fig.text(0.5, 0.015, CAUTION, ha="center", va="bottom", fontsize=7, color="#5c677d")
    return _png_bytes(fig)


def history_png(result: Result) -> bytes:
    """Compliance (log scale if it spans more than 10x) and material fraction with its
    target against iteration."""
    fig = _figure(7.0, 4.2)
    ax = fig.add_axes((0.11, 0.16, 0.75, 0.74))
    hist = result.history
    units = result.problem.units
    if not hist:
        ax.text(0.5, 0.5, "no iterations recorded", ha="center", va="center",
                transform=ax.transAxes)
    else:
        it = np.array([r.iteration for r in hist], dtype=float)
        comp = np.array([r.compliance for r in hist], dtype=float)
        frac = np.array([r.material_fraction for r in hist], dtype=float)
        target = np.array([r.target_fraction for r in hist], dtype=float)
        ax.plot(it, comp, color=COLOR_MATERIAL, lw=1.4, label="compliance")
        good = comp[np.isfinite(comp) & (comp > 0)]
        if good.size and good.max() > 10.0 * good.min():
            ax.set_yscale("log")
        ax2 = ax.twinx()
        ax2.plot(it, frac, color=COLOR_KEEP_SOLID, lw=1.2, label="material fraction")
        ax2.plot(it, target, color=COLOR_DOMAIN, lw=1.0, ls="--", label="target fraction")
        ax2.set_ylabel("material fraction")
        ax2.set_ylim(0.0, 1.05)
        lines = ax.get_lines() + ax2.get_lines()
        ax.legend(lines, [ln.get_label() for ln in lines], loc="upper right", fontsize=8)
    from matplotlib.ticker import MaxNLocator

    ax.xaxis.set_major_locator(MaxNLocator(integer=True))
    ax.set_xlabel("iteration")
    ax.set_ylabel(f"compliance [{units.compliance}]")
    ax.set_title(f"{result.problem.name}: convergence history", fontsize=10)
    fig.text(0.5, 0.015, CAUTION, ha="center", va="bottom", fontsize=7, color="#5c677d")
    return _png_bytes(fig)


# --------------------------------------------------------------------------- tables

def history_csv(result: Result) -> str:
    """One row per IterationRecord, columns in dataclass field order, header first."""
    names = [f.name for f in dataclasses.fields(IterationRecord)]
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(names)
    for rec in result.history:
        writer.writerow([repr(getattr(rec, n)) if isinstance(getattr(rec, n), float)
                         else getattr(rec, n) for n in names])
    return buf.getvalue()


def _software_version() -> str:
    try:
        from . import __version__
        return str(__version__)
    except ImportError:
        pass
    try:
        from importlib.metadata import version
        return version("levelform")
    except Exception:  # not installed either
        return "unknown"


def summary(result: Result) -> dict:
    """The summary record written to summary.json (plain JSON values)."""
    problem = result.problem
    domain = domain_polygon(problem)
    metrics = outline_metrics(result.outline, domain)
    g = result.grid
    units = problem.units
    data = {
        "compliance": result.compliance,
        "material_fraction": result.material_fraction,
        "target_material_fraction": problem.goal.material,
        "iterations": result.iterations,
        "converged": bool(result.converged),
        "status": result.status,
        "seconds": result.seconds,
        "outline_area": metrics["area"],
        "outline_length": metrics["outline_length"],
        "holes": metrics["holes"],
        "pieces": metrics["pieces"],
        "smallest_member_width": metrics["smallest_member_width"],
        "crisp_compliance": result.compliance if result.crisp_compliance is None else result.crisp_compliance,
        "fabrication": dict(result.fabrication or {}),
        "domain_area": domain.area,
        "units": {"length": units.length, "force": units.force,
                  "stress": units.stress, "compliance": units.compliance},
        "settings": dict(result.settings or {}),
        "grid": {"nx": g.nx, "ny": g.ny, "h": g.h, "x0": g.x0, "y0": g.y0},
        "case_compliance": dict(result.case_compliance or {}),
        "method": result.method,
        "problem": {"name": problem.name, "source": problem.source},
        "software": {"name": "levelform", "version": _software_version()},
        "caution": CAUTION,
    }
    return _jsonable(data)


# --------------------------------------------------------------------------- all

def export(result: Result, outdir) -> dict[str, Path]:
    """Write every output file of ``result`` into ``outdir`` (created if missing).

    All files are rendered in memory first, then each is written atomically, so a
    rendering error writes nothing and a disk error never leaves a partial file.
    Returns {file name: path}.
    """
    outdir = Path(outdir)
    rendered = {
        "outline.svg": outline_svg(result).encode("utf-8"),
        "outline.dxf": outline_dxf(result),
        "outline.geojson": outline_geojson(result).encode("utf-8"),
        "design.png": design_png(result),
        "history.png": history_png(result),
        "history.csv": history_csv(result).encode("utf-8"),
        "summary.json": json_text(summary(result)).encode("utf-8"),
    }
    outdir.mkdir(parents=True, exist_ok=True)
    return {name: atomic_write_bytes(outdir / name, data) for name, data in rendered.items()}
