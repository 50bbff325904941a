"""Minimisers: descent, agreement of methods, stopping rule, non-finite guard."""

import jax.numpy as jnp
import numpy as np
from conftest import skyrme_faddeev_model

from solitons.judge.outcomes import Outcome
from solitons.lattice.grid import Grid
from solitons.model.energy import Model
from solitons.model.terms import Term, TermKind
from solitons.relaxation.initial import add_noise, hopf_map
from solitons.relaxation.minimise import StoppingRule, minimise

# Side 8, h = 0.2: Q = 1 stays wound here (measured: at h = 0.25 in a box of side 7.75
# the squeezed soliton slips through the lattice and unwinds).
GRID = Grid.centred(41, 0.2, "fixed")


def start_field(grid=GRID):
    field = add_noise(hopf_map(grid, 1.0), grid, 0.02, 1)
    return field * grid.free_mask() + np.array([0, 0, 1.0]) * (1 - grid.free_mask())


def test_arrested_newton_flow_descends_between_resets():
    """Between arrests the energy falls at every step; a rise triggers an arrest and the
    next step falls again; and no rise gives back what was gained since the previous
    arrest, so the energies at successive arrests decrease (the defining property of the
    flow; Battye & Sutcliffe, Phys. Rev. Lett. 81 (1998) 4798)."""
    model = skyrme_faddeev_model(GRID)
    result = minimise(model, start_field(), "arrested_newton", StoppingRule(max_steps=300, force_tol=0.0))
    energy = np.asarray(result.history.energy)
    changes = np.diff(energy)
    rises = np.flatnonzero(changes > 0)
    assert energy[-1] < energy[0] - 0.1
    assert 0 < len(rises) < 0.2 * len(changes)
    for index in rises:
        if index + 1 < len(changes):
            assert changes[index + 1] < 0
    at_arrests = energy[rises + 1]
    assert np.all(np.diff(at_arrests) < 0)


def test_methods_agree_on_the_minimum():
    """L-BFGS and arrested Newton flow relax the same data to the same lattice minimum
    (an independent-route check; tolerance from the stopping rule)."""
    model = skyrme_faddeev_model(GRID)
    rule = StoppingRule(max_steps=3000, force_tol=1e-3, energy_tol=0.0)
    results = [minimise(model, start_field(), method, rule)
               for method in ("lbfgs", "arrested_newton", "scipy_lbfgs")]
    for result in results:
        assert result.converged
        assert abs(result.energy - results[0].energy) < 1e-7 * results[0].energy
        # the held border never moves
        border = GRID.free_mask()[..., 0] == 0
        np.testing.assert_array_equal(result.field[border][:, 2], 1.0)
        np.testing.assert_allclose(np.linalg.norm(result.field, axis=-1), 1.0, atol=1e-12)


def test_gradient_flow_descends():
    model = skyrme_faddeev_model(GRID)
    result = minimise(model, start_field(), "gradient_flow", StoppingRule(max_steps=200, force_tol=0.0))
    energy = np.asarray(result.history.energy)
    assert np.all(np.diff(energy) <= 1e-14)
    assert result.status == "max_steps" and result.steps == 200


def test_non_finite_energy_stops_and_keeps_last_finite_state():
    """A density that is NaN below n3 = 0.9 while its minimum pulls n3 down: the run must
    stop with status non-finite and return a finite field."""
    def broken(n, d, lap=None):
        return jnp.sqrt(n[..., 2] - 0.9) + 0.0 * jnp.sum(d, axis=(-2, -1))

    grid = Grid.centred(12, 0.5, "periodic")
    model = Model((Term("broken", TermKind("broken", 0, "sqrt(n3 - 0.9)", broken)),), grid)
    field = np.zeros(grid.shape + (3,))
    field[..., 0] = 0.1
    field[..., 2] = 1.0
    field /= np.linalg.norm(field, axis=-1, keepdims=True)
    for method in ("arrested_newton", "gradient_flow", "lbfgs", "scipy_lbfgs"):
        result = minimise(model, field, method, StoppingRule(max_steps=500, force_tol=0.0),
                          time_step=5.0 if "lbfgs" not in method else None)
        assert result.status == Outcome.NON_FINITE, method
        assert np.all(np.isfinite(result.field))


def test_resumed_history_continues_step_count():
    model = skyrme_faddeev_model(GRID)
    first = minimise(model, start_field(), "lbfgs", StoppingRule(max_steps=10, force_tol=0.0))
    # max_steps counts the steps before the resume too
    second = minimise(model, first.field, "lbfgs", StoppingRule(max_steps=20, force_tol=0.0),
                      history=first.history, start_step=first.steps)
    assert second.steps == 20
    assert second.history.step == list(range(1, 21))
    assert second.energy <= first.energy
