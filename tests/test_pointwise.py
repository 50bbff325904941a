"""The compiled pointwise route for user terms (`solitons.model.routes.scalar_codegen`,
`solitons.model.routes.pointwise`) against jax itself (a general-purpose reference library): the
translated statements must compute jax's value and gradient of the density to rounding
(1e-13 relative; derived: the same operations, in an order that differs only by
reassociation), and a density the translator cannot read must fall back to jax with the
reason in the route's name."""

import math
import textwrap
from pathlib import Path

import jax
import jax.numpy as jnp
import numpy as np
import pytest

from solitons.lattice.grid import Grid
from solitons.model.energy import Model
from solitons.model.routes import pointwise, scalar_codegen
from solitons.model.routes.evaluators import Autodiff
from solitons.model.terms import BUILTIN_TERMS, Term, TermKind, field_strength, h_squared, strain
from solitons.model.userterms import load_user_term
from solitons.relaxation.initial import add_noise, hopf_map

COPIES = Path(__file__).with_name("user_copies.py")  # user-file copies of log_quartic and sextic


def many_primitives(n, d, lap=None, a=0.7, b=1.3):
    """A made-up density that reaches most of the translator's rules: elementwise maths,
    comparisons and selects, reductions (sum, mean, max), contractions with and without constants,
    slicing, reversal, stacking, padding, integer and real powers."""
    D = strain(d)
    F = field_strength(n, d)
    h2 = h_squared(d)
    trace = jnp.trace(D, axis1=-2, axis2=-1)
    cross = jnp.cross(d[..., 0, :], d[..., 1, :])
    weights = jnp.asarray([1.0, -2.0, 0.5])
    tilt = jnp.einsum("...i,i->...", n, weights)
    stacked = jnp.stack([trace, h2, jnp.abs(tilt)], axis=-1)
    padded = jnp.pad(stacked, [(0, 0)] * (stacked.ndim - 1) + [(1, 2)])
    smooth = jnp.sqrt(1.0 + jnp.sum(padded**2, axis=-1)) - 1.0
    gate = jnp.where(tilt > 0.1, jnp.tanh(tilt) ** 2, jnp.exp(-(tilt**2)) * tilt**2)
    clipped = jnp.clip(trace, 0.05, 3.0) ** 1.5 - 0.05**1.5
    bounded = jnp.maximum(h2, 0.01) * jnp.minimum(trace, 2.0)
    reversed_part = jnp.sum(d[..., ::-1, :] * d, axis=(-2, -1))
    ratio = h2 / (1.0 + trace) + jnp.log1p(h2) - jnp.expm1(-trace) * 0.0
    quadratic = jnp.einsum("...ij,...ij->...", F, F) + jnp.linalg.norm(cross, axis=-1) ** 3
    return (a * smooth + gate + clipped + b * bounded * reversed_part + ratio + quadratic
            + jnp.mean(D, axis=(-2, -1)) * (1.0 - n[..., 2]) ** 2 + 0.1 * jnp.max(D, axis=(-2, -1)) + (trace + 1.0) ** -2 - 1.0 + 0.0 * jnp.sum(lap, -1))


def random_sites(count, seed=0):
    rng = np.random.default_rng(seed)
    n = rng.standard_normal((count, 3))
    n /= np.linalg.norm(n, axis=-1, keepdims=True)
    d = rng.standard_normal((count, 3, 3))
    lap = rng.standard_normal((count, 3))
    return n, d, lap


def run_translated(terms, needs_laplacian, n, d, lap):
    """Execute the translated site function as plain Python (no numba) at each site."""
    source, traced = pointwise.site_source(terms, needs_laplacian)
    namespace = {"math": math, "np": np}
    exec(source, namespace)
    couplings = np.asarray([t.coupling for t in terms])
    parameters = pointwise._parameter_layout(terms, traced)[1]
    return np.array([namespace["site"](*n[s], *d[s].ravel(), *lap[s], couplings, parameters)
                     for s in range(len(n))])


def reference(terms, needs_laplacian, n, d, lap):
    function = jax.jit(pointwise.site_function(terms, needs_laplacian, traced_parameters=False))
    rows = []
    for s in range(len(n)):
        values, gn, gd, gl = function(n[s], d[s], lap[s], jnp.asarray([t.coupling for t in terms]), jnp.zeros(1))
        rows.append(np.concatenate([np.asarray(values), np.asarray(gn), np.asarray(gd).ravel(), np.asarray(gl)]))
    return np.array(rows)


def test_translation_matches_jax_value_and_gradient():
    kind = TermKind("many", None, "", many_primitives, needs_laplacian=True,
                    parameters=(("a", 0.7), ("b", 1.3)))
    terms = (Term("many", kind, 0.8, (("a", 0.4),)), Term("sextic", BUILTIN_TERMS["sextic"], 0.3))
    n, d, lap = random_sites(40)
    got, expected = run_translated(terms, True, n, d, lap), reference(terms, True, n, d, lap)
    assert got.shape == expected.shape == (40, 2 + 3 + 9 + 3)
    scale = np.abs(expected).max(axis=0) + 1e-300
    assert np.all(np.abs(got - expected) <= 1e-13 * scale)
    assert np.abs(expected[:, 2:]).min(axis=0).max() > 0  # the gradient is not trivially zero


