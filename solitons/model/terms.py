"""Energy-density terms as pure functions of local fields.

Every term is the continuum density it stands for, written as a function of the field
n (..., 3), its first derivatives d (..., 3, 3) with d[..., i, :] = d_i n, and, for terms
that ask for it, the Laplacian lap (..., 3) = sum_i d_i d_i n; the lattice scheme in
`solitons.model.energy` decides where these are evaluated.  Densities carry no normalisation
prefactor: `solitons.model.energy.NORMALISATION` multiplies all of them, and each term's
``coupling`` multiplies its density.

Built-in terms (continuum density; Derrick weight d = number of derivatives, so that the
term scales as lambda^(d - 3) under x -> lambda x; "-" where it is not homogeneous):

=====================  ===========================================================  ===
``dirichlet``          sum_i d_i n . d_i n                                           2
``skyrme_faddeev``     H^2 = sum_{i<j} |d_i n x d_j n|^2 = sum_{i<j} F_ij^2          4
``dirichlet_squared``  (sum_i d_i n . d_i n)^2   (the extended quartic term)          4
``strain_squared``     sum_{i,j} (d_i n . d_j n)^2 = (dn . dn)^2 - 2 H^2              4
``potential``          mass^2 (1 - n3)^power, power >= 1 (vanishes at the vacuum)     0
``laplacian_squared``  |sum_i d_i d_i n|^2  (second-derivative, cutoff-type term)     4
``sextic``             H^2 (sum_i d_i n . d_i n)                                      6
``chiral``             n . (curl n) = eps_kij n_k d_i n_j  (parity odd)               1
``log_quartic``        H^2 (c0 + c1 ln((H^2 + delta scale^4) / scale^4))             -
=====================  ===========================================================  ===

Notes and sources:

* With ``dirichlet`` and ``skyrme_faddeev`` at coupling 1 the total is the Skyrme-Faddeev
  energy in the normalisation of Battye & Sutcliffe, PRL 81 (1998) 4798 (prefactor
  written in Foster, arXiv:1012.2595).  F_ij = n . (d_i n x d_j n); d_i n x d_j n is
  parallel to n for a unit field, hence H^2 = sum_{i<j} F_ij^2.
* Quartic terms: the strain matrix D_ij = d_i n . d_j n has rank <= 2 with eigenvalues
  x, y >= 0; H^2 = x y, (dn . dn)^2 = (x + y)^2 and sum (D_ij)^2 = x^2 + y^2, so every
  static quartic term is a H^2 + b (dn . dn)^2, non-negative for all fields iff b >= 0 and
  a + 4 b >= 0 (derived; `quartic_bound` applies it).  Negative (dn . dn)^2 coefficients
  are reported from one-loop effective actions of Yang-Mills theory in decomposed
  variables (Gies, PRD 63 (2001) 125023, hep-th/0102026).
* ``potential``: with power 1 the massive model of Foster, arXiv:1012.2595, which keeps
  knotted solitons.
* ``sextic``: for an S^2 target the square of the topological current is H^2 itself (a
  quartic), so a sextic term has to be built otherwise; we take H^2 times the Dirichlet
  density, non-negative and of Derrick weight 6 (our choice).
* ``log_quartic``: a scale-setting effective-action type term.  The bracket is negative
  where H^2 < scale^4 exp(-c0/c1) (for c1 > 0), i.e. where the field is weak; the density
  has its minimum -c1 scale^4 exp(-1 - c0/c1) (delta -> 0) at H^2 = scale^4 exp(-1 - c0/c1).
  A negative minimum means a state with uniform field strength at that value lowers the
  energy in proportion to its volume: in infinite space the energy is then not bounded
  below, and on a lattice the field tends to fill the box.  delta regularises the
  logarithm at H^2 = 0 (where H^2 ln H^2 -> 0 but its derivative is singular).

A term may also give a ``lattice`` function: a faster route to the same neighbour-coupled
site sum, which the tests check against the generic route to rounding error.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import jax.numpy as jnp

PAIRS = ((0, 1), (0, 2), (1, 2))


def _dot(a, b):
    return jnp.sum(a * b, axis=-1)


# ---- local invariants offered to every density (also to user-defined ones) ----

def strain(d):
    """D_ij = d_i n . d_j n, shape (..., 3, 3)."""
    return jnp.einsum("...ia,...ja->...ij", d, d)


def field_strength(n, d):
    """F_ij = n . (d_i n x d_j n), shape (..., 3, 3), antisymmetric."""
    cross = jnp.cross(d[..., :, None, :], d[..., None, :, :])
    return jnp.sum(n[..., None, None, :] * cross, axis=-1)


def h_squared(d):
    """H^2 = sum_{i<j} |d_i n x d_j n|^2 (the Skyrme-Faddeev quartic density)."""
    total = 0.0
    for i, j in PAIRS:
        a, b = d[..., i, :], d[..., j, :]
        total = total + _dot(a, a) * _dot(b, b) - _dot(a, b) ** 2
    return total


def dirichlet_sum(d):
    """sum_i d_i n . d_i n."""
    return jnp.sum(d * d, axis=(-2, -1))


# ---- continuum densities: density(n, d, lap, **parameters) ----

def dirichlet_density(n, d, lap=None):
    return dirichlet_sum(d)


def skyrme_faddeev_density(n, d, lap=None):
    return h_squared(d)


def dirichlet_squared_density(n, d, lap=None):
    return dirichlet_sum(d) ** 2


def strain_squared_density(n, d, lap=None):
    return jnp.sum(strain(d) ** 2, axis=(-2, -1))


def potential_density(n, d, lap=None, mass=1.0, power=1.0):
    return mass**2 * jnp.maximum(1.0 - n[..., 2], 0.0) ** power


def laplacian_squared_density(n, d, lap=None):
    return _dot(lap, lap)


def sextic_density(n, d, lap=None):
    return h_squared(d) * dirichlet_sum(d)


def chiral_density(n, d, lap=None):
    # curl n = (d_y n_z - d_z n_y, d_z n_x - d_x n_z, d_x n_y - d_y n_x)
    curl = jnp.stack((d[..., 1, 2] - d[..., 2, 1], d[..., 2, 0] - d[..., 0, 2],
                      d[..., 0, 1] - d[..., 1, 0]), axis=-1)
    return _dot(n, curl)


def log_quartic_density(n, d, lap=None, c0=1.0, c1=0.1, scale=1.0, delta=1e-8):
    h2 = h_squared(d)
    m4 = scale**4
    return h2 * (c0 + c1 * jnp.log((h2 + delta * m4) / m4))


# ---- fast lattice routes: lattice(forward, backward, centre, lap, **parameters) ----

def dirichlet_lattice(forward, backward, centre, lap=None):
    """(1/2) sum_i (|D+_i n|^2 + |D-_i n|^2): the average of `dirichlet_density` over the
    eight forward/backward octants (for any stencil: the average separates per axis)."""
    return 0.5 * sum(_dot(f, f) + _dot(b, b) for f, b in zip(forward, backward))


def skyrme_faddeev_lattice(forward, backward, centre, lap=None):
    """Quartic density averaged over the four forward/backward combinations of each pair
    of axes (the four corners of every plaquette): second order in h, neighbour coupled."""
    sq_f = [_dot(f, f) for f in forward]
    sq_b = [_dot(b, b) for b in backward]
    total = 0.0
    for i, j in PAIRS:
        for di, si in ((forward[i], sq_f[i]), (backward[i], sq_b[i])):
            for dj, sj in ((forward[j], sq_f[j]), (backward[j], sq_b[j])):
                total = total + si * sj - _dot(di, dj) ** 2
    return 0.25 * total


def potential_lattice(forward, backward, centre, lap=None, mass=1.0, power=1.0):
    return potential_density(centre, None, None, mass, power)


def laplacian_squared_lattice(forward, backward, centre, lap=None):
    return _dot(lap, lap)


@dataclass(frozen=True)
class TermKind:
    """A kind of energy term.

    derivatives: the Derrick weight (None when the term is not homogeneous in the scale).
    density(n, d, lap, **parameters): continuum density.  lattice: optional fast route to
    the same site sum.  parameters: names and defaults of the term's own constants.
    """

    name: str
    derivatives: int | None
    formula: str
    density: Callable
    lattice: Callable | None = None
    needs_laplacian: bool = False
    parameters: tuple[tuple[str, float], ...] = ()
    source: str = ""
    # lower bounds of the parameters: (name, bound, strict, why); the configuration refuses
    # a value below (strict: at or below) with the reason
    limits: tuple[tuple[str, float, bool, str], ...] = ()

    def violations(self, values: dict) -> list[tuple[str, float, str]]:
        """(parameter, value, reason) for each given value outside its limit."""
        found = []
        for name, bound, strict, why in self.limits:
            if name in values and (values[name] <= bound if strict else values[name] < bound):
                found.append((name, values[name], why))
        return found


BUILTIN_TERMS: dict[str, TermKind] = {
    kind.name: kind
    for kind in (
        TermKind("dirichlet", 2, "sum_i d_i n . d_i n", dirichlet_density, dirichlet_lattice),
        TermKind("skyrme_faddeev", 4, "sum_{i<j} |d_i n x d_j n|^2", skyrme_faddeev_density,
                 skyrme_faddeev_lattice),
        TermKind("dirichlet_squared", 4, "(sum_i d_i n . d_i n)^2", dirichlet_squared_density),
        TermKind("strain_squared", 4, "sum_ij (d_i n . d_j n)^2", strain_squared_density),
        TermKind("potential", 0, "mass^2 (1 - n3)^power", potential_density, potential_lattice,
                 parameters=(("mass", 1.0), ("power", 1.0)),
                 limits=(("power", 1.0, False, "must be at least 1 (smooth at the vacuum)"),)),
        TermKind("laplacian_squared", 4, "|sum_i d_i d_i n|^2", laplacian_squared_density,
                 laplacian_squared_lattice, needs_laplacian=True),
        TermKind("sextic", 6, "H^2 sum_i d_i n . d_i n", sextic_density),
        TermKind("chiral", 1, "n . curl n", chiral_density),
        TermKind("log_quartic", None, "H^2 (c0 + c1 ln((H^2 + delta scale^4) / scale^4))",
                 log_quartic_density,
                 parameters=(("c0", 1.0), ("c1", 0.1), ("scale", 1.0), ("delta", 1e-8)),
                 limits=tuple((name, 0.0, True, "must be positive (the logarithm of H^2 + delta scale^4 must stay "
                                                "finite where H^2 = 0, i.e. in the vacuum)")
                              for name in ("scale", "delta"))),
    )
}


@dataclass(frozen=True)
class Term:
    """One term of a model: a kind, a coupling, parameter values, and the name it
    reports its energy under.  Hashable (jitted functions take it as static data)."""

    name: str
    kind: TermKind
    coupling: float = 1.0
    parameters: tuple[tuple[str, float], ...] = ()

    def parameter_values(self) -> dict[str, float]:
        values = dict(self.kind.parameters)
        values.update(dict(self.parameters))
        return values


def quartic_bound(terms) -> dict:
    """Apply the derived criterion to the quartic terms of a model: write their sum as
    a H^2 + b (dn . dn)^2 and report whether b >= 0 and a + 4 b >= 0 (docs/references.md [R19])."""
    a = b = 0.0
    for term in terms:
        kind = term.kind.name
        if kind == "skyrme_faddeev":
            a += term.coupling
        elif kind == "dirichlet_squared":
            b += term.coupling
        elif kind == "strain_squared":
            a -= 2.0 * term.coupling
            b += term.coupling
    return {"a": a, "b": b, "bounded": bool(b >= 0 and a + 4 * b >= 0)}
