"""Inertia tensors of axially symmetric fields: for the axial map A_{a,b} a rotation by
alpha about the axis equals an isorotation by -a alpha (common practice; the relation used
by Krusch & Speight, Comm. Math. Phys. 264 (2006) 391, hep-th/0503067, and stated in
this project's issue on inertia), so the generators satisfy A_3 = -a A_0 pointwise and
hence V_33 = a^2 U and W_3 = -a U; the symmetry about the axis gives V_11 = V_22 and no
mixing with the perpendicular axes.  A field that is the vacuum everywhere has no
inertia (derived)."""

import numpy as np
import pytest

from solitons.lattice.grid import Grid
from solitons.measure.inertia import inertia_tensors
from solitons.relaxation.initial import axial_map

GRID = Grid.centred(49, 0.2, "fixed")


def density_of(field):
    # any positive weight centred on the soliton fixes the centre at the origin by symmetry
    return 1.0 - field[..., 2]


@pytest.mark.parametrize("a", [1, 2])
def test_axial_symmetry_relates_spin_and_isospin(a):
    n = axial_map(GRID, a, 1, 1.2)
    t = inertia_tensors(n, GRID, density_of(n))
    u, w, v = t["U"], np.array(t["W"]), np.array(t["V"])
    assert u > 0
    assert v[2, 2] == pytest.approx(a**2 * u, rel=2e-3)
    assert abs(abs(w[2]) - a * u) < 2e-3 * a * u
    assert v[0, 0] == pytest.approx(v[1, 1], rel=1e-6)
    assert np.max(np.abs(w[:2])) < 1e-6 * u
    assert abs(v[0, 2]) < 1e-6 * u and abs(v[1, 2]) < 1e-6 * u and abs(v[0, 1]) < 1e-6 * u


def test_vacuum_has_no_inertia():
    n = np.zeros(GRID.shape + (3,))
    n[..., 2] = 1.0
    t = inertia_tensors(n, GRID, np.ones(GRID.shape))
    assert np.allclose(t["matrix"], 0.0)
