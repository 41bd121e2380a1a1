"""The physics of a plate: what one kind of analysis needs from its element and material.

A physics object owns the unknowns per node, the element matrix of a solid square cell,
the strain-energy density, the topological derivative for a small hole, the cell-centre
stresses and the rigid-body modes. The grid model, the assembly, the analysis and the
methods read these through it, so a second physics (out-of-plane plate bending, three
unknowns per node) is one new module here, not a change in every layer.
"""
from __future__ import annotations

from .plane_stress import PlaneStress
from .rigid import restrained_modes, restrained_rank

__all__ = ["PlaneStress", "physics_of", "restrained_modes", "restrained_rank"]


def physics_of(problem) -> PlaneStress:
    """The physics a problem asks for (plane stress, the only one so far), from its material."""
    m = problem.material
    return PlaneStress(E=float(m.E), nu=float(m.nu), thickness=float(m.thickness))
