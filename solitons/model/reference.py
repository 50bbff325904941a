"""The lattice energy as a jax expression: the reference every fast route must equal.

Pure functions of (field, spacing, grid, terms, scheme): the per-term densities at each
site as octant averages of the continuum density over one-sided differences, their
energies, and the tangent projection.  `solitons.model.energy.Model` binds terms to a
grid and picks a fast route (`solitons.model.routes`); the routes import this module and
nothing here imports them.
"""

from __future__ import annotations

from functools import lru_cache, partial

import jax
import jax.numpy as jnp
import numpy as np

from solitons.lattice.grid import PAD_WIDTH, STENCILS, Grid, grid_differences, grid_laplacian, pad, shifted
from solitons.model.terms import BUILTIN_TERMS, Term

NORMALISATION = 1.0 / (32.0 * np.sqrt(2.0) * np.pi**2)

SCHEMES = tuple(STENCILS)
MIN_POINTS = 2 * PAD_WIDTH + 3  # per axis: the stencil and a free interior


def octant_average(term, centre, forward, backward, lap):
    parameters = term.parameter_values()
    total = 0.0
    for sx in (forward[0], backward[0]):
        for sy in (forward[1], backward[1]):
            for sz in (forward[2], backward[2]):
                d = jnp.stack((sx, sy, sz), axis=-2)
                total = total + term.kind.density(centre, d, lap, **parameters)
    return total / 8.0


def _site_densities(field, spacing, grid: Grid, terms: tuple[Term, ...], scheme: str, generic: bool):
    stencil = STENCILS[scheme]
    padded = pad(field, grid.boundary, PAD_WIDTH)
    centre = shifted(padded, PAD_WIDTH, grid.shape, 0, 0)
    forward, backward = grid_differences(padded, PAD_WIDTH, grid, spacing, stencil)
    lap = None
    if any(term.kind.needs_laplacian for term in terms):
        lap = grid_laplacian(padded, PAD_WIDTH, grid, spacing, stencil)
    densities = []
    for term in terms:
        if term.kind.lattice is not None and not generic:
            densities.append(term.kind.lattice(forward, backward, centre, lap,
                                               **term.parameter_values()))
        else:
            densities.append(octant_average(term, centre, forward, backward, lap))
    return densities


def term_densities(field, spacing, grid: Grid, terms, scheme: str = "second", generic=False):
    """Per-term lattice energy densities (tuple of (Nx, Ny, Nz) arrays, normalised, energy per
    unit volume): summed over sites times `Grid.site_volumes` they give the energy."""
    if scheme not in STENCILS:
        raise ValueError(f"unknown scheme {scheme!r}; choose from {sorted(SCHEMES)}")
    densities = _site_densities(field, spacing, grid, terms, scheme, generic)
    return tuple(NORMALISATION * term.coupling * d for term, d in zip(terms, densities))


def term_energies(field, spacing, grid: Grid, terms, scheme: str = "second", generic=False):
    """Per-term energies (tuple, same order as ``terms``) of a (Nx, Ny, Nz, 3) unit field.

    ``spacing`` is passed separately from ``grid`` (which is static) so that the virial can
    differentiate with respect to it.  ``generic=True`` forces the octant-average route for
    every term (used to check the fast routes)."""
    volume = spacing[0] * spacing[1] * spacing[2]
    densities = term_densities(field, spacing, grid, terms, scheme, generic)
    if grid.stretched:
        weights = jnp.asarray(grid.site_weights(), dtype=field.dtype)
        return tuple(volume * jnp.sum(d * weights) for d in densities)
    return tuple(volume * jnp.sum(d) for d in densities)


def project_tangent(field, vectors):
    """Remove the component of ``vectors`` along the unit field: v - (v . n) n."""
    return vectors - jnp.sum(vectors * field, axis=-1, keepdims=True) * field


def normalise(vectors):
    return vectors / jnp.linalg.norm(vectors, axis=-1, keepdims=True)


def kernel_couplings(terms: tuple[Term, ...]) -> tuple[float, float] | None:
    """(c2, c4) when the model is c2 * dirichlet + c4 * skyrme_faddeev with the built-in
    kinds (the fused kernel of solitons.model.routes.kernels applies), else None."""
    couplings = {"dirichlet": 0.0, "skyrme_faddeev": 0.0}
    for term in terms:
        name = term.kind.name
        if name not in couplings or term.kind is not BUILTIN_TERMS[name]:
            return None
        couplings[name] += term.coupling
    return couplings["dirichlet"], couplings["skyrme_faddeev"]


@lru_cache(maxsize=16)
def grid_metric(grid: Grid, scheme: str):
    """The stretched grid's factors in the form `solitons.model.routes.kernels` takes: metric[axis] =
    (forward difference factors, backward difference factors, site dx/dxi), or None when
    uniform."""
    if not grid.stretched:
        return None
    stencil = STENCILS[scheme]
    return tuple(grid.difference_factors(a, stencil) + (grid.jacobian(grid.xi_axes()[a], a),) for a in range(3))


def total_energy(model, field, spacing):
    return sum(term_energies(field, spacing, model.grid, model.terms, model.scheme))


@partial(jax.jit, static_argnums=0)
def measure_jit(model, field, spacing):
    """Per-term energies, the density, the total and its spacing derivative (one compile)."""
    def total(spacing):
        energies = term_energies(field, spacing, model.grid, model.terms, model.scheme)
        return sum(energies), energies

    (value, energies), dspacing = jax.value_and_grad(total, has_aux=True)(spacing)
    density = sum(term_densities(field, spacing, model.grid, model.terms, model.scheme))
    return energies, density, value, dspacing


@partial(jax.jit, static_argnums=0)
def total_jit(model, field, spacing):
    return total_energy(model, field, spacing)

