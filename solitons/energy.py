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

    ``backend`` chooses the route of value_and_grad, the hot path of a relaxation:
    "numba" the fused kernel of solitons.kernels (only for c2 * dirichlet +
    c4 * skyrme_faddeev), "jax" autodiff of the term densities, "auto" the kernel where it
    applies and jax otherwise.  Energies, densities and the virial always use jax."""

    terms: tuple[Term, ...]
    grid: Grid
    scheme: str = "second"
    backend: str = "auto"

    def __post_init__(self) -> None:
        if self.scheme not in SCHEMES:
            raise ValueError(f"unknown scheme {self.scheme!r}; choose from {sorted(SCHEMES)}")
        if self.backend not in BACKENDS:
            raise ValueError(f"unknown backend {self.backend!r}; choose from {BACKENDS}")
        if self.backend == "numba" and kernel_couplings(self.terms) is None:
            raise ValueError("the numba backend covers only the built-in dirichlet and skyrme_faddeev "
                             "terms; use backend 'jax' or 'auto' for this model")
        if min(self.grid.shape) < MIN_POINTS:
            raise ValueError(
                f"grid {self.grid.shape} is smaller than the {self.scheme}-order stencil needs"
            )

    @property
    def uses_kernel(self) -> bool:
        return self.backend != "jax" and kernel_couplings(self.terms) is not None

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(t.name for t in self.terms)

    def spacing_array(self, dtype=jnp.float64):
        return jnp.asarray(self.grid.spacing, dtype=dtype)

    def _kernel_pieces(self, field):
        from solitons import kernels

        c2, c4 = kernel_couplings(self.terms)
        return kernels.energy_pieces(np.asarray(field), self.grid.spacing, self.grid.boundary == "periodic",
                                     self.stencil.taps, c2, c4, NORMALISATION, self.metric)

    @property
    def metric(self):
        return grid_metric(self.grid, self.scheme)

    @property
    def stencil(self):
        return STENCILS[self.scheme]

    def energies(self, field) -> dict[str, float]:
        if self.uses_kernel:
            pieces, _ = self._kernel_pieces(field)
            c2, c4 = kernel_couplings(self.terms)
            totals = {"dirichlet": (float(pieces[:3].sum()), c2), "skyrme_faddeev": (float(pieces[3:].sum()), c4)}
            return {t.name: (totals[t.kind.name][0] * t.coupling / totals[t.kind.name][1]
                             if totals[t.kind.name][1] != 0 else 0.0) for t in self.terms}
        values = _energies_jit(self, field, self.spacing_array())
        return {name: float(v) for name, v in zip(self.names, values)}

    def energy_density(self, field):
        """Total normalised energy density per site, (Nx, Ny, Nz)."""
        if self.uses_kernel:
            return self._kernel_pieces(field)[1]
        return np.asarray(_density_jit(self, field, self.spacing_array()))

    def density_and_virial(self, field) -> tuple[np.ndarray, dict]:
        """`energy_density` and `virial` together: one kernel pass on the kernel route (the
        per-step monitor of a relaxation asks for both)."""
        if self.uses_kernel:
            from solitons import kernels

            pieces, density = self._kernel_pieces(field)
            total, per_axis = kernels.virial(pieces)
            return density, {"total": total, "per_axis": per_axis}
        return self.energy_density(field), self.virial(field)

    def energy(self, field):
        return _total_jit(self, field, self.spacing_array())

    def value_and_grad(self, field) -> Evaluation:
        """Total energy and its tangent-projected gradient (held border sites zeroed)."""
        field = jnp.asarray(field)
        value, grad = _value_and_grad_jit(self, field, self.spacing_array(field.dtype))
        return Evaluation(value, grad)

    def evaluate(self, field: np.ndarray, out: np.ndarray | None = None) -> tuple[float, np.ndarray]:
        """value_and_grad outside jax tracing, for loops written in numpy: (energy, gradient
        as a numpy array, written into ``out`` if given).  The kernel route calls numba
        directly (no host callback)."""
        if self.uses_kernel:
            from solitons import kernels

            c2, c4 = kernel_couplings(self.terms)
            return kernels.value_and_grad(np.asarray(field), self.grid.spacing, self.grid.boundary == "periodic",
                                          self.stencil.taps, c2, c4, NORMALISATION, out, self.metric)
        value, grad = self.value_and_grad(field)
        if out is None:
            return float(value), np.asarray(grad)
        out[...] = np.asarray(grad)
        return float(value), out

    def virial(self, field) -> dict:
        """Derrick balance: h_a dE/dh_a / E per axis and in total (see module docstring)."""
        if self.uses_kernel:
            from solitons import kernels

            total, per_axis = kernels.virial(self._kernel_pieces(field)[0])
            return {"total": total, "per_axis": per_axis}
        spacing = self.spacing_array()
        total, dspacing = _energy_spacing_grad_jit(self, field, spacing)
        if float(total) == 0.0:  # the vacuum: no scale to balance
            return {"total": 0.0, "per_axis": [0.0, 0.0, 0.0]}
        per_axis = np.asarray(spacing * dspacing) / float(total)
        return {"total": float(per_axis.sum()), "per_axis": [float(v) for v in per_axis]}

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
def _energies_jit(model, field, spacing):
    return term_energies(field, spacing, model.grid, model.terms, model.scheme)


@partial(jax.jit, static_argnums=0)
def _density_jit(model, field, spacing):
    return sum(term_densities(field, spacing, model.grid, model.terms, model.scheme))


@partial(jax.jit, static_argnums=0)
def _total_jit(model, field, spacing):
    return _total(model, field, spacing)


def _kernel_value_and_grad(model: Model, field):
    """The fused kernel through a host callback, so jitted minimiser steps can call it."""
    from solitons import kernels

    c2, c4 = kernel_couplings(model.terms)
    periodic = model.grid.boundary == "periodic"
    taps = model.stencil.taps

    def host(values):
        energy, grad = kernels.value_and_grad(np.asarray(values), model.grid.spacing, periodic, taps,
                                              c2, c4, NORMALISATION, metric=model.metric)
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


@partial(jax.jit, static_argnums=0)
def _energy_spacing_grad_jit(model, field, spacing):
    return jax.value_and_grad(_total, argnums=2)(model, field, spacing)
