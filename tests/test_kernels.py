"""The fused numba kernel and the numpy L-BFGS against the jax route, the coarse start,
and the sharded jax route."""

import json
import os
import subprocess
import sys

import jax.numpy as jnp
import numpy as np
import pytest

from solitons.lattice.grid import Grid
from solitons.model.energy import Model
from solitons.model.terms import BUILTIN_TERMS, Term
from solitons.relaxation.initial import add_noise, hopf_map
from solitons.relaxation.minimise import StoppingRule, minimise


def model_pair(grid, scheme, c2=1.3, c4=0.7):
    terms = (Term("dirichlet", BUILTIN_TERMS["dirichlet"], c2),
             Term("skyrme_faddeev", BUILTIN_TERMS["skyrme_faddeev"], c4))
    return Model(terms, grid, scheme, "jax"), Model(terms, grid, scheme, "numba")


@pytest.mark.parametrize("boundary", ["fixed", "periodic"])
@pytest.mark.parametrize("scheme", ["second", "fourth", "sixth"])
def test_kernel_matches_jax_autodiff(boundary, scheme):
    """Same site sum, so energy, tangent gradient, per-term energies, density and virial
    agree with the jax autodiff route to rounding (1e-12 relative; derived).  Anisotropic
    spacing and a rough field exercise every stencil entry."""
    grid = Grid.centred((18, 20, 22), (0.31, 0.27, 0.33), boundary)
    jax_model, kernel_model = model_pair(grid, scheme)
    field = add_noise(hopf_map(grid, 1.4), grid, 0.3, 7)
    e_jax, g_jax = jax_model.value_and_grad(jnp.asarray(field))
    e_kernel, g_kernel = kernel_model.evaluate(field)
    assert abs(e_kernel - float(e_jax)) < 1e-12 * abs(float(e_jax))
    assert np.abs(g_kernel - np.asarray(g_jax)).max() < 1e-12 * np.abs(np.asarray(g_jax)).max()
    # the callback route inside jit gives the same numbers
    e_cb, g_cb = kernel_model.value_and_grad(jnp.asarray(field))
    assert float(e_cb) == e_kernel and np.array_equal(np.asarray(g_cb), g_kernel)
    for name, value in jax_model.energies(field).items():
        assert abs(kernel_model.energies(field)[name] - value) < 1e-12 * abs(value)
    assert np.abs(kernel_model.energy_density(field) - jax_model.energy_density(field)).max() < 1e-12
    v_jax, v_kernel = jax_model.virial(field), kernel_model.virial(field)
    assert abs(v_jax["total"] - v_kernel["total"]) < 1e-12
    assert np.allclose(v_jax["per_axis"], v_kernel["per_axis"], atol=1e-12, rtol=0)


@pytest.mark.slow  # 122 s in CI, nearly all of it compiling the float32 kernels
def test_kernel_float32_agrees_with_float64():
    grid = Grid.centred(24, 0.3, "fixed")
    _, kernel_model = model_pair(grid, "second")
    field = add_noise(hopf_map(grid, 1.2), grid, 0.05, 1)
    e64, g64 = kernel_model.evaluate(field)
    e32, g32 = kernel_model.evaluate(field.astype(np.float32))
    assert g32.dtype == np.float32
    assert abs(e32 - e64) < 1e-5 * e64
    assert np.abs(g32 - g64).max() < 1e-4 * np.abs(g64).max()


def test_lbfgs_on_both_routes_reaches_the_same_minimum():
    """One minimiser, two evaluation routes: identical up to rounding in every step, so
    the final energies agree to 1e-9 (derived).  (At h = 0.3 the Q = 1 soliton unwinds on
    either scheme; h = 0.2 holds it.)"""
    grid = Grid.centred(33, 0.2, "fixed")
    jax_model, kernel_model = model_pair(grid, "fourth", 1.0, 1.0)
    start = hopf_map(grid, 1.0)
    rule = StoppingRule(max_steps=400, force_tol=1e-3, energy_tol=0.0)
    a = minimise(jax_model, start, "lbfgs", rule)
    b = minimise(kernel_model, start, "lbfgs", rule)
    assert a.converged and b.converged
    assert a.energy > 1.0  # still a soliton
    assert abs(a.energy - b.energy) < 1e-9 * a.energy


def test_coarse_start_reaches_the_same_minimum(tmp_path):
    """Coarse-to-fine continuation changes the path, not the minimum: the fine energy
    matches the direct relaxation's to 1e-5 (the scale of the stopping tolerance), on
    49^3, h = 0.125 (coarse 25^3, h = 0.25); coarse grids of h = 0.3 and 0.4 unwind the
    soliton and are discarded with a warning (measured)."""
    from solitons.config import load
    from solitons.run import relax

    text = """[grid]
points = 49
spacing = 0.125
scheme = "fourth"
[relax]
force_tol = 1e-3
energy_tol = 0.0
checkpoint_every = 0
"""
    direct = relax(load(None, text=text), tmp_path / "direct", stream=None)
    staged = relax(load(None, text=text + "coarse_start = true\n"), tmp_path / "staged", stream=None)
    assert staged["coarse_stage"]["used"], staged["coarse_stage"]
    assert direct["converged"] and staged["converged"]
    assert abs(staged["energy"] - direct["energy"]) < 1e-5 * direct["energy"]
    assert staged["iterations"] < direct["iterations"]
    coarse = relax(load(None, text=text.replace("49", "23").replace("0.125", "0.2") + "coarse_start = true\n"),
                   tmp_path / "too_coarse", stream=None)
    assert not coarse["coarse_stage"]["used"] and "charge" in coarse["coarse_stage"]["reason"]
    assert any("coarse start was discarded" in w for w in coarse["warnings"])


SHARDED = """
import json, sys
import jax, jax.numpy as jnp, numpy as np
import solitons
from solitons.model.energy import Model
from solitons.lattice.grid import Grid
from solitons.relaxation.initial import add_noise, hopf_map
from solitons.model.routes.sharding import device_mesh, shard_field
from solitons.model.terms import BUILTIN_TERMS, Term
terms = (Term("dirichlet", BUILTIN_TERMS["dirichlet"]), Term("skyrme_faddeev", BUILTIN_TERMS["skyrme_faddeev"]))
grid = Grid.centred(24, 0.3, "fixed")
model = Model(terms, grid, "fourth", "jax")
field = add_noise(hopf_map(grid, 1.2), grid, 0.05, 3)
e1, g1 = model.value_and_grad(jnp.asarray(field))
sharded = shard_field(jnp.asarray(field), device_mesh())
e2, g2 = model.value_and_grad(sharded)
print(json.dumps({"devices": len(jax.devices()), "shards": len(g2.sharding.device_set),
                  "energy": abs(float(e2) - float(e1)) / float(e1),
                  "gradient": float(jnp.max(jnp.abs(g2 - g1)) / jnp.max(jnp.abs(g1)))}))
"""


def test_sharded_jax_route_gives_the_same_energy(tmp_path):
    """Two host devices (XLA_FLAGS, common practice for testing jax.sharding on one
    machine): same energy and gradient to 1e-12."""
    env = dict(os.environ, XLA_FLAGS="--xla_force_host_platform_device_count=2")
    done = subprocess.run([sys.executable, "-c", SHARDED], capture_output=True, text=True, env=env, cwd=tmp_path,
                          timeout=300)
    assert done.returncode == 0, done.stderr
    result = json.loads(done.stdout.strip().splitlines()[-1])
    assert result["devices"] == 2 and result["shards"] == 2
    assert result["energy"] < 1e-12 and result["gradient"] < 1e-12
