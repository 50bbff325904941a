"""The model energy, its gradient on the product of spheres, and the virial.

Normalisation: E = NORMALISATION * sum_terms coupling * Int density d^3x with
NORMALISATION = 1 / (32 sqrt(2) pi^2), the Skyrme-Faddeev convention of Battye &
Sutcliffe (PRL 81 (1998) 4798) in which the charge-1 minimum is about 1.22.

Lattice schemes
---------------
Every density is evaluated at each site from n there and one-sided differences D+ or D-
along each axis, averaged over the eight octants (built-in terms use exactly equal faster
routes); the weights are positive, so a non-negative density gives a non-negative lattice
energy.  ``second`` uses the one-site difference (second order in h), ``fourth`` the
forward-biased five-point difference (fourth order), ``sixth`` the six-point one (sixth
order); all are neighbour coupled.  The stencils and their properties are in
`solitons.grid` (`STENCILS`).

Virial
------
The Derrick derivative of E[n(lambda x)] at lambda = 1 equals -h dE/dh at fixed array
values.  We report ``virial = sum_a h_a dE/dh_a / E`` (and the three per-axis parts), which
for the Skyrme-Faddeev model is (E2 - E4) / E: zero at a stationary point of the
continuum energy, negative for a soliton squeezed by its box (E4 > E2).
"""

from __future__ import annotations

from dataclasses import dataclass
from dataclasses import field as dc_field
from functools import lru_cache, partial
from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

from solitons.grid import PAD_WIDTH, STENCILS, Grid, grid_differences, grid_laplacian, pad, shifted
from solitons.terms import Term

NORMALISATION = 1.0 / (32.0 * np.sqrt(2.0) * np.pi**2)

SCHEMES = tuple(STENCILS)
MIN_POINTS = 2 * PAD_WIDTH + 3  # per axis: the stencil and a free interior


def _octant_average(term, centre, forward, backward, lap):
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
            densities.append(_octant_average(term, centre, forward, backward, lap))
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


class Evaluation(NamedTuple):
    energy: jnp.ndarray
    gradient: jnp.ndarray  # tangent-projected dE/dn, zero on held sites, (Nx, Ny, Nz, 3)


BACKENDS = ("auto", "jax", "numba")



def kernel_couplings(terms: tuple[Term, ...]) -> tuple[float, float] | None:
    """(c2, c4) when the model is c2 * dirichlet + c4 * skyrme_faddeev with the built-in
    kinds (the fused kernel of solitons.kernels applies), else None."""
    from solitons.terms import BUILTIN_TERMS

    couplings = {"dirichlet": 0.0, "skyrme_faddeev": 0.0}
    for term in terms:
        name = term.kind.name
        if name not in couplings or term.kind is not BUILTIN_TERMS[name]:
            return None
        couplings[name] += term.coupling
    return couplings["dirichlet"], couplings["skyrme_faddeev"]


@lru_cache(maxsize=16)
def grid_metric(grid: Grid, scheme: str):
    """The stretched grid's factors in the form `solitons.kernels` takes: metric[axis] =
    (forward difference factors, backward difference factors, site dx/dxi), or None when
    uniform."""
    if not grid.stretched:
        return None
    stencil = STENCILS[scheme]
    return tuple(grid.difference_factors(a, stencil) + (grid.jacobian(grid.xi_axes()[a], a),) for a in range(3))


