"""User-file copies of three built-in terms (the densities of `solitons.model.terms`, written as a
user would write them).  Loaded by tests/test_routes.py, which checks them against the
built-in row functions, and by analysis/bench_energy.py and analysis/bench_memory.py, which
time them and measure their memory (laplacian_squared: load it with laplacian=True)."""

import jax.numpy as jnp

from solitons.model.terms import dirichlet_sum, h_squared


def log_quartic(n, d, lap=None, c0=1.0, c1=0.1, scale=1.0, delta=1e-8):
    h2 = h_squared(d)
    m4 = scale**4
    return h2 * (c0 + c1 * jnp.log((h2 + delta * m4) / m4))


def sextic(n, d, lap=None):
    return h_squared(d) * dirichlet_sum(d)


def laplacian_squared(n, d, lap=None):
    return jnp.sum(lap * lap, axis=-1)
