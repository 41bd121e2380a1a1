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

    domain, material, solid, empty, size = drawing_inputs(result)
    unit = length_unit(result.problem)
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
            pts = [(round_coordinate(x), round_coordinate(y)) for x, y in np.asarray(points)[:, :2]]
            if len(pts) > 1 and pts[0] == pts[-1]:
                pts = pts[:-1]
            msp.add_lwpolyline(pts, format="xy", close=True, dxfattribs={"layer": layer})

        def line(points, layer):
            pts = [(round_coordinate(x), round_coordinate(y)) for x, y in np.asarray(points)[:, :2]]
            msp.add_lwpolyline(pts, format="xy", close=False, dxfattribs={"layer": layer})

        for poly in material:
            ring(poly.exterior.coords, "OUTLINE")
            for r in poly.interiors:
                ring(r.coords, "HOLES")
        for r in coordinate_rings(domain):
            ring(r, "DOMAIN")
        for geom, layer in ((solid, "KEEP_SOLID"), (empty, "KEEP_EMPTY")):
            for poly in polygon_parts(geom):
                for r in coordinate_rings(poly):
                    ring(r, layer)
        for sup in result.problem.supports:
            closed, opens, label = support_glyphs(sup, s, domain)
            for c in closed:
                ring(c, "SUPPORTS")
            for o in opens:
                line(o, "SUPPORTS")
            if label is not None:
                (lx, ly), text = label
                msp.add_text(text, height=0.5 * s, dxfattribs={"layer": "SUPPORTS"}
                             ).set_placement((round_coordinate(lx), round_coordinate(ly)))
        for load in result.problem.loads:
            tails, heads = load_arrows(load, 3.5 * s)
            if load.kind == "segment":
                line(np.asarray(load.where, dtype=float), "LOADS")
            for tail, head in zip(tails, heads):
                line(np.array([tail, head]), "LOADS")
                d = unit_vector(head - tail)
                t = np.array([-d[1], d[0]])
                ring(np.array([head, head - 0.6 * s * d + 0.25 * s * t,
                               head - 0.6 * s * d - 0.25 * s * t]), "LOADS")
        stream = io.StringIO()
        doc.write(stream)
        return doc.encode(_sorted_dxf_classes(stream.getvalue()))