@dataclass(frozen=True)
class Model:
    """A sum of terms on a grid with a lattice scheme.  Hashable: jitted methods take it
    as static data.

    ``backend`` chooses the evaluation route (`solitons.routes`), picked once here and
    asked by every method: "auto" (or "numba") the numba kernels, the fused plain kernel
    for c2 * dirichlet + c4 * skyrme_faddeev and the staged kernel for any other model
    (user terms differentiated pointwise by jax inside it); "jax" autodiff of the whole
    lattice energy (the reference).  `energy` is always the jax expression (traceable, for
    the Hessian); it equals the sum of `energies`."""

    terms: tuple[Term, ...]
    grid: Grid
    scheme: str = "second"
    backend: str = "auto"
    route: object = dc_field(init=False, repr=False, compare=False, hash=False)

    def __post_init__(self) -> None:
        from solitons.routes import choose_route

        if self.scheme not in SCHEMES:
            raise ValueError(f"unknown scheme {self.scheme!r}; choose from {sorted(SCHEMES)}")
        if self.backend not in BACKENDS:
            raise ValueError(f"unknown backend {self.backend!r}; choose from {BACKENDS}")
        if min(self.grid.shape) < MIN_POINTS:
            raise ValueError(
                f"grid {self.grid.shape} is smaller than the {self.scheme}-order stencil needs"
            )
        object.__setattr__(self, "route", choose_route(self))

    @property
    def uses_kernel(self) -> bool:
        """Whether a numba route evaluates the model (False only for backend "jax")."""
        from solitons.routes import Autodiff

        return not isinstance(self.route, Autodiff)

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(t.name for t in self.terms)

    def spacing_array(self, dtype=jnp.float64):
        return jnp.asarray(self.grid.spacing, dtype=dtype)

    @property
    def metric(self):
        return grid_metric(self.grid, self.scheme)

    @property
    def stencil(self):
        return STENCILS[self.scheme]

    def energies(self, field) -> dict[str, float]:
        """Energy of each term, by name."""
        return self.route.measure(np.asarray(field), density=False).energies

    def energy_density(self, field):
        """Total normalised energy density per site, (Nx, Ny, Nz)."""
        return self.route.measure(np.asarray(field)).density

    def density_and_virial(self, field) -> tuple[np.ndarray, dict]:
        """`energy_density` and `virial` from one pass (the per-step monitor of a
        relaxation asks for both)."""
        measures = self.route.measure(np.asarray(field))
        return measures.density, measures.virial

    def energy(self, field):
        return _total_jit(self, field, self.spacing_array())

    def value_and_grad(self, field) -> Evaluation:
        """Total energy and its tangent-projected gradient (held border sites zeroed)."""
        field = jnp.asarray(field)
        value, grad = _value_and_grad_jit(self, field, self.spacing_array(field.dtype))
        return Evaluation(value, grad)

    def evaluate(self, field: np.ndarray, out: np.ndarray | None = None) -> tuple[float, np.ndarray]:
        """value_and_grad outside jax tracing, for loops written in numpy: (energy, gradient
        as a numpy array, written into ``out`` if given).  The numba routes are called
        directly (no host callback)."""
        return self.route.evaluate(field, out)

    def virial(self, field) -> dict:
        """Derrick balance: h_a dE/dh_a / E per axis and in total (see module docstring)."""
        return self.route.measure(np.asarray(field), density=False).virial

    def force_scale(self) -> float:
        """Divide a gradient by this to get the Euler-Lagrange expression of the
        un-normalised density (grid independent): NORMALISATION * cell volume (of the
        centre site of a stretched grid; see `site_scale`)."""
        return NORMALISATION * self.grid.cell_volume

    def site_scale(self):
        """Per-site `force_scale`: a float on a uniform grid, on a stretched one an
        (Nx, Ny, Nz, 1) array NORMALISATION * site volume (the force is the gradient per
        unit physical volume)."""
        if not self.grid.stretched:
            return self.force_scale()
        return NORMALISATION * self.grid.site_volumes()[..., None]


def _total(model: Model, field, spacing):
    return sum(term_energies(field, spacing, model.grid, model.terms, model.scheme))


@partial(jax.jit, static_argnums=0)
def _measure_jit(model, field, spacing):
    """Per-term energies, the density, the total and its spacing derivative (one compile)."""
    def total(spacing):
        energies = term_energies(field, spacing, model.grid, model.terms, model.scheme)
        return sum(energies), energies

    (value, energies), dspacing = jax.value_and_grad(total, has_aux=True)(spacing)
    density = sum(term_densities(field, spacing, model.grid, model.terms, model.scheme))
    return energies, density, value, dspacing


@partial(jax.jit, static_argnums=0)
def _total_jit(model, field, spacing):
    return _total(model, field, spacing)


def _kernel_value_and_grad(model: Model, field):
    """A numba route through a host callback, so jitted minimiser steps can call it."""

    def host(values):
        energy, grad = model.route.evaluate(np.asarray(values))
        return np.asarray(energy, dtype=np.float64), grad

    shapes = (jax.ShapeDtypeStruct((), jnp.float64), jax.ShapeDtypeStruct(field.shape, field.dtype))
    return jax.pure_callback(host, shapes, field, vmap_method="sequential")


@partial(jax.jit, static_argnums=0)
def _value_and_grad_jit(model, field, spacing):
    if model.uses_kernel:
        return _kernel_value_and_grad(model, field)
    value, grad = jax.value_and_grad(_total, argnums=1)(model, field, spacing)
    mask = jnp.asarray(model.grid.free_mask(), dtype=field.dtype)
    return value, project_tangent(field, grad) * mask
