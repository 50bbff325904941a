"""Energy-density terms as pure functions of local fields.

Every term is the continuum density it stands for, written as a function of the field
n (..., 3) and its first derivatives d (..., 3, 3) with d[..., i, :] = d_i n; the lattice
scheme in `solitons.energy` decides where these are evaluated.  Densities here carry no
normalisation prefactor: `solitons.energy.NORMALISATION` multiplies all of them.

Built-in terms (continuum formula, Derrick weight d = number of derivatives):

``dirichlet``       sum_i d_i n . d_i n                                         d = 2
``skyrme_faddeev``  sum_{i<j} |d_i n x d_j n|^2  (= sum_{i<j} F_ij^2, F_ij = n . (d_i n x d_j n),
                    because d_i n x d_j n is parallel to n for a unit field)   d = 4

With both couplings 1 the total is the Skyrme-Faddeev energy in the normalisation of
Battye & Sutcliffe, PRL 81 (1998) 4798 and Sutcliffe, Proc. R. Soc. A 463 (2007) 3001
(arXiv:0705.1468); the prefactor 1/(32 sqrt(2) pi^2) is written in Foster, arXiv:1012.2595.

A term may also give a ``lattice`` function: a faster route to the same neighbour-coupled
sum, which the tests check against the generic route to rounding error.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import jax.numpy as jnp


def _dot(a, b):
    return jnp.sum(a * b, axis=-1)


def dirichlet_density(n, d):
    """sum_i d_i n . d_i n; n (..., 3), d (..., 3, 3) -> (...)."""
    del n
    return jnp.sum(d * d, axis=(-2, -1))


def skyrme_faddeev_density(n, d):
    """sum_{i<j} |d_i n x d_j n|^2 = sum_{i<j} (|d_i n|^2 |d_j n|^2 - (d_i n . d_j n)^2)."""
    del n
    total = 0.0
    for i, j in ((0, 1), (0, 2), (1, 2)):
        a, b = d[..., i, :], d[..., j, :]
        total = total + _dot(a, a) * _dot(b, b) - _dot(a, b) ** 2
    return total


def dirichlet_lattice(forward, backward, centre):
    """Neighbour-coupled Dirichlet density per site: (1/2) sum_i (|D+_i n|^2 + |D-_i n|^2),
    the average of `dirichlet_density` over the eight forward/backward octants.  (On a
    periodic box the forward links alone give the same sum; next to a fixed border they
    do not, because the reach-2 stencil jumps over the border layer.)"""
    del centre
    return 0.5 * sum(_dot(f, f) + _dot(b, b) for f, b in zip(forward, backward))


def skyrme_faddeev_lattice(forward, backward, centre):
    """Quartic density per site averaged over the four forward/backward combinations of
    each pair of axes (the four corners of every plaquette), which makes the lattice sum
    second order in h and couples neighbouring sites."""
    del centre
    sq_f = [_dot(f, f) for f in forward]
    sq_b = [_dot(b, b) for b in backward]
    total = 0.0
    for i, j in ((0, 1), (0, 2), (1, 2)):
        for di, si in ((forward[i], sq_f[i]), (backward[i], sq_b[i])):
            for dj, sj in ((forward[j], sq_f[j]), (backward[j], sq_b[j])):
                total = total + si * sj - _dot(di, dj) ** 2
    return 0.25 * total


@dataclass(frozen=True)
class TermKind:
    """A kind of energy term.

    name: registry key.  derivatives: how many spatial derivatives each monomial has
    (the Derrick weight: under x -> lambda x the term scales as lambda^(derivatives - 3)).
    density: continuum density (n, d) -> (...).  lattice: optional fast route to the same
    site sum from (forward, backward, centre) differences.
    """

    name: str
    derivatives: int
    formula: str
    density: Callable
    lattice: Callable | None = None


BUILTIN_TERMS: dict[str, TermKind] = {
    "dirichlet": TermKind(
        "dirichlet", 2, "sum_i d_i n . d_i n", dirichlet_density, dirichlet_lattice
    ),
    "skyrme_faddeev": TermKind(
        "skyrme_faddeev",
        4,
        "sum_{i<j} |d_i n x d_j n|^2",
        skyrme_faddeev_density,
        skyrme_faddeev_lattice,
    ),
}


@dataclass(frozen=True)
class Term:
    """One term of a model: a kind, a coupling and the name it reports its energy under."""

    name: str
    kind: TermKind
    coupling: float = 1.0
