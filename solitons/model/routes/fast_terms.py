"""The built-in terms the staged numba route evaluates itself: one record per term, the
one place that says how a term's coupling and constants are packed into the route's
coefficient vector.  `solitons.model.routes.staged` derives its layout from these
records (`COEFFICIENTS`, the energy slots of `EXTRA_KINDS`) and
`solitons.model.routes.evaluators` packs a model's terms with them; the parameter limits
a configuration must meet are on the term kinds themselves (`TermKind.limits`).

Adding a built-in term to the fast route: its `TermKind` (density, parameters, limits),
one record here, its row function and its branch in `staged._plane_staged` (numba needs the
dispatch written out; a new record without a branch fails the import check below and the
route test that compares every fast term with the reference jax energy).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass


@dataclass(frozen=True)
class FastTerm:
    """kind: the `TermKind` name; packed: the names of its entries in the coefficient
    vector, the coupling's first; pack(coupling, parameter values) -> those entries."""

    kind: str
    packed: tuple[str, ...]
    pack: Callable[[float, dict], tuple[float, ...]]


def _coupling(c: float, values: dict) -> tuple[float, ...]:
    return (c,)


# the plain model's two terms (fused in the site algebra), then the corrections with a row
# function, in the order of their energy slots
BASE_TERMS = (FastTerm("dirichlet", ("dirichlet",), _coupling),
              FastTerm("skyrme_faddeev", ("skyrme_faddeev",), _coupling))
EXTRA_TERMS = (
    FastTerm("dirichlet_squared", ("dirichlet_squared",), _coupling),
    FastTerm("strain_squared", ("strain_squared",), _coupling),
    # mass^2 (1 - n3)^power: the coupling carries mass^2
    FastTerm("potential", ("potential", "potential_power"), lambda c, v: (c * v["mass"] ** 2, v["power"])),
    FastTerm("laplacian_squared", ("laplacian_squared",), _coupling),
    FastTerm("sextic", ("sextic",), _coupling),
    FastTerm("chiral", ("chiral",), _coupling),
    # H^2 (c0 + c1 ln((H^2 + delta scale^4) / scale^4)): scale enters as scale^4
    FastTerm("log_quartic", ("log_quartic", "log_c0", "log_c1", "log_scale4", "log_delta"),
             lambda c, v: (c, v["c0"], v["c1"], v["scale"] ** 4, v["delta"])),
)
FAST_TERMS = {term.kind: term for term in BASE_TERMS + EXTRA_TERMS}
COEFFICIENTS = tuple(name for term in BASE_TERMS + EXTRA_TERMS for name in term.packed)
EXTRA_KINDS = tuple(term.kind for term in EXTRA_TERMS)
# EXTRA_KINDS -> position of the coupling in COEFFICIENTS
EXTRA_INDEX = tuple(COEFFICIENTS.index(term.packed[0]) for term in EXTRA_TERMS)


def pack(coefs, kind: str, coupling: float, values: dict) -> None:
    """Write one term's entries into the coefficient vector ``coefs`` (in place)."""
    term = FAST_TERMS[kind]
    for name, value in zip(term.packed, term.pack(coupling, values), strict=True):
        coefs[COEFFICIENTS.index(name)] = value
