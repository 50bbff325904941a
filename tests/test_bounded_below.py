"""The lattice energy of a non-negative density is non-negative on every scheme, for any
field: each site's density is an average over octants with positive weights (derived:
a sum of non-negative numbers with positive weights).  The former fourth-order scheme,
the Richardson combination (4 E[h] - E[2h]) / 3, broke this: the quartic term alone ran
to E = -7.9 (41^3, h = 0.2).  Its negative weight is rebuilt here from the second-order
energies of the field and of the field's two-site differences, to show that these fields
do find a negative energy where a negative weight exists."""

import numpy as np
import pytest
from fields import random_rotation

from solitons.lattice.grid import Grid
from solitons.model.energy import Model
from solitons.model.terms import BUILTIN_TERMS, Term

# densities that are >= 0 for every (n, d n, lap) (derived from their formulas in
# solitons/model/terms.py: sums of squares, H^2 = |a|^2 |b|^2 - (a.b)^2 >= 0, products of these,
# and mass^2 (1 - n3)^power with the clamp at 0)
NON_NEGATIVE = ("dirichlet", "skyrme_faddeev", "dirichlet_squared", "strain_squared", "potential",
                "laplacian_squared", "sextic")
SCHEMES = ("second", "fourth", "sixth")


def random_unit_field(shape, rng):
    field = rng.standard_normal(tuple(shape) + (3,))
    return field / np.linalg.norm(field, axis=-1, keepdims=True)


def staircase_field(shape, period, rng):
    """n takes one of two random unit vectors, switching every period/2 sites along each
    axis (a period-2 staircase is the checkerboard), rotated at random in the target."""
    i, j, k = np.indices(shape)
    phase = ((i // (period // 2)) + (j // (period // 2)) + (k // (period // 2))) % 2
    a, b = random_unit_field((2,), rng)
    field = np.where(phase[..., None] == 0, a, b)
    return field @ random_rotation(rng).T


def fields(grid, rng):
    yield "random", random_unit_field(grid.shape, rng)
    yield "period 2", staircase_field(grid.shape, 2, rng)
    yield "period 4", staircase_field(grid.shape, 4, rng)


@pytest.mark.parametrize("scheme", SCHEMES)
@pytest.mark.parametrize("boundary", ["fixed", "periodic"])
def test_non_negative_density_gives_non_negative_lattice_energy(scheme, boundary, rng):
    grid = Grid.centred(12, 0.3, boundary)
    terms = tuple(Term(name, BUILTIN_TERMS[name]) for name in NON_NEGATIVE)
    model = Model(terms, grid, scheme, "jax")
    for label, field in fields(grid, rng):
        energies = model.energies(field)
        # a staircase's differences are all parallel to a - b, so its H^2 is zero up to
        # rounding (about 1e-17 of the Dirichlet energy): the bound allows rounding only
        rounding = 1e-12 * energies["dirichlet"]
        for name, value in energies.items():
            assert value >= -rounding, (label, name, value)
        density = model.energy_density(field)
        assert np.all(density >= -1e-12 * np.abs(density).max()), label
        assert energies["dirichlet"] > 0.0
        if label == "random":
            assert energies["skyrme_faddeev"] > 0.0


def test_a_negative_weight_finds_a_negative_energy_on_these_fields(rng):
    """The Richardson combination of the second-order energies at h and 2h, written out
    from the second-order scheme: E[2h] of a field, built from two-site differences, is
    the mean second-order energy of its eight interleaved sublattices at spacing 2h
    (periodic box of even side, derived).  On a period-4 staircase each sublattice is a
    checkerboard, whose differences are twice the fine lattice's largest ones on every
    site, so E[2h] > 4 E[h] for the quartic term and the combination is negative (the
    case the tests above guard against)."""
    grid = Grid.centred(24, 0.3, "periodic")
    coarse = Grid.centred(12, 0.6, "periodic")
    quartic = (Term("skyrme_faddeev", BUILTIN_TERMS["skyrme_faddeev"]),)
    fine_model, coarse_model = Model(quartic, grid, "second", "jax"), Model(quartic, coarse, "second", "jax")
    field = staircase_field(grid.shape, 4, rng)
    fine = fine_model.energies(field)["skyrme_faddeev"]
    # each fine site carries h^3, a coarse site (2h)^3: E[2h] is the sublattices' mean
    double = sum(coarse_model.energies(field[a::2, b::2, c::2])["skyrme_faddeev"]
                 for a in (0, 1) for b in (0, 1) for c in (0, 1)) / 8.0
    richardson = (4.0 * fine - double) / 3.0
    assert richardson < 0.0
    assert Model(quartic, grid, "fourth", "jax").energies(field)["skyrme_faddeev"] > 0.0
    assert Model(quartic, grid, "sixth", "jax").energies(field)["skyrme_faddeev"] > 0.0