def test_parameters_are_arguments_of_the_compiled_code():
    """A parameter scan reuses one translation: the same source for two values of a
    parameter, and the value passed in at run time is the one used."""
    kind = BUILTIN_TERMS["log_quartic"]
    first = (Term("lq", kind, 0.3, (("c1", 0.2),)),)
    second = (Term("lq", kind, 0.5, (("c1", 0.4),)),)
    assert pointwise.kernel_source(first, False) == pointwise.kernel_source(second, False)
    n, d, lap = random_sites(10, seed=3)
    assert np.allclose(run_translated(second, False, n, d, lap), reference(second, False, n, d, lap),
                       rtol=1e-13, atol=0)


BRANCHING = '''
import jax.numpy as jnp

def branching(n, d, lap=None, power=2.0):
    # a Python branch on a parameter: the translation falls back to fixed parameters
    if power == 2.0:
        return (1.0 - n[..., 2]) ** 2
    return (1.0 - n[..., 2]) ** power
'''
SORTED = '''
import jax.numpy as jnp

def sorted_strain(n, d, lap=None):
    # the largest eigenvalue-like entry via a sort, a primitive the translator refuses
    D = jnp.einsum("...ia,...ja->...ij", d, d)
    diagonal = jnp.sort(jnp.diagonal(D, axis1=-2, axis2=-1), axis=-1)
    return diagonal[..., -1] ** 2
'''


@pytest.fixture(scope="module")
def special_kinds(tmp_path_factory):
    folder = tmp_path_factory.mktemp("special")
    kinds = {}
    for name, text in (("branching", BRANCHING), ("sorted_strain", SORTED)):
        path = folder / f"{name}.py"
        path.write_text(textwrap.dedent(text))
        kinds[name] = load_user_term(path, name)[0]
    return kinds


def test_branch_on_a_parameter_is_compiled_with_fixed_parameters(special_kinds):
    terms = (Term("b", special_kinds["branching"], 0.5, (("power", 3.0),)),)
    source, traced = pointwise.site_source(terms, False)
    assert not traced
    n, d, lap = random_sites(10, seed=5)
    assert np.allclose(run_translated(terms, False, n, d, lap), reference(terms, False, n, d, lap),
                       rtol=1e-13, atol=1e-300)


def route_agrees(terms, grid, field, scheme="sixth", tolerance=1e-12):
    reference_model, fast = Model(terms, grid, scheme, "jax"), Model(terms, grid, scheme)
    assert isinstance(reference_model.route, Autodiff)
    e_ref, g_ref = reference_model.evaluate(field)
    e_fast, g_fast = fast.evaluate(field)
    assert abs(e_fast - e_ref) < tolerance * abs(e_ref)
    assert np.abs(g_fast - g_ref).max() < tolerance * np.abs(g_ref).max()
    v_ref, v_fast = reference_model.virial(field), fast.virial(field)
    assert np.allclose(v_fast["per_axis"], v_ref["per_axis"], atol=tolerance, rtol=0)
    return fast


def test_unsupported_primitive_falls_back_to_jax(special_kinds):
    with pytest.raises(scalar_codegen.Unsupported, match="sort"):
        pointwise.kernel_source((Term("s", special_kinds["sorted_strain"], 0.2),), False)
    grid = Grid.centred(14, 0.35, "fixed")
    field = add_noise(hopf_map(grid, 1.2), grid, 0.2, 2)
    terms = (Term("dirichlet", BUILTIN_TERMS["dirichlet"]), Term("s", special_kinds["sorted_strain"], 0.2))
    fast = route_agrees(terms, grid, field)
    assert isinstance(fast.route.evaluator, pointwise.XlaPointwise)
    assert "jax pointwise (primitive sort not compiled)" in fast.route.name


def test_compiled_route_in_float32_and_after_a_coupling_change():
    """One compiled kernel serves a second coupling (it is an argument), and a float32
    field gives the float64 numbers to single precision (common practice: 1e-5 energy)."""
    kind = load_user_term(COPIES, "log_quartic")[0]
    grid = Grid.centred(14, 0.35, "periodic")
    field = add_noise(hopf_map(grid, 1.2), grid, 0.2, 4)
    base = (Term("dirichlet", BUILTIN_TERMS["dirichlet"]), Term("skyrme_faddeev", BUILTIN_TERMS["skyrme_faddeev"]))
    first = route_agrees(base + (Term("lq", kind, 0.3, (("c1", 0.2),)),), grid, field, "fourth")
    second = route_agrees(base + (Term("lq", kind, 0.5, (("c1", 0.3),)),), grid, field, "fourth")
    assert first.route.evaluator.module is second.route.evaluator.module
    assert "compiled pointwise" in second.route.name
    e64, g64 = second.evaluate(field)
    e32, g32 = second.evaluate(field.astype(np.float32))
    assert g32.dtype == np.float32
    assert abs(e32 - e64) < 1e-5 * abs(e64)
    assert np.abs(g32 - g64).max() < 1e-4 * np.abs(g64).max()
