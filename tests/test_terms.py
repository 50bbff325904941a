"""Every built-in term: gradient against finite differences, Derrick weight on an
analytic field, fast route against the generic one, virial against a finite difference in
the spacing."""

import jax.numpy as jnp
import numpy as np
import pytest

from solitons.lattice.grid import Grid
from solitons.model.energy import Model, normalise, term_energies
from solitons.model.terms import BUILTIN_TERMS, Term, quartic_bound
from solitons.relaxation.initial import add_noise, hopf_map

KINDS = sorted(BUILTIN_TERMS)


def single(kind, **parameters):
    return (Term(kind, BUILTIN_TERMS[kind], 1.0, tuple(parameters.items())),)


@pytest.mark.parametrize("kind", KINDS)
def test_gradient_matches_finite_difference(kind, rng):
    """Central finite difference of the discrete energy along a random tangent direction
    (common practice) against the autodiff gradient, relative error < 1e-6."""
    grid = Grid.centred(16, 0.4, "periodic")
    model = Model(single(kind), grid)
    field = jnp.asarray(add_noise(hopf_map(grid, 1.2), grid, 0.05, 5))
    _, gradient = model.value_and_grad(field)
    direction = rng.standard_normal(field.shape)
    direction -= np.sum(direction * np.asarray(field), -1, keepdims=True) * np.asarray(field)
    step = 1e-5
    plus = float(model.energy(normalise(field + step * direction)))
    minus = float(model.energy(normalise(field - step * direction)))
    analytic = float(jnp.sum(gradient * direction))
    assert abs((plus - minus) / (2 * step) - analytic) < 1e-6 * abs(analytic)


@pytest.mark.parametrize("kind", [k for k in KINDS if BUILTIN_TERMS[k].derivatives is not None])
def test_derrick_weight_on_analytic_field(kind):
    """E_term[n(lambda x)] = lambda^(d - 3) E_term[n] (Derrick; docs/references.md [R10]), with
    n(lambda x) the Hopf map of size 1/lambda on the same fine grid; tolerance 5e-3 covers
    the sixth-order scheme's lattice error at h = 0.1 (largest measured: 1.4e-3 for the
    sextic term; the compact profile's kinks at r = 0 and r = R limit it), far below the
    25 % that separates neighbouring weights."""
    lam = 1.25
    grid = Grid.centred(81, 0.1, "fixed")
    model = Model(single(kind), grid, "sixth")
    base = model.energies(hopf_map(grid, 1.0))[kind]
    scaled = model.energies(hopf_map(grid, 1.0 / lam))[kind]
    assert abs(base) > 1e-3
    expected = lam ** (BUILTIN_TERMS[kind].derivatives - 3)
    assert abs(scaled / base / expected - 1) < 5e-3


@pytest.mark.parametrize("kind", KINDS)
def test_virial_equals_derrick_derivative(kind):
    """sum_a h_a dE/dh_a (autodiff) equals -dE[n(lambda x)]/dlambda at lambda = 1, taken
    here by a central finite difference over Hopf maps of size 1/lambda (derived; the
    identity docs/references.md [R10]).  Holds for the non-homogeneous log term as well; the
    residual is the lattice error's dependence on the size (sixth-order scheme, h = 0.1:
    largest measured 1.3e-3, for the quartic terms)."""
    grid = Grid.centred(81, 0.1, "fixed")
    model = Model(single(kind), grid, "sixth")
    energy = model.energies(hopf_map(grid, 1.0))[kind]
    virial = model.virial(hopf_map(grid, 1.0))["total"] * energy
    eps = 1e-3
    up = model.energies(hopf_map(grid, 1.0 / (1 + eps)))[kind]
    down = model.energies(hopf_map(grid, 1.0 / (1 - eps)))[kind]
    derrick = (up - down) / (2 * eps)
    assert abs(virial + derrick) < 5e-3 * max(abs(derrick), abs(energy))


@pytest.mark.parametrize("kind", KINDS)
def test_fast_route_equals_generic(kind):
    grid = Grid.centred(14, 0.45, "fixed")
    field = add_noise(hopf_map(grid, 1.2), grid, 0.1, 2)
    for scheme in ("second", "fourth", "sixth"):
        fast = term_energies(field, np.asarray(grid.spacing), grid, single(kind), scheme)[0]
        generic = term_energies(field, np.asarray(grid.spacing), grid, single(kind), scheme, True)[0]
        assert abs(float(fast) - float(generic)) <= 1e-12 * abs(float(generic))


def test_quartic_identities_on_random_strains(rng):
    """strain_squared = dirichlet_squared - 2 skyrme_faddeev pointwise for unit fields
    (derived from the rank-2 strain, docs/references.md [R19])."""
    grid = Grid.centred(12, 0.4, "periodic")
    field = add_noise(hopf_map(grid, 1.0), grid, 0.3, 9)
    e = {k: Model(single(k), grid).energies(field)[k]
         for k in ("strain_squared", "dirichlet_squared", "skyrme_faddeev")}
    assert abs(e["strain_squared"] - (e["dirichlet_squared"] - 2 * e["skyrme_faddeev"])) < 1e-12 * e["strain_squared"]


@pytest.mark.parametrize("a, b, bounded", [(1, 0, True), (1, -0.2, False), (-1, 0.3, True),
                                           (-1, 0.2, False), (0, 0, True)])
def test_quartic_bound(a, b, bounded):
    """a H^2 + b (dn.dn)^2 >= 0 for all fields iff b >= 0 and a + 4 b >= 0 (derived)."""
    terms = (Term("sf", BUILTIN_TERMS["skyrme_faddeev"], a),
             Term("ds", BUILTIN_TERMS["dirichlet_squared"], b))
    assert quartic_bound(terms)["bounded"] is bounded


def test_field_strength_helper_matches_h_squared(rng):
    """F_ij = n . (d_i n x d_j n) is antisymmetric and sum_{i<j} F_ij^2 = H^2 when the
    derivatives are tangent to the sphere (derived: d_i n x d_j n is parallel to n)."""
    from solitons.model.terms import field_strength, h_squared

    n = rng.standard_normal((50, 3))
    n /= np.linalg.norm(n, axis=-1, keepdims=True)
    d = rng.standard_normal((50, 3, 3))
    d -= np.sum(d * n[:, None, :], -1, keepdims=True) * n[:, None, :]
    f = np.asarray(field_strength(jnp.asarray(n), jnp.asarray(d)))
    np.testing.assert_allclose(f, -np.swapaxes(f, -1, -2), atol=1e-14)
    pairs = f[:, 0, 1] ** 2 + f[:, 0, 2] ** 2 + f[:, 1, 2] ** 2
    np.testing.assert_allclose(pairs, np.asarray(h_squared(jnp.asarray(d))), rtol=1e-12)
