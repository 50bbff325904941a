"""Evaluation routes: how a `solitons.model.energy.Model` computes its energy, gradient, per-term
energies, density and virial.  The Model picks one route object when it is built
(`choose_route`); every method of the Model then asks that object.

- `PlainKernel`: the fused kernel of `solitons.model.routes.kernels` (c2 * dirichlet + c4 *
  skyrme_faddeev, the default model): the fastest.
- `StagedKernel`: any model.  The built-in terms with a row function in
  `solitons.model.routes.staged` run there; every other term (user terms, a second term of a kind
  already taken) is evaluated pointwise on the staged local fields (`solitons.model.routes.pointwise`):
  jax differentiates the per-site density (the octant average of `solitons.model.energy`), the
  result is compiled to a numba site loop (or, for a density the translator cannot read,
  run by jax), and numba does the stencils in both directions.
- `Autodiff`: jax autodiff of the whole lattice energy, the reference the tests compare
  the others with (backend "jax").

All three give the same site sum (the tests require agreement to 1e-12).
"""

from __future__ import annotations

from typing import NamedTuple

import jax.numpy as jnp
import numpy as np

from solitons.model import reference
from solitons.model.reference import NORMALISATION, kernel_couplings
from solitons.model.routes import fast_terms, kernels, pointwise, staged
from solitons.model.terms import BUILTIN_TERMS, Term

# the pointwise terms on the compiled route (False: jax, the route before it; kept to
# compare the two in analysis/bench_energy.py)
COMPILE_POINTWISE = True


class Measures(NamedTuple):
    energies: dict  # term name -> energy
    density: np.ndarray  # normalised energy density per site, (Nx, Ny, Nz)
    virial: dict  # {"total": float, "per_axis": [3 floats]}


def _virial(energy: float, q) -> dict:
    """h_a dE/dh_a / E = (E - Q_a) / E (see `solitons.model.routes.staged`)."""
    if energy == 0.0:  # the vacuum: no scale to balance
        return {"total": 0.0, "per_axis": [0.0, 0.0, 0.0]}
    per_axis = [(energy - float(q[a])) / energy for a in range(3)]
    return {"total": float(sum(per_axis)), "per_axis": [float(v) for v in per_axis]}


def _base_q(sums):
    """Q_a of the plain model from its pieces: 2 E2_a + 2 sum_{b != a} E4_ab."""
    e2 = sums[:3]
    exy, exz, eyz = sums[3:6]
    return np.array([2 * e2[0] + 2 * (exy + exz), 2 * e2[1] + 2 * (exy + eyz), 2 * e2[2] + 2 * (exz + eyz)])


def _stretch_terms(grid):
    """Per axis (A, B) of the stretched Laplacian (see `staged.laplacian_coefficients`), or
    None where the axis is uniform."""
    if not grid.stretched:
        return None
    terms = []
    for axis, xi in enumerate(grid.xi_axes()):
        if not grid.stretch[axis]:
            terms.append(None)
            continue
        jacobian = grid.jacobian(xi, axis)
        terms.append((1.0 / jacobian**2, -grid.jacobian_slope(xi, axis) / jacobian**3))
    return terms


class Autodiff:
    """jax autodiff of `solitons.model.reference.term_energies` (the reference route)."""

    name = "jax autodiff"

    def __init__(self, model):
        self.model = model

    def evaluate(self, field, out=None):
        value, grad = self.model.value_and_grad(jnp.asarray(field))
        if out is None:
            return float(value), np.asarray(grad)
        out[...] = np.asarray(grad)
        return float(value), out

    def measure(self, field, density=True) -> Measures:
        model = self.model
        spacing = model.spacing_array()
        values, dens, total, dspacing = reference.measure_jit(model, field, spacing)
        energies = {name: float(v) for name, v in zip(model.names, values)}
        q = float(total) - np.asarray(spacing * dspacing)
        return Measures(energies, np.asarray(dens) if density else None, _virial(float(total), q))


class PlainKernel:
    """`solitons.model.routes.kernels` for c2 * dirichlet + c4 * skyrme_faddeev."""

    name = "numba kernel"

    def __init__(self, model, couplings):
        self.model = model
        self.c2, self.c4 = couplings

    def _args(self):
        model = self.model
        return model.grid.spacing, model.grid.boundary == "periodic", model.stencil.taps

    def evaluate(self, field, out=None):
        spacing, periodic, taps = self._args()
        return kernels.value_and_grad(np.asarray(field), spacing, periodic, taps, self.c2, self.c4, NORMALISATION,
                                      out, self.model.metric)

    def measure(self, field, density=True) -> Measures:
        spacing, periodic, taps = self._args()
        pieces, dens = kernels.energy_pieces(np.asarray(field), spacing, periodic, taps, self.c2, self.c4,
                                             NORMALISATION, self.model.metric)
        totals = {"dirichlet": (float(pieces[:3].sum()), self.c2), "skyrme_faddeev": (float(pieces[3:].sum()), self.c4)}
        energies = {t.name: (totals[t.kind.name][0] * t.coupling / totals[t.kind.name][1]
                             if totals[t.kind.name][1] != 0 else 0.0) for t in self.model.terms}
        return Measures(energies, dens, _virial(float(pieces.sum()), _base_q(pieces)))


