"""Initial-data families from rational maps: each family's measured Hopf charge against its
formula, placement, orientation, noise."""

import numpy as np
import pytest

from solitons.curves import preimage_chains
from solitons.grid import Grid
from solitons.initial import add_noise, euler_rotation, expected_charge, initial_field
from solitons.topology import hopf_charge

# 96^3, h = 0.125 (box side 11.9), fixed border: fine enough for the knot maps at size 1.5
# (a (3, 2) knot map at size 1 reads only 4.2 at 128^3, docs/references.md [R6]).
GRID = Grid.centred(96, 0.125, "fixed")

FAMILIES = [
    # Sutcliffe, Proc. R. Soc. A 463 (2007) 3001, arXiv:0705.1468 (memory): axial Q = a b
    ({"family": "axial", "a": 2, "b": 1}, 2),
    ({"family": "axial", "a": 2, "b": 2}, 4),
    ({"family": "axial", "a": 4, "b": 1}, 4),
    # same source: torus-knot maps Q = alpha b + beta a
    ({"family": "torus_knot", "alpha": 1, "beta": 1, "a": 3, "b": 2}, 5),
    ({"family": "torus_knot", "alpha": 2, "beta": 1, "a": 3, "b": 2}, 7),
    ({"family": "torus_knot", "alpha": 1, "beta": 2, "a": 2, "b": 3}, 7),
    # derived (solitons.initial docstring): links, Q = sum_k (alpha b_k + beta a_k)
    ({"family": "rational", "alpha": 1, "beta": 1, "factors": [(1, 1, 1.0), (1, 1, -1.0)]}, 4),
    ({"family": "rational", "alpha": 1, "beta": 1, "factors": [(1, 1, 1.0), (1, 2, -1.0)]}, 5),
    ({"family": "rational", "alpha": 1, "beta": 1, "factors": [(1, 2, 1.0), (1, 2, -1.0)]}, 6),
]


@pytest.mark.parametrize("family, charge", FAMILIES, ids=[str(q) + f["family"] for f, q in FAMILIES])
def test_family_charge_matches_its_formula(family, charge):
    part = dict(family, size=1.5, orientation=(20.0, 35.0, -10.0))
    assert expected_charge(part) == charge
    measured = hopf_charge(initial_field(GRID, part), GRID)
    assert abs(measured - charge) < 0.02 * charge, measured


def test_separated_solitons_add_their_charges():
    """Two parts placed apart (each vacuum outside its own ball): Q adds (derived)."""
    part = {"family": "several", "parts": [
        {"family": "axial", "a": 1, "b": 1, "size": 1.0, "centre": (-2.6, 0.0, 0.0), "orientation": (0, 0, 0)},
        {"family": "axial", "a": 2, "b": 1, "size": 1.0, "centre": (2.6, 0.0, 0.0), "orientation": (0, 90, 0)}]}
    assert expected_charge(part) == 3
    field = initial_field(GRID, part)
    assert abs(hopf_charge(field, GRID) - 3) < 0.02 * 3
    # far from both centres the field is the vacuum
    far = np.linalg.norm(np.stack(GRID.mesh(), -1) - np.array([-2.6, 0, 0]), axis=-1) > 3.5
    far &= np.linalg.norm(np.stack(GRID.mesh(), -1) - np.array([2.6, 0, 0]), axis=-1) > 3.5
    assert np.allclose(field[far], [0, 0, 1])


def test_orientation_rotates_the_position_curve():
    """The Hopf map's position curve is the unit circle in the plane z = 0; turned by Euler
    angles (phi, theta, psi) it lies in the plane normal to R e3 (derived)."""
    angles = (30.0, 50.0, 10.0)
    part = {"family": "axial", "a": 1, "b": 1, "size": 1.0, "centre": (0.3, -0.2, 0.1), "orientation": angles}
    field = initial_field(GRID, part)
    (points, closed), = preimage_chains(field, GRID)
    normal = euler_rotation(angles) @ np.array([0, 0, 1.0])
    offsets = points - np.array([0.3, -0.2, 0.1])
    assert closed
    assert np.abs(offsets @ normal).max() < 0.03
    assert np.allclose(np.linalg.norm(offsets, axis=1), 1.0, atol=0.03)
    assert abs(hopf_charge(field, GRID) - 1) < 1e-3
    rotation = euler_rotation(angles)
    assert np.allclose(rotation @ rotation.T, np.eye(3)) and np.isclose(np.linalg.det(rotation), 1)


def test_noise_is_seeded_and_keeps_unit_length():
    grid = Grid.centred(24, 0.3, "fixed")
    field = initial_field(grid, {"family": "axial", "a": 1, "b": 1, "size": 1.0})
    first = add_noise(field, grid, 0.05, seed=3)
    assert np.array_equal(first, add_noise(field, grid, 0.05, seed=3))
    assert not np.array_equal(first, add_noise(field, grid, 0.05, seed=4))
    assert np.allclose(np.linalg.norm(first, axis=-1), 1.0)
    assert np.array_equal(first[0], field[0])  # the fixed border keeps the vacuum


def test_builtin_survey_families_reach_charge_16():
    """The built-in survey list has families for every Q = 1..16, each with the charge its
    formula gives (Sutcliffe 2007, as above); the link and axial maps added for Q = 9..16
    read their charge in the Whitehead integral to 1 % at size 1.5 on this grid.  The
    torus-knot maps with large numerator powers do not at this resolution (measured at
    size 1.5 here: (5,2;3,2) 6.03 for 16, (3,3;3,2) 7.31 for 15; at size 2.5 on 192^3,
    h = 0.1: 14.3 and 14.2; (3,1;3,2) 8.63, 8.94, 9.00 for 9 at size / h = 12, 16, 20),
    so they are not asserted here: a survey has to give them that resolution."""
    from solitons.charge_survey import DEFAULT_FAMILIES

    charges = {expected_charge(f) for f in DEFAULT_FAMILIES}
    assert charges == set(range(1, 17))
    for family in DEFAULT_FAMILIES:
        if expected_charge(family) < 9 or family["family"] == "torus_knot":
            continue
        part = {k: v for k, v in family.items() if k != "box"}
        part.update(size=1.5, orientation=(20.0, 35.0, -10.0))
        charge = expected_charge(part)
        measured = hopf_charge(initial_field(GRID, part), GRID)
        assert abs(measured - charge) < 0.01 * charge, (family, measured)
