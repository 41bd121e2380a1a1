"""The body-fitted re-analysis of an exported outline: what you export is what was checked.

``mesh`` meshes the outline, ``boundary`` places the problem's supports and loads on the
mesh, ``check`` solves every load case and measures the figures (:func:`verify_outline`).
"""
from .check import Verification, verify_outline

__all__ = ["Verification", "verify_outline"]