def _staged_coefficients(terms: tuple[Term, ...]):
    """Split a model's terms: the coefficient vector of `solitons.model.routes.staged` with the term
    taking each slot, and the terms left for the pointwise jax evaluation."""
    coefs = np.zeros(len(staged.COEFFICIENTS))
    slots: dict[str, Term] = {}
    rest = []
    for term in terms:
        kind = term.kind.name
        builtin = BUILTIN_TERMS.get(kind) is term.kind
        if not builtin or kind in slots or kind not in fast_terms.FAST_TERMS:
            rest.append(term)
            continue
        slots[kind] = term
        fast_terms.pack(coefs, kind, term.coupling, term.parameter_values())
    return coefs, slots, tuple(rest)


class StagedKernel:
    """`solitons.model.routes.staged` for the built-in terms, jax pointwise for the rest."""

    def __init__(self, model):
        self.model = model
        self.coefs, self.slots, self.rest = _staged_coefficients(model.terms)
        self.normalisation = NORMALISATION
        self.needs_laplacian = any(t.kind.needs_laplacian for t in model.terms)
        self._evaluator = None
        self._note = ""
        self.extra_gather = any(k in self.slots for k in ("potential", "laplacian_squared", "chiral"))
        self._lap = {}

    def _lap_info(self, dtype):
        if not self.needs_laplacian:
            return None
        key = np.dtype(dtype)
        if key not in self._lap:
            grid = self.model.grid
            self._lap[key] = staged.laplacian_coefficients(grid.shape, grid.spacing, self.model.stencil,
                                                           _stretch_terms(grid), dtype)
        return self._lap[key]

    @property
    def evaluator(self):
        """The pointwise evaluator of the terms not in a slot (built on first use: jax traces
        the densities and the translation to numba source takes a few seconds)."""
        if self._evaluator is None and self.rest:
            self._evaluator, self._note = pointwise.build(self.rest, self.needs_laplacian, COMPILE_POINTWISE)
        return self._evaluator

    @property
    def name(self):
        if not self.rest:
            return "numba staged kernel"
        self.evaluator  # noqa: B018 - sets the note
        return f"numba staged kernel + {self._note}"

    def _pointwise(self, field):
        """Energies, density, Q_a and derivative rows of the terms not in a slot."""
        model = self.model
        grid = model.grid
        lap_info = self._lap_info(field.dtype)
        loc = staged.stage_all(field, grid.spacing, grid.boundary == "periodic", model.stencil.taps, model.metric,
                               lap_info)
        weights = grid.site_weights() if grid.stretched else None
        energies, dens, q, der = self.evaluator(loc, weights)
        scale = self.normalisation * float(np.prod(grid.spacing))
        return ([scale * float(e) for e in energies], self.normalisation * np.asarray(dens, dtype=np.float64),
                scale * np.asarray(q, dtype=np.float64), der)

    def _run(self, field, out=None, gradient=True, density=False):
        field = np.ascontiguousarray(field)
        grid = self.model.grid
        user = self._pointwise(field) if self.rest else None
        sums, dens, out = staged.run(field, grid.spacing, grid.boundary == "periodic", self.model.stencil.taps,
                                     self.coefs, self.normalisation, self.model.metric,
                                     self._lap_info(field.dtype), out, gradient, density,
                                     None if user is None else user[3], self.extra_gather)
        return sums, dens, out, user

    def evaluate(self, field, out=None):
        sums, _, out, user = self._run(field, out)
        energy = float(sums[:6].sum() + sums[6:6 + len(staged.EXTRA_KINDS)].sum())
        if user is not None:
            energy += sum(user[0])
        return energy, out

    def measure(self, field, density=True) -> Measures:
        sums, dens, _, user = self._run(field, gradient=False, density=True)
        energies = {}
        for term in self.model.terms:
            kind = term.kind.name
            if self.slots.get(kind) is not term:
                continue
            if kind == "dirichlet":
                energies[term.name] = float(sums[:3].sum())
            elif kind == "skyrme_faddeev":
                energies[term.name] = float(sums[3:6].sum())
            else:
                energies[term.name] = float(sums[6 + staged.EXTRA_KINDS.index(kind)])
        q = _base_q(sums) + sums[13:16]
        if user is not None:
            for term, value in zip(self.rest, user[0]):
                energies[term.name] = value
            dens = dens + user[1]
            q = q + user[2]
        energies = {t.name: energies[t.name] for t in self.model.terms}
        return Measures(energies, dens, _virial(sum(energies.values()), q))


def choose_route(model):
    """The route of a Model: jax autodiff for backend "jax"; else the plain kernel when the
    model is c2 * dirichlet + c4 * skyrme_faddeev, the staged kernel otherwise."""
    if model.backend == "jax":
        return Autodiff(model)
    couplings = kernel_couplings(model.terms)
    if couplings is not None:
        return PlainKernel(model, couplings)
    return StagedKernel(model)
