"""The numba routes for corrected models (`solitons.model.routes.staged`, `solitons.model.routes.evaluators`) against
jax autodiff of the literal eight-octant site sum (`solitons.model.energy.term_energies`), the
reference: the same lattice energy, so every quantity agrees to rounding (1e-12
relative; derived).  Plus checks that do not go through jax: a directional finite
difference, a user-file copy of a built-in term, numpy's log."""

import textwrap
from pathlib import Path

import jax.numpy as jnp
import numpy as np
import pytest

from solitons.lattice.grid import Grid
from solitons.model.energy import Model, normalise, project_tangent
from solitons.model.routes.evaluators import Autodiff, PlainKernel, StagedKernel
from solitons.model.routes.staged import EXTRA_KINDS, vector_log
from solitons.model.terms import BUILTIN_TERMS, Term
from solitons.model.userterms import load_user_term
from solitons.relaxation.initial import add_noise, hopf_map

BASE = (Term("dirichlet", BUILTIN_TERMS["dirichlet"], 1.3), Term("skyrme_faddeev", BUILTIN_TERMS["skyrme_faddeev"], 0.7))
COUPLINGS = {"dirichlet_squared": 0.3, "strain_squared": 0.2, "potential": 0.5, "laplacian_squared": 0.1,
             "sextic": 0.05, "chiral": 0.4, "log_quartic": 0.3}
# non-default constants, so that every parameter reaches the kernel
PARAMETERS = {"potential": (("mass", 1.3), ("power", 1.5)), "log_quartic": (("c1", 0.2), ("scale", 1.1))}


def corrections(kinds=EXTRA_KINDS):
    return tuple(Term(k, BUILTIN_TERMS[k], COUPLINGS[k], PARAMETERS.get(k, ())) for k in kinds)


def grid_of(kind):
    if kind == "stretched":
        return Grid((18, 20, 22), (0.31, 0.27, 0.33), (-2.6, -2.5, -3.4), "fixed", (2.0, 3.0, 0.0))
    return Grid.centred((18, 20, 22), (0.31, 0.27, 0.33), kind)


def assert_routes_agree(terms, grid, scheme, field, tolerance=1e-12, traced=False):
    reference, fast = Model(terms, grid, scheme, "jax"), Model(terms, grid, scheme, "auto")
    assert isinstance(reference.route, Autodiff) and isinstance(fast.route, StagedKernel)
    e_ref, g_ref = reference.evaluate(field)
    e_fast, g_fast = fast.evaluate(field)
    assert abs(e_fast - e_ref) < tolerance * abs(e_ref)
    assert np.abs(g_fast - g_ref).max() < tolerance * np.abs(g_ref).max()
    energies_ref, energies_fast = reference.energies(field), fast.energies(field)
    assert list(energies_fast) == list(energies_ref)
    for name, value in energies_ref.items():
        assert abs(energies_fast[name] - value) < tolerance * abs(e_ref), name
    density_ref = reference.energy_density(field)
    assert np.abs(fast.energy_density(field) - density_ref).max() < tolerance * np.abs(density_ref).max()
    v_ref, v_fast = reference.virial(field), fast.virial(field)
    assert abs(v_fast["total"] - v_ref["total"]) < tolerance * max(1.0, abs(v_ref["total"]))
    assert np.allclose(v_fast["per_axis"], v_ref["per_axis"], atol=tolerance, rtol=0)
    if traced:  # the traceable jax energy (used for the Hessian) is the sum of the route's energies
        assert abs(float(fast.energy(jnp.asarray(field))) - sum(energies_fast.values())) < tolerance * abs(e_ref)
    return fast


@pytest.mark.parametrize("scheme, kind", [
    ("second", "fixed"), ("fourth", "periodic"), ("sixth", "stretched"),
    pytest.param("sixth", "fixed", marks=pytest.mark.slow), pytest.param("sixth", "periodic", marks=pytest.mark.slow)])
def test_every_builtin_term_on_the_staged_route_equals_autodiff(scheme, kind):
    """All seven corrections next to the plain model's two terms, on each scheme, both
    boundaries and a stretched grid; anisotropic spacing and a rough field (30 % noise)
    reach every stencil entry and every octant."""
    grid = grid_of(kind)
    field = add_noise(hopf_map(grid, 1.4), grid, 0.3, 7)
    fast = assert_routes_agree(BASE + corrections(), grid, scheme, field)
    if scheme != "sixth" or kind != "fixed":
        return  # float32 below: one case, slow (its first call compiles the route again, about a minute)
    # float32 evaluation: the same numbers to single precision (common practice: 1e-5 energy)
    e64, g64 = fast.evaluate(field)
    e32, g32 = fast.evaluate(field.astype(np.float32))
    assert g32.dtype == np.float32
    assert abs(e32 - e64) < 1e-5 * abs(e64)
    assert np.abs(g32 - g64).max() < 1e-4 * np.abs(g64).max()


def test_corrections_without_the_plain_terms():
    """The staged route with the plain model's site algebra switched off (c2 = c4 = 0)."""
    grid = grid_of("fixed")
    field = add_noise(hopf_map(grid, 1.4), grid, 0.3, 3)
    assert_routes_agree(corrections(), grid, "sixth", field, traced=True)


