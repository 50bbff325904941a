"""Energy terms written by the user: a Python file with a density function.

The function receives the local fields and returns the density (no normalisation
prefactor, like the built-in densities of `solitons.model.terms`):

    def my_density(n, d, lap=None, **parameters):
        # n (..., 3) unit field; d (..., 3, 3) with d[..., i, :] = d_i n;
        # lap (..., 3) = sum_i d_i d_i n, passed when the config sets laplacian = true.
        # Helpers: solitons.model.terms.strain(d), field_strength(n, d), h_squared(d),
        # dirichlet_sum(d).  Use jax.numpy so the function can be traced.
        return ...

It is traced by jax, so it gets the same exact gradient, virial and lattice scheme as a
built-in term.  Loading checks it on random local fields: one finite scalar per site,
zero in the vacuum n = (0, 0, 1) with zero derivatives (refused otherwise: the energy
of all space would be infinite), and whether it is invariant under global rotations of the target (reported, not
required: a Zeeman-like potential is not).
"""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import jax
import jax.numpy as jnp
import numpy as np
from scipy.spatial.transform import Rotation

from solitons.model.terms import TermKind


class UserTermError(ValueError):
    """A user-defined term that cannot be used; the message names the file."""


def _random_locals(rng, count=64):
    n = rng.standard_normal((count, 3))
    n /= np.linalg.norm(n, axis=-1, keepdims=True)
    d = rng.standard_normal((count, 3, 3))
    d -= np.sum(d * n[:, None, :], -1, keepdims=True) * n[:, None, :]  # tangent to S^2
    lap = rng.standard_normal((count, 3))
    return n, d, lap


def load_user_term(path: str | Path, function: str, derivatives: int | None = None,
                   laplacian: bool = False, parameters: dict | None = None,
                   name: str | None = None) -> tuple[TermKind, dict]:
    """Import ``function`` from ``path``, validate it, and return (TermKind, report)."""
    path = Path(path)
    parameters = dict(parameters or {})
    label = f"{path}:{function}"
    if not path.is_file():
        raise UserTermError(f"{path}: user term file not found")
    module_name = f"solitons_user_term_{abs(hash(str(path.resolve())))}"
    try:
        spec = importlib.util.spec_from_file_location(module_name, path)
        module = importlib.util.module_from_spec(spec)
        sys.modules[module_name] = module
        spec.loader.exec_module(module)
    except Exception as error:  # any failure inside the user's file
        raise UserTermError(f"{path}: cannot be imported: {type(error).__name__}: {error}") from None
    density = getattr(module, function, None)
    if not callable(density):
        raise UserTermError(f"{path}: no function named {function!r}")

    rng = np.random.default_rng(0)
    n, d, lap = _random_locals(rng)
    try:
        values = np.asarray(jax.jit(lambda n, d, lap: density(n, d, lap if laplacian else None,
                                                                 **parameters))(n, d, lap))
    except Exception as error:
        raise UserTermError(f"{label}: fails on random fields: {type(error).__name__}: {error}") from None
    if values.shape != (len(n),):
        raise UserTermError(f"{label}: must return one value per site, shape {(len(n),)}; "
                            f"got shape {values.shape}")
    if not np.all(np.isfinite(values)):
        raise UserTermError(f"{label}: returns non-finite values on random fields")
    vacuum = float(np.asarray(density(jnp.asarray([[0.0, 0.0, 1.0]]), jnp.zeros((1, 3, 3)),
                                      jnp.zeros((1, 3)) if laplacian else None, **parameters))[0])
    if vacuum != 0.0:
        raise UserTermError(
            f"{label}: the density is {vacuum:.6g} in the vacuum (n = (0, 0, 1), every derivative zero), not 0: "
            "the energy of all space would be infinite, and on a box it would add that value times the box volume "
            "to every energy; subtract the vacuum value in the function")
    rotation = Rotation.random(random_state=rng).as_matrix()
    rotated = np.asarray(density(jnp.asarray(n @ rotation.T), jnp.asarray(d @ rotation.T),
                                 jnp.asarray(lap @ rotation.T) if laplacian else None, **parameters))
    invariant = bool(np.allclose(rotated, values, rtol=1e-10, atol=1e-12 * np.abs(values).max()))
    kind = TermKind(name or f"user:{path.name}:{function}", derivatives, f"user density {label}",
                    lambda n, d, lap=None, **p: density(n, d, lap if laplacian else None, **p),
                    needs_laplacian=laplacian, parameters=tuple(sorted(parameters.items())),
                    source=label)
    return kind, {"file": str(path), "function": function, "target_rotation_invariant": invariant}
