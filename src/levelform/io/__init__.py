"""Everything levelform reads and writes: atomic files, outlines (SVG, DXF, GeoJSON),
figures, the summary, the body-fitted check's files, checkpoints and the comparison report.

Writers take plain values (a Result, a Verification) and never solve anything; every file
is rendered in memory first and written atomically, so a failure leaves no half-written file.
"""
from __future__ import annotations

from .atomic import atomic_write_bytes, atomic_write_text, json_text, write_json
from .dxf import DXF_LAYERS, outline_dxf
from .export import FILES, export, history_csv, summary
from .figures import design_png, history_png
from .geojson import outline_geojson
from .svg import outline_svg

__all__ = [
    "DXF_LAYERS", "FILES", "atomic_write_bytes", "atomic_write_text", "design_png", "export",
    "history_csv", "history_png", "json_text", "outline_dxf", "outline_geojson", "outline_svg",
    "summary", "write_json",
]