def test_staged_gradient_matches_a_finite_difference(rng):
    """Independent of jax: the directional derivative of the route's own energy along a
    tangent direction, by central differences of the normalised field (step 1e-5; the
    error is O(step^2) ~ 1e-8 relative)."""
    grid = grid_of("fixed")
    model = Model(BASE + corrections(), grid, "sixth")
    field = add_noise(hopf_map(grid, 1.4), grid, 0.1, 5)
    direction = np.asarray(project_tangent(jnp.asarray(field), jnp.asarray(rng.standard_normal(field.shape))))
    direction = direction * np.asarray(grid.free_mask())
    _, gradient = model.evaluate(field)
    step = 1e-5
    plus = model.evaluate(np.asarray(normalise(jnp.asarray(field + step * direction))))[0]
    minus = model.evaluate(np.asarray(normalise(jnp.asarray(field - step * direction))))[0]
    numeric = (plus - minus) / (2 * step)
    analytic = float(np.sum(gradient * direction))
    assert abs(numeric - analytic) < 1e-6 * abs(analytic)


COPIES = Path(__file__).with_name("user_copies.py")  # user-file copies of log_quartic and sextic
TILTED = '''
import jax.numpy as jnp

def tilted_laplacian(n, d, lap=None, b=0.3):
    # an easy-plane-like potential, zero in the vacuum, not symmetric about e3
    return b * n[..., 0] ** 2 + 0.1 * jnp.sum(lap * lap, axis=-1)
'''


@pytest.fixture(scope="module")
def user_kinds(tmp_path_factory):
    path = tmp_path_factory.mktemp("user") / "tilted.py"
    path.write_text(textwrap.dedent(TILTED))
    kinds = {name: load_user_term(COPIES, name)[0] for name in ("log_quartic", "sextic")}
    kinds["laplacian_squared"] = load_user_term(COPIES, "laplacian_squared", laplacian=True)[0]
    kinds["tilted_laplacian"] = load_user_term(path, "tilted_laplacian", laplacian=True)[0]
    return kinds


def test_user_copies_equal_the_builtin_terms(user_kinds):
    """User-file copies of log_quartic, sextic and laplacian_squared (compiled pointwise
    on the staged local fields) give the built-in row functions' numbers (numba, written
    by hand): energy, gradient and virial to 1e-12 (derived: the same density)."""
    grid = grid_of("fixed")
    field = add_noise(hopf_map(grid, 1.4), grid, 0.3, 11)
    couplings = {"log_quartic": 0.3, "sextic": 0.05, "laplacian_squared": 0.1}
    builtin = Model(BASE + tuple(Term(k, BUILTIN_TERMS[k], c) for k, c in couplings.items()), grid, "sixth")
    user = Model(BASE + tuple(Term(k, user_kinds[k], c) for k, c in couplings.items()), grid, "sixth")
    assert not builtin.route.rest and len(user.route.rest) == 3
    e_b, g_b = builtin.evaluate(field)
    e_u, g_u = user.evaluate(field)
    assert abs(e_u - e_b) < 1e-12 * e_b
    assert np.abs(g_u - g_b).max() < 1e-12 * np.abs(g_b).max()
    for name, value in builtin.energies(field).items():
        assert abs(user.energies(field)[name] - value) < 1e-12 * e_b
    assert np.allclose(user.virial(field)["per_axis"], builtin.virial(field)["per_axis"], atol=1e-12, rtol=0)


@pytest.mark.parametrize("scheme, kind", [("sixth", "periodic"), ("sixth", "stretched"), ("fourth", "fixed"),
                                          ("second", "periodic")])
def test_user_terms_and_duplicate_kinds_equal_autodiff(user_kinds, scheme, kind):
    """A user term with n and Laplacian dependence, and a second term of a built-in kind
    (which takes the pointwise route), next to built-in terms."""
    grid = grid_of(kind)
    field = add_noise(hopf_map(grid, 1.4), grid, 0.3, 13)
    terms = BASE + (Term("tilted", user_kinds["tilted_laplacian"], 0.4),
                    Term("dirichlet_again", BUILTIN_TERMS["dirichlet"], 0.2),
                    Term("potential", BUILTIN_TERMS["potential"], 0.5),
                    Term("laplacian_squared", BUILTIN_TERMS["laplacian_squared"], 0.1))
    fast = assert_routes_agree(terms, grid, scheme, field)
    assert [t.name for t in fast.route.rest] == ["tilted", "dirichlet_again"]
    assert fast.route.name == "numba staged kernel + compiled pointwise"


def test_route_choice():
    grid = Grid.centred(12, 0.5, "fixed")
    assert isinstance(Model(BASE, grid).route, PlainKernel)
    assert isinstance(Model(BASE, grid, "sixth", "numba").route, PlainKernel)
    assert isinstance(Model(BASE + corrections(("potential",)), grid).route, StagedKernel)
    assert isinstance(Model(BASE + corrections(("potential",)), grid, "sixth", "numba").route, StagedKernel)
    assert isinstance(Model(BASE, grid, "sixth", "jax").route, Autodiff)


def test_vector_log_against_numpy():
    """The vectorised logarithm of the log_quartic row function against numpy's log
    (a general-purpose reference library): within 4 units in the last place from 1e-300 to
    1e300 and next to 1."""
    rng = np.random.default_rng(0)
    x = np.concatenate([np.exp(rng.uniform(-690, 690, 20000)), rng.uniform(0.5, 2.0, 20000),
                        1.0 + rng.uniform(-1e-8, 1e-8, 1000), [1.0, 2.0, 0.5, np.sqrt(2.0)]])
    values = x.copy()
    vector_log(values, np.empty(len(x), dtype=np.int64), np.empty(len(x)))
    reference = np.log(x)
    assert np.all(np.abs(values - reference) <= 4 * np.spacing(np.abs(reference)) + 1e-300)
