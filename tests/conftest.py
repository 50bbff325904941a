"""Shared test setup: float64 and strict jax promotion, so silent broadcasting or float32
downgrades fail loudly (common practice, after the solver-library style guide)."""

import jax
import numpy as np
import pytest

import solitons  # noqa: F401  (turns on float64)
from solitons.lattice.grid import Grid
from solitons.model.energy import Model
from solitons.model.terms import BUILTIN_TERMS, Term

jax.config.update("jax_enable_x64", True)
jax.config.update("jax_numpy_rank_promotion", "raise")
jax.config.update("jax_numpy_dtype_promotion", "strict")

SKYRME_FADDEEV = (
    Term("dirichlet", BUILTIN_TERMS["dirichlet"]),
    Term("skyrme_faddeev", BUILTIN_TERMS["skyrme_faddeev"]),
)


def skyrme_faddeev_model(grid: Grid, scheme: str = "second") -> Model:
    return Model(SKYRME_FADDEEV, grid, scheme)


@pytest.fixture(scope="session", autouse=True)
def numba_code_compiled_once():
    """Compile the numba routes (or load them from numba's disk cache) once, in this
    process, before any test starts worker processes or subprocesses: on a fresh install
    several processes otherwise compile the same kernels at the same time."""
    from solitons.relaxation.initial import hopf_map
    from solitons.relaxation.minimise import StoppingRule, minimise

    grid = Grid.centred(12, 0.5, "fixed")
    field = hopf_map(grid, 1.0)
    minimise(Model(SKYRME_FADDEEV, grid, "sixth"), field, "lbfgs", StoppingRule(max_steps=2, force_tol=0.0))
    Model(SKYRME_FADDEEV + (Term("potential", BUILTIN_TERMS["potential"]),), grid, "sixth").evaluate(field)


@pytest.fixture
def rng():
    return np.random.default_rng(12345)
