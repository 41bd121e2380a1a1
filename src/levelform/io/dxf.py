"""The outline as DXF for CAD and cutting (ezdxf), byte-identical across runs."""
from __future__ import annotations

import contextlib
import io

import numpy as np

from ..geometry.shapes import polygon_parts
from ..spec import CAUTION, Result
from .figures import load_arrows, support_glyphs
from .scene import (
    coordinate_rings,
    drawing_inputs,
    length_unit,
    round_coordinate,
    unit_vector,
)

# --------------------------------------------------------------------------- DXF

DXF_UNIT_CODES = {"mm": "MM", "millimeter": "MM", "millimetre": "MM",
              "cm": "CM", "centimeter": "CM", "centimetre": "CM",
              "m": "M", "meter": "M", "metre": "M",
              "in": "IN", "inch": "IN", "ft": "FT", "foot": "FT", "feet": "FT"}

DXF_LAYERS = {  # name: ACI colour
    "OUTLINE": 7, "HOLES": 7, "KEEP_SOLID": 3, "KEEP_EMPTY": 30,
    "SUPPORTS": 5, "LOADS": 1, "DOMAIN": 8,
}


@contextlib.contextmanager
def fixed_dxf_metadata():
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


def dxf_document(unit: str, variables, layers: dict):
    """A new DXF R2010 document (call inside :func:`fixed_dxf_metadata`): drawing units
    ($INSUNITS) from the length unit, the custom property LENGTH_UNIT, then ``variables``
    ((name, value) pairs, in order) and ``layers`` ({name: ACI colour}). Returns (doc,
    modelspace)."""
    import ezdxf
    from ezdxf import units as dxf_units

    doc = ezdxf.new("R2010", setup=False)
    code = DXF_UNIT_CODES.get(unit.lower())
    doc.units = getattr(dxf_units, code) if code else 0
    doc.header["$MEASUREMENT"] = 0 if code in ("IN", "FT") else 1
    doc.header.custom_vars.append("LENGTH_UNIT", unit)
    for name, value in variables:
        doc.header.custom_vars.append(name, value)
    for name, color in layers.items():
        doc.layers.add(name, color=color)
    return doc, doc.modelspace()


def dxf_polyline(msp, points, layer: str, closed: bool, **attribs):
    """An LWPOLYLINE through ``points`` (coordinates rounded as in every export file); a
    closed ring's repeated last point is dropped."""
    pts = [(round_coordinate(x), round_coordinate(y)) for x, y in np.asarray(points)[:, :2]]
    if closed and len(pts) > 1 and pts[0] == pts[-1]:
        pts = pts[:-1]
    return msp.add_lwpolyline(pts, format="xy", close=closed, dxfattribs={"layer": layer, **attribs})


def dxf_supports_and_loads(msp, problem, domain, s: float, labels: bool = True) -> None:
    """The support markers (layer SUPPORTS, with their labels if ``labels``) and the load
    arrows (layer LOADS) of ``problem``, sized by ``s``."""
    for sup in problem.supports:
        closed, opens, label = support_glyphs(sup, s, domain)
        for c in closed:
            dxf_polyline(msp, c, "SUPPORTS", True)
        for o in opens:
            dxf_polyline(msp, o, "SUPPORTS", False)
        if labels and label is not None:
            (lx, ly), text = label
            msp.add_text(text, height=0.5 * s, dxfattribs={"layer": "SUPPORTS"}
                         ).set_placement((round_coordinate(lx), round_coordinate(ly)))
    for load in problem.loads:
        tails, heads = load_arrows(load, 3.5 * s)
        if load.kind == "segment":
            dxf_polyline(msp, np.asarray(load.where, dtype=float), "LOADS", False)
        for tail, head in zip(tails, heads):
            dxf_polyline(msp, np.array([tail, head]), "LOADS", False)
            d = unit_vector(head - tail)
            t = np.array([-d[1], d[0]])
            dxf_polyline(msp, np.array([head, head - 0.6 * s * d + 0.25 * s * t,
                                        head - 0.6 * s * d - 0.25 * s * t]), "LOADS", True)


def dxf_bytes(doc) -> bytes:
    """The document's bytes, its CLASS records sorted (byte-identical across processes)."""
    stream = io.StringIO()
    doc.write(stream)
    return doc.encode(_sorted_dxf_classes(stream.getvalue()))


def outline_dxf(result: Result) -> bytes:
    """DXF R2010 of the outline: closed LWPOLYLINEs on layers OUTLINE / HOLES, the
    domain, keep regions, support markers and load arrows on their own layers.
    Drawing units ($INSUNITS) follow the problem's length unit; an unknown unit is
    written unitless and named in the custom property LENGTH_UNIT."""
    domain, material, solid, empty, size = drawing_inputs(result)
    unit = length_unit(result.problem)
    s = 0.03 * size
    variables = []
    if DXF_UNIT_CODES.get(unit.lower()) is None:
        variables.append(("UNIT_NOTE", f"length unit {unit!r} has no DXF code; drawing is unitless"))
    variables += [("PROBLEM", str(result.problem.name)), ("CAUTION", CAUTION)]
    with fixed_dxf_metadata():
        doc, msp = dxf_document(unit, variables, DXF_LAYERS)
        for poly in material:
            dxf_polyline(msp, poly.exterior.coords, "OUTLINE", True)
            for r in poly.interiors:
                dxf_polyline(msp, r.coords, "HOLES", True)
        for r in coordinate_rings(domain):
            dxf_polyline(msp, r, "DOMAIN", True)
        for geom, layer in ((solid, "KEEP_SOLID"), (empty, "KEEP_EMPTY")):
            for poly in polygon_parts(geom):
                for r in coordinate_rings(poly):
                    dxf_polyline(msp, r, layer, True)
        dxf_supports_and_loads(msp, result.problem, domain, s)
        return dxf_bytes(doc)
