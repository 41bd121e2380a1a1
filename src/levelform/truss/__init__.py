"""The truss ground-structure reference: the stiffest truss a problem's domain, supports
and loads allow, by plastic layout optimization (docs/truss.md)."""
from __future__ import annotations

from .ground import GroundStructure, all_bars, build_ground_structure, default_spacing, valid_bars
from .layout import TrussCase, TrussResult, estimate_truss_bytes, solve_layout, truss_reference

__all__ = ["GroundStructure", "all_bars", "TrussCase", "TrussResult", "build_ground_structure",
           "default_spacing", "estimate_truss_bytes", "solve_layout", "truss_reference", "valid_bars"]
