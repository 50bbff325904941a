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
`solitons.lattice.grid` (`STENCILS`).

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
from functools import partial
from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

from solitons.lattice.grid import STENCILS, Grid
from solitons.model.reference import (
    MIN_POINTS,
    NORMALISATION,
    SCHEMES,
    grid_metric,
    kernel_couplings,
    normalise,
    project_tangent,
    term_densities,
    term_energies,
    total_energy,
    total_jit,
)
from solitons.model.routes.evaluators import Autodiff, choose_route
from solitons.model.terms import Term

# re-exported: the public names of the model's energy live with the Model
__all__ = ["BACKENDS", "MIN_POINTS", "NORMALISATION", "SCHEMES", "Evaluation", "Model", "grid_metric",
           "kernel_couplings", "normalise", "project_tangent", "term_densities", "term_energies"]


class Evaluation(NamedTuple):
    energy: jnp.ndarray
    gradient: jnp.ndarray  # tangent-projected dE/dn, zero on held sites, (Nx, Ny, Nz, 3)


BACKENDS = ("auto", "jax", "numba")



@dataclass(frozen=True)
class Model:
    """A sum of terms on a grid with a lattice scheme.  Hashable: jitted methods take it
    as static data.

    ``backend`` chooses the evaluation route (`solitons.model.routes.evaluators`), picked once here and
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
        return total_jit(self, field, self.spacing_array())

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
    value, grad = jax.value_and_grad(total_energy, argnums=1)(model, field, spacing)
    mask = jnp.asarray(model.grid.free_mask(), dtype=field.dtype)
    return value, project_tangent(field, grad) * mask
