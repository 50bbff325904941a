"""Position curves: preimages as closed polylines, their linking, projection crossings."""

import numpy as np
import pytest

from solitons.lattice.grid import Grid
from solitons.measure.curves import curve_length, linking_number, preimage_chains, projection_crossings
from solitons.relaxation.initial import axial_map, hopf_map

GRID = Grid.centred(64, 0.125, "fixed")


def test_hopf_map_position_curve_is_the_unit_circle():
    """The Hopf map's preimage of -e3 is Z0 = 0: the circle r = size in the plane z = 0
    (derived from the map in solitons.relaxation.initial)."""
    chains = preimage_chains(hopf_map(GRID, 1.0), GRID)
    assert len(chains) == 1 and chains[0][1]
    points = chains[0][0]
    assert np.allclose(np.linalg.norm(points[:, :2], axis=1), 1.0, atol=0.02)
    assert np.allclose(points[:, 2], 0.0, atol=0.02)
    assert abs(curve_length(points) - 2 * np.pi) < 0.02
    assert projection_crossings([points], (0.25, 0.15, 1.0)) == []


@pytest.mark.parametrize("a, b", [(1, 1), (2, 1), (3, 1), (1, 2), (2, 2), (4, 1)])
def test_linking_of_two_preimages_equals_the_charge(a, b):
    """The preimages of two regular values link |Q| times (Pontryagin; textbook fact,
    docs/references.md [R7]), Q = a b for the axial maps (Sutcliffe 2007).  Oriented along B the
    Gauss linking number is the bare Whitehead integral (helicity), which our sign
    convention negates, so it reads -a b (derived; the bare sign is checked in
    test_topology.py).  Values +e1 and -e2 are regular for these maps (for b > 1, -e3 is
    not: its preimage is a multiple curve)."""
    field = axial_map(GRID, a, b, 1.0)
    first = [c for c, closed in preimage_chains(field, GRID, (1.0, 0.0, 0.0)) if closed]
    second = [c for c, closed in preimage_chains(field, GRID, (0.0, -1.0, 0.0)) if closed]
    total = sum(linking_number(p, q) for p in first for q in second)
    assert abs(total + a * b) < 0.05


def test_crossings_of_a_tilted_view_of_two_linked_rings():
    """Two rings linked once (a Hopf link) seen from a generic direction cross twice,
    once with each ring on top (derived: the linking number is half the signed crossing
    count)."""
    t = np.linspace(0, 2 * np.pi, 200, endpoint=False)
    ring_a = np.stack((np.cos(t), np.sin(t), 0 * t), -1)
    ring_b = np.stack((1 + np.cos(t), 0 * t, np.sin(t)), -1)
    assert abs(abs(linking_number(ring_a, ring_b)) - 1) < 1e-2
    crossings = projection_crossings([ring_a, ring_b], (0.2, 0.3, 1.0))
    assert len(crossings) == 2
    assert {(over, under) for _, over, under in crossings} == {(0, 1), (1, 0)}
