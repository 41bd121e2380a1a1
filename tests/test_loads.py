"""Loads and supports on the grid: consistent line loads, and point forces spread over a pad so
that figures converge under refinement."""
from __future__ import annotations

import numpy as np
import pytest
from conftest import plate_problem, rectangle

from levelform.fem.analysis import PlateSystem
from levelform.physics import PlaneStress
from levelform.fem.model import build_model
from levelform.spec import Load, Support


def _plate(cell, pads, load=None):
    return plate_problem(
        rectangle(0, 0, 40, 20), cell, [Support("segment", ((0, 0), (0, 20)), "xy", pad=False)],
        [load or Load("point", (40.0, 10.0), (0.0, -1.0))], E=1000.0,
        method={"pads": pads, "pad_radius": 2.0},
    )


def _solid_compliance(problem):
    model = build_model(problem)
    system = PlateSystem(model, PlaneStress(problem.material.E, problem.material.nu, problem.material.thickness))
    return system.analyse(np.ones(model.n_cells)).compliance


def test_point_force_on_a_pad_converges_under_refinement():
    # A concentrated force in 2D elasticity has a logarithmically infinite displacement under
    # it (Flamant's solution, Timoshenko and Goodier, Theory of Elasticity, sec. 36; from
    # memory), so the compliance of an exact nodal force grows by about the same amount at
    # every halving of the cell. Spread over a pad of fixed radius, it converges.
    exact = [_solid_compliance(_plate(h, pads=False)) for h in (1.0, 0.5, 0.25)]
    padded = [_solid_compliance(_plate(h, pads=True)) for h in (1.0, 0.5, 0.25)]
    d1, d2 = exact[1] - exact[0], exact[2] - exact[1]
    assert d1 > 0.005 * exact[0] and d2 > 0.005 * exact[0]
    assert d2 == pytest.approx(d1, rel=0.25)  # log(1/h) growth: equal steps per halving
    # Close to second order (ratio 1/4 per halving); allow 0.4.
    assert abs(padded[2] - padded[1]) < 0.4 * abs(padded[1] - padded[0])
    assert abs(padded[2] - padded[1]) < 0.002 * padded[2]


def test_line_load_total_and_consistent_nodal_values():
    # Consistent nodal loads of a uniform traction on linear edges: q h / 2 at the two end
    # nodes, q h inside (any finite-element text, e.g. Cook et al., Concepts and Applications
    # of Finite Element Analysis, 4th ed., sec. 3.10; from memory).
    q = -0.5
    p = _plate(1.0, pads=False, load=Load("segment", ((10.0, 20.0), (30.0, 20.0)), (0.0, q)))
    model = build_model(p)
    fy = np.zeros(model.n_dof)
    fy[model.free >= 0] = model.forces[:, 0]
    fy = fy[1::2]
    nz = fy[np.abs(fy) > 0]
    assert fy.sum() == pytest.approx(q * 20.0, rel=1e-12)
    assert nz.size == 21
    assert np.count_nonzero(np.isclose(nz, q * 0.5)) == 2
    assert np.count_nonzero(np.isclose(nz, q * 1.0)) == 19


def test_pads_only_where_the_force_is_concentrated():
    # The pad rule (docs/method.md): points always, segments and boxes only when no longer
    # than PAD_SHORT pad radii; a user's own pad flag wins either way.
    from levelform.fem.model import PAD_SHORT, needs_pad

    r = 2.0
    assert needs_pad(Load(kind="point", where=(1.0, 1.0), force=(0.0, -1.0)), r)
    short = Support(kind="segment", where=((0.0, 0.0), (0.0, PAD_SHORT * r)), fix="xy")
    long = Support(kind="segment", where=((0.0, 0.0), (0.0, PAD_SHORT * r * 1.01)), fix="xy")
    assert needs_pad(short, r) and not needs_pad(long, r)
    assert not needs_pad(Support(kind="box", where=(0.0, 0.0, 3 * PAD_SHORT * r, 1.0), fix="xy"), r)
    assert needs_pad(Support(kind="box", where=(0.0, 0.0, 1.0, 1.0), fix="xy"), r)
