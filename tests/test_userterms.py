"""User-defined terms: same numbers as a built-in, clear errors for broken files."""

import subprocess
import sys

import jax.numpy as jnp
import numpy as np
import pytest

from solitons.config import load
from solitons.lattice.grid import Grid
from solitons.model.energy import Model
from solitons.model.terms import BUILTIN_TERMS, Term
from solitons.model.userterms import UserTermError, load_user_term
from solitons.relaxation.initial import add_noise, hopf_map
from solitons.run import make_model

COPY = '''
import jax.numpy as jnp
from solitons.model.terms import h_squared, strain

def quartic(n, d, lap=None):
    # written from the strain matrix: H^2 = (tr D^2 - tr(D^2)) / 2 for a unit field
    D = strain(d)
    trace = jnp.trace(D, axis1=-2, axis2=-1)
    return 0.5 * (trace**2 - jnp.sum(D * D, axis=(-2, -1)))

def zeeman(n, d, lap=None, field=1.0):
    return field * (1.0 - n[..., 2])

def vector_valued(n, d, lap=None):
    return d[..., 0, :]

def not_finite(n, d, lap=None):
    return jnp.log(n[..., 2] - 2.0)
'''


@pytest.fixture
def user_file(tmp_path):
    path = tmp_path / "my_terms.py"
    path.write_text(COPY)
    return path


def test_user_copy_of_builtin_matches_to_1e12(user_file):
    """A user density equal to the Skyrme-Faddeev quartic (through the identity
    H^2 = ((tr D)^2 - tr D^2)/2, derived from the rank-2 strain) gives the built-in term's
    energy and gradient to 1e-12."""
    kind, report = load_user_term(user_file, "quartic", derivatives=4)
    assert report["target_rotation_invariant"]
    grid = Grid.centred(18, 0.4, "fixed")
    field = jnp.asarray(add_noise(hopf_map(grid, 1.2), grid, 0.05, 3))
    for scheme in ("second", "fourth", "sixth"):
        user = Model((Term("q", kind),), grid, scheme).value_and_grad(field)
        builtin = Model((Term("q", BUILTIN_TERMS["skyrme_faddeev"]),), grid, scheme).value_and_grad(field)
        assert abs(float(user.energy) - float(builtin.energy)) < 1e-12 * float(builtin.energy)
        largest = float(jnp.max(jnp.abs(builtin.gradient)))
        assert float(jnp.max(jnp.abs(user.gradient - builtin.gradient))) < 1e-12 * largest
    virial_user = Model((Term("q", kind),), grid).virial(field)["total"]
    virial_builtin = Model((Term("q", BUILTIN_TERMS["skyrme_faddeev"]),), grid).virial(field)["total"]
    assert abs(virial_user - virial_builtin) < 1e-12


def test_rotation_invariance_is_reported(user_file):
    _, report = load_user_term(user_file, "zeeman", derivatives=0, parameters={"field": 2.0})
    assert report["target_rotation_invariant"] is False


@pytest.mark.parametrize("function, problem", [
    ("missing", "no function named"),
    ("vector_valued", "one value per site"),
    ("not_finite", "non-finite"),
])
def test_broken_functions_name_the_file(user_file, function, problem):
    with pytest.raises(UserTermError) as info:
        load_user_term(user_file, function)
    assert str(user_file) in str(info.value) and problem in str(info.value)


def test_file_that_does_not_import(tmp_path):
    bad = tmp_path / "bad.py"
    bad.write_text("def density(n, d:\n")
    with pytest.raises(UserTermError, match="cannot be imported: SyntaxError"):
        load_user_term(bad, "density")


def test_config_with_user_term_and_cli_error(user_file, tmp_path):
    config = tmp_path / "run.toml"
    config.write_text('[grid]\npoints = 16\nspacing = 0.4\n[terms.dirichlet]\n'
                      '[terms.mine]\nkind = "user"\nfile = "my_terms.py"\nfunction = "zeeman"\n'
                      'derivatives = 0\nparameters = { field = 0.5 }\n')
    spec = load(config)
    model = make_model(spec, Grid.centred(16, 0.4))
    assert [t.name for t in model.terms] == ["dirichlet", "mine"]
    field = hopf_map(model.grid, 1.0)
    expected = 0.5 * np.sum(1 - field[..., 2]) * 0.4**3 / (32 * np.sqrt(2) * np.pi**2)
    assert abs(model.energies(field)["mine"] - expected) < 1e-12
    proc = subprocess.run([sys.executable, "-m", "solitons.cli", "relax", str(config), "--out",
                           str(tmp_path / "out"), "terms.mine.function=vector_valued"],
                          capture_output=True, text=True, cwd=tmp_path)
    assert proc.returncode == 2
    assert "my_terms.py:vector_valued" in proc.stderr and len(proc.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "out").exists()
