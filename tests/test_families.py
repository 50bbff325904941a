"""Initial-data families from rational maps: each family's measured Hopf charge against its
formula, placement, orientation, noise."""

import numpy as np
import pytest

from solitons.lattice.grid import Grid
from solitons.measure.curves import preimage_chains
from solitons.measure.topology import hopf_charge
from solitons.relaxation.initial import add_noise, euler_rotation, expected_charge, initial_field

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
    # derived (solitons.relaxation.initial docstring): links, Q = sum_k (alpha b_k + beta a_k)
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
    formula gives (Sutcliffe 2007, as above)."""
    from solitons.campaigns.survey import DEFAULT_FAMILIES

    assert {expected_charge(f) for f in DEFAULT_FAMILIES} == set(range(1, 17))


@pytest.mark.slow
def test_builtin_families_carry_their_charge_at_the_survey_spacing():
    """Each built-in family from Q = 9 on, at its own size and box and h = 0.2 (the
    spacing of analysis/survey_q1_16): the Whitehead integral reads at least 0.86 of the
    formula's charge (link and axial maps: within 1 %).  Below that the start is a lattice
    field of another charge (measured: a (5,2;3,2) map read 5.7 of 16 and collapsed, a
    (3,1;3,2) map read 8.0 of 9 and relaxed to a Q = 9.0000 trefoil); the torus-knot maps
    with large numerator powers need size / h of 20-25 (measured: (5,2;3,2) 6.03, 9.66,
    12.3, 14.3 for 16 at size / h = 12, 16, 20, 25), so the list leaves them out."""
    from solitons.campaigns.survey import DEFAULT_FAMILIES

    for family in DEFAULT_FAMILIES:
        charge = expected_charge(family)
        if charge < 9:
            continue
        points = int(np.ceil(family["box"] / 0.2)) + 1
        grid = Grid.centred(points + 1 - points % 2, 0.2, "fixed")
        part = {k: v for k, v in family.items() if k != "box"}
        measured = hopf_charge(initial_field(grid, part), grid)
        floor = 0.99 if family["family"] != "torus_knot" else 0.86
        assert floor * charge < measured < charge + 0.05, (family, measured)
