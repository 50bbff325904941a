"""Lattice schemes: neighbour coupling (checkerboard), order of accuracy, exact equality of
the fast and generic routes."""

import numpy as np
import pytest
from conftest import SKYRME_FADDEEV, skyrme_faddeev_model
from fields import twisted_field
from scipy.integrate import quad

from solitons.lattice.grid import Grid
from solitons.model.energy import NORMALISATION, term_energies
from solitons.relaxation.initial import add_noise, hopf_map


def continuum_twisted_energies(amplitude, k, side):
    """Exact energies of `twisted_field` by scipy quadrature (an independent route).

    Derived: with t = A sin(kx), p = k(y+z): |d_x n|^2 = t'^2, |d_y n|^2 = |d_z n|^2 =
    k^2 sin^2 t; |d_x n x d_y n|^2 = |d_x n x d_z n|^2 = t'^2 k^2 sin^2 t, and d_y n is
    parallel to d_z n so the yz pair vanishes.  The y, z integrals give side^2."""
    def theta(x):
        return amplitude * np.sin(k * x)

    def dtheta(x):
        return amplitude * k * np.cos(k * x)

    e2 = quad(lambda x: dtheta(x) ** 2 + 2 * k**2 * np.sin(theta(x)) ** 2, 0, side, limit=200)[0]
    e4 = quad(lambda x: 2 * dtheta(x) ** 2 * k**2 * np.sin(theta(x)) ** 2, 0, side, limit=200)[0]
    return NORMALISATION * side**2 * e2, NORMALISATION * side**2 * e4


@pytest.mark.parametrize("scheme, expected_ratio, amplitude, coarse", [("second", 4.0, 1.2, 32),
                                                                       ("fourth", 16.0, 0.7, 64),
                                                                       ("sixth", 64.0, 0.7, 64)])
def test_order_of_accuracy(scheme, expected_ratio, amplitude, coarse):
    """Energy error falls by 2^order when h halves (common practice for testing stencils).
    The fourth-order quartic error has a large h^6 part on this field (measured ratios
    27, 21, 17.5 from 16 to 128 points at amplitude 0.7), so the high orders are tested
    where the ratio has settled: 64 -> 128 points (sixth order measured 63.0 and 60.9)."""
    side = 2 * np.pi
    errors = []
    for points in (coarse, 2 * coarse):
        grid = Grid.centred(points, side / points, "periodic")
        field, k = twisted_field(grid, amplitude)
        exact = continuum_twisted_energies(amplitude, k, side)
        lattice = term_energies(field, np.asarray(grid.spacing), grid, SKYRME_FADDEEV, scheme)
        errors.append([abs(float(a) - b) for a, b in zip(lattice, exact)])
    errors = np.asarray(errors)
    ratios = errors[0] / errors[1]
    assert np.all(ratios > 0.85 * expected_ratio) and np.all(ratios < 1.15 * expected_ratio), ratios


@pytest.mark.parametrize("scheme", ["second", "fourth", "sixth"])
def test_checkerboard_perturbation_raises_energy(scheme):
    """A site-to-site flip (-1)^(x+y+z) is seen by the neighbour-coupled scheme; plain
    central differences give it zero energy (derived: the symbol of (f(x+h) - f(x-h))/2h
    is i sin(kh)/h, zero at kh = pi)."""
    grid = Grid.centred(16, 0.4, "periodic")
    uniform = np.zeros(grid.shape + (3,))
    uniform[..., 2] = 1.0
    i, j, k = np.indices(grid.shape)
    sign = (-1.0) ** (i + j + k)
    epsilon = 0.1
    flipped = np.stack((epsilon * sign, np.zeros(grid.shape), np.ones(grid.shape)), -1)
    flipped /= np.linalg.norm(flipped, axis=-1, keepdims=True)
    model = skyrme_faddeev_model(grid, scheme)
    assert model.energies(uniform)["dirichlet"] == 0.0
    assert model.energies(flipped)["dirichlet"] > 1e-3

    # the same perturbation is invisible to central differences
    central = sum(
        np.sum(((np.roll(flipped, -1, a) - np.roll(flipped, 1, a)) / (2 * 0.4)) ** 2)
        for a in range(3)
    )
    assert central < 1e-20


@pytest.mark.parametrize("scheme", ["second", "fourth", "sixth"])
@pytest.mark.parametrize("boundary", ["fixed", "periodic"])
def test_fast_route_equals_octant_average(scheme, boundary):
    """The built-in terms' fast lattice routes equal the generic eight-octant average
    (derived: the averages separate per axis and per pair of axes)."""
    grid = Grid.centred(20, 0.4, boundary)
    # noise breaks the map's symmetry so that boundary links cannot cancel by accident
    field = add_noise(hopf_map(grid, 1.5), grid, 0.1, 11)
    spacing = np.asarray(grid.spacing)
    fast = term_energies(field, spacing, grid, SKYRME_FADDEEV, scheme)
    generic = term_energies(field, spacing, grid, SKYRME_FADDEEV, scheme, generic=True)
    np.testing.assert_allclose(np.asarray(fast), np.asarray(generic), rtol=1e-12)
