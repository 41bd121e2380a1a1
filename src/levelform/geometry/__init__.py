"""Shapely geometry: the problem's shapes, the outline of a level set, and its measurements."""
from __future__ import annotations

from .measure import design_holes, outline_holes, outline_metrics
from .shapes import domain_polygon, item_geometry, keep_regions, region_geometry

__all__ = ["design_holes", "domain_polygon", "item_geometry", "keep_regions", "outline_holes",
           "outline_metrics", "region_geometry"]
