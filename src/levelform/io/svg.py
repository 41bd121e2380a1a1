"""The outline as SVG at true scale."""
from __future__ import annotations

from xml.sax.saxutils import escape

from ..spec import CAUTION, Result
from .figures import COLOR_DOMAIN, COLOR_MATERIAL
from .scene import coordinate_rings, coordinate_text, drawing_inputs, length_unit

# --------------------------------------------------------------------------- SVG

def _svg_path(polys, flip_y: bool = True) -> str:
    parts = []
    for poly in polys:
        for ring in coordinate_rings(poly):
            pts = ring[:-1]
            ys = -pts[:, 1] if flip_y else pts[:, 1]
            coords = " ".join(f"{coordinate_text(x)},{coordinate_text(y)}" for x, y in zip(pts[:, 0], ys))
            parts.append(f"M{coords}Z")
    return " ".join(parts)


_SVG_UNITS = {"mm": (1.0, "mm"), "cm": (1.0, "cm"), "in": (1.0, "in"),
              "m": (1000.0, "mm"), "ft": (12.0, "in")}


def outline_svg(result: Result) -> str:
    """SVG of the material outline over the thin domain edge, at true scale when the
    length unit maps to an SVG unit. Model y points up; SVG y points down, so y is negated."""
    domain, material, _, _, size = drawing_inputs(result)
    minx, miny, maxx, maxy = domain.bounds
    m = 0.02 * max(maxx - minx, maxy - miny)
    vx, vy, vw, vh = minx - m, -(maxy + m), (maxx - minx) + 2 * m, (maxy - miny) + 2 * m
    unit = length_unit(result.problem)
    scale, svg_unit = _SVG_UNITS.get(unit.lower(), (1.0, ""))
    name = escape(str(result.problem.name))
    lines = [
        '<?xml version="1.0" encoding="UTF-8"?>',
        f'<svg xmlns="http://www.w3.org/2000/svg" version="1.1" '
        f'width="{coordinate_text(vw * scale)}{svg_unit}" height="{coordinate_text(vh * scale)}{svg_unit}" '
        f'viewBox="{coordinate_text(vx)} {coordinate_text(vy)} {coordinate_text(vw)} {coordinate_text(vh)}">',
        f"  <title>{name}</title>",
        f"  <desc>Material outline in model units ({escape(unit)}); model y axis points up. "
        f"{escape(CAUTION)}</desc>",
        f'  <rect x="{coordinate_text(vx)}" y="{coordinate_text(vy)}" width="{coordinate_text(vw)}" height="{coordinate_text(vh)}" '
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
