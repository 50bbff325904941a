"""Flows that cannot blow up unnoticed, a stopping rule that says which rule fired, and runs
that continue exactly from where a rule or max_steps stopped them."""

import numpy as np
import pytest
from conftest import skyrme_faddeev_model

from solitons import cli
from solitons.config import load
from solitons.io.results import read_checkpoint, read_result
from solitons.judge.outcomes import Outcome
from solitons.lattice.grid import Grid
from solitons.model.energy import Model
from solitons.model.terms import BUILTIN_TERMS, Term
from solitons.relaxation.initial import add_noise, hopf_map
from solitons.relaxation.minimise import RISE_FACTOR, StoppingRule, largest_curvature, minimise
from solitons.run import relax

GRID = Grid.centred(41, 0.2, "fixed")  # side 8: Q = 1 stays wound at h = 0.2 (test_minimise)

# One-sided difference taps over offsets -1 .. 4, typed from the README's scheme table
# (the specification), not read from solitons.lattice.grid.
TAPS = {"second": [0, -1, 1, 0, 0, 0],
        "fourth": np.array([-3, -10, 18, -6, 1, 0]) / 12,
        "sixth": np.array([-12, -65, 120, -60, 20, -3]) / 60}
PHYSICAL = [Outcome.STABLE, Outcome.COLLAPSED, Outcome.UNDER_RESOLVED, Outcome.SPREAD, Outcome.BOX_TOO_SMALL,
            Outcome.UNWOUND, Outcome.UNBOUNDED, Outcome.SADDLE]


def start_field(grid=GRID):
    field = add_noise(hopf_map(grid, 1.0), grid, 0.02, 1)
    return field * grid.free_mask() + np.array([0, 0, 1.0]) * (1 - grid.free_mask())


@pytest.mark.parametrize("scheme", ["second", "fourth", "sixth"])
def test_largest_curvature_of_the_dirichlet_term_at_the_vacuum(scheme):
    """At the vacuum the force of the Dirichlet term (density sum_i |d_i n|^2) is the
    Euler-Lagrange expression 2 * (-Delta_h) on the tangent components, and -Delta_h of the
    octant-averaged one-sided difference D has the symbol sum_i |p(theta_i)|^2 / h^2 with
    p(theta) = sum_k tap_k e^{i k theta}.  So lambda_max = 2 * 3 * max_theta |p|^2 / h^2
    (derived), taken here from the README's taps on a fine theta grid; a periodic box of
    even side holds every mode the maximum needs to within the theta sampling."""
    grid = Grid.centred(16, 0.5, "periodic")
    model = Model((Term("dirichlet", BUILTIN_TERMS["dirichlet"]),), grid, scheme)
    field = np.zeros(grid.shape + (3,))
    field[..., 2] = 1.0
    theta = 2 * np.pi * np.arange(16) / 16  # the box's own modes
    symbol = np.abs(sum(t * np.exp(1j * k * theta) for k, t in zip(range(-1, 5), TAPS[scheme]))) ** 2
    expected = 2 * 3 * symbol.max() / 0.5**2
    measured = largest_curvature(model, field, iterations=60)
    assert measured == pytest.approx(expected, rel=0.02)
    assert measured <= expected * (1 + 1e-6)  # a Rayleigh quotient: never above the top


@pytest.mark.parametrize("scheme", ["second", "fourth", "sixth"])
@pytest.mark.parametrize("method", ["lbfgs", "arrested_newton", "gradient_flow"])
def test_default_steps_relax_q1_without_a_rise(method, scheme):
    """At its default step every method descends from the Hopf map on every scheme: no
    step is rejected by the guard, the energy never exceeds its start, and it falls by a
    clear amount (the default step is derived from the measured stiffness, so the stiffer
    sixth-order stencil gets a smaller one; the fixed step 0.07 h blew up there)."""
    model = skyrme_faddeev_model(GRID, scheme)
    result = minimise(model, start_field(), method, StoppingRule(max_steps=150, force_tol=0.0))
    energy = np.asarray(result.history.energy)
    assert result.status in (Outcome.MAX_STEPS, Outcome.CONVERGED)  # L-BFGS may meet the energy rule first
    assert result.rejected_steps == 0
    assert energy.max() <= energy[0] * (1 + 1e-12)
    assert energy[-1] < energy[0] - 0.02
    if method == "gradient_flow":  # explicit Euler below its limit is monotone
        assert np.all(np.diff(energy) <= 1e-12 * energy[0])


@pytest.mark.parametrize("method", ["arrested_newton", "gradient_flow"])
def test_a_step_too_large_is_caught_and_halved(method):
    """Ten times the flow's stability limit: the guard rejects steps and halves the step
    until the energy falls, and the run still descends (no blow-up).  The measured limit
    is 2 / lambda_max (gradient flow) or 2 / sqrt(lambda_max) (arrested Newton), derived for
    x' = -lambda x and x'' = -lambda x."""
    model = skyrme_faddeev_model(GRID, "sixth")
    field = start_field()
    curvature = largest_curvature(model, field)
    h = 0.2
    limit = 2 / np.sqrt(curvature) / h if method == "arrested_newton" else 2 / curvature / h**2
    result = minimise(model, field, method, StoppingRule(max_steps=60, force_tol=0.0), time_step=10 * limit)
    energy = np.asarray(result.history.energy)
    assert result.rejected_steps >= 3  # 10 x the limit needs at least three halvings
    assert result.status == Outcome.MAX_STEPS and np.isfinite(energy).all()
    assert energy[-1] < energy[0]
    # no accepted step raised the energy by more than the guard's factor (RISE_FACTOR)
    assert np.all(np.diff(energy) <= RISE_FACTOR * energy[:-1])


def test_a_blow_up_gets_a_numerical_status_never_a_physics_verdict(tmp_path):
    """A step 1e6 times too large cannot be mended by twelve halvings: the run ends as a
    numerical blow-up, its verdict says so (not `collapsed`, the verdict such runs used to
    get), and the command exits 3 like a non-finite energy."""
    config = tmp_path / "flow.toml"
    config.write_text('[grid]\npoints = 33\nspacing = 0.25\n[relax]\nmethod = "gradient_flow"\n'
                      'time_step = 1e6\nmax_steps = 50\nprogress_seconds = 0.0\nsaddle_check = false\n')
    code = cli.main(["relax", str(config), "--out", str(tmp_path / "run"), "--quiet", "--no-figures"])
    summary = read_result(tmp_path / "run" / "result.h5")["summary"]
    assert summary["status"] == Outcome.NUMERICAL_BLOWUP
    assert summary["verdict"] == Outcome.NUMERICAL_BLOWUP and summary["verdict"] not in PHYSICAL
    assert summary["rejected_steps"] == 13 and code == 3
    assert any("NUMERICAL BLOW-UP" in w for w in summary["warnings"])


def test_stopping_rule_checks_itself_and_names_the_rule():
    """The rule refuses what it cannot apply and says which rule fired (force first)."""
    rule = StoppingRule(max_steps=10, force_tol=1e-3, energy_tol=1e-10, patience=5)
    assert rule.fired(5e-4, 0) == "force" and rule.fired(5e-4, 9) == "force"
    assert rule.fired(2e-3, 5) == "energy" and rule.fired(2e-3, 4) is None
    for bad in ({"patience": 0}, {"force_tol": -1.0}, {"energy_tol": float("nan")}, {"max_steps": 2.5}):
        with pytest.raises(ValueError, match=next(iter(bad))):
            StoppingRule(**bad)


SMALL = """
[grid]
points = 41
spacing = 0.2
[relax]
method = "{method}"
max_steps = {steps}
checkpoint_every = 0
progress_seconds = 0.0
saddle_check = false
"""


@pytest.mark.parametrize("method", ["lbfgs", "arrested_newton"])
def test_a_run_stopped_by_max_steps_continues_exactly(tmp_path, method):
    """A run stopped at max_steps = 25 and resumed with max_steps = 50 ends in the same
    state as a run of 50 steps never stopped: the same energies, step by step, to 1e-12
    (exact resume, common practice for checkpointed solvers), even with periodic
    checkpoints off (the final state is always saved)."""
    straight = relax(load(None, text=SMALL.format(method=method, steps=50)), tmp_path / "straight", stream=None)
    out = tmp_path / "stopped"
    first = relax(load(None, text=SMALL.format(method=method, steps=25)), out, stream=None)
    assert first["stopped_by"] == "max_steps" and read_checkpoint(out / "checkpoint.h5")["step"] == 25
    assert "--resume relax.max_steps=50" in first["continue_with"]
    resumed = relax(load(None, text=SMALL.format(method=method, steps=50)), out, resume=True, stream=None)
    assert resumed["iterations"] == straight["iterations"] == 50
    assert abs(resumed["energy"] - straight["energy"]) <= 1e-12 * straight["energy"]
    a, b = read_result(tmp_path / "straight" / "result.h5")["history"], read_result(out / "result.h5")["history"]
    np.testing.assert_allclose(b["energy"], a["energy"], rtol=1e-12, atol=0)
    assert [seg["ended"] for seg in resumed["segments"]] == ["max_steps", "max_steps"]


def test_a_run_stopped_by_the_energy_rule_continues_under_a_tighter_rule(tmp_path):
    """The energy rule stops a run with a loose energy_tol; resumed with energy_tol = 0 it
    goes on from the saved state (no restart: the step count continues) to the force rule,
    and its energy only falls (descent from the stopped state)."""
    text = SMALL.format(method="lbfgs", steps=400) + "energy_tol = 1e-5\npatience = 3\n"
    out = tmp_path / "run"
    first = relax(load(None, text=text), out, stream=None)
    assert first["stopped_by"] == "energy" and (out / "checkpoint.h5").exists()
    tight = relax(load(None, text=text.replace("energy_tol = 1e-5", "energy_tol = 0.0")), out, resume=True,
                  stream=None)
    assert tight["stopped_by"] == "force" and tight["max_force"] < 1e-3
    assert tight["iterations"] > first["iterations"] and tight["energy"] <= first["energy"]
    assert tight["segments"][1]["from_step"] == first["iterations"]
    assert not (out / "checkpoint.h5").exists()  # met the force rule: nothing left to continue



def test_newton_krylov_meets_the_force_rule_and_agrees_with_lbfgs():
    """Truncated Newton (Nocedal & Wright, Alg. 7.1), started where L-BFGS reached force
    1e-2, meets a force rule ten times tighter than the default (measured: 69 Newton steps,
    1019 evaluations; the force first rises while the steps cross a flat region) and ends
    at the lattice minimum L-BFGS reaches (an independent-route check: the two share only
    the energy and its gradient)."""
    model = skyrme_faddeev_model(GRID, "sixth")
    near = minimise(model, start_field(), "lbfgs", StoppingRule(max_steps=3000, force_tol=1e-2, energy_tol=0.0))
    lbfgs = minimise(model, near.field, "lbfgs", StoppingRule(max_steps=3000, force_tol=1e-3, energy_tol=0.0))
    newton = minimise(model, near.field, "newton_krylov", StoppingRule(max_steps=120, force_tol=1e-4, energy_tol=0.0))
    assert newton.converged and newton.stopped_by == "force" and newton.max_force < 1e-4
    assert lbfgs.converged and lbfgs.stopped_by == "force"
    assert abs(newton.energy - lbfgs.energy) < 1e-8 * lbfgs.energy


def test_default_lbfgs_meets_the_force_rule_on_q1_and_q3():
    """The default minimiser (L-BFGS, memory 4, W with the scheme's own symbol) brings Q = 1
    and the axial(3,1) start of Q = 3 to the force rule with the energy rule off, keeping the
    charge (61^3, h = 0.2, box 12, sixth order; measured 975 and about 210 steps)."""
    from solitons.measure.topology import hopf_charge
    from solitons.relaxation.initial import initial_field

    rule = StoppingRule(max_steps=3000, force_tol=1e-3, energy_tol=0.0)
    q1 = minimise(skyrme_faddeev_model(GRID, "sixth"), start_field(), "lbfgs", rule)
    assert q1.converged and q1.stopped_by == "force" and abs(hopf_charge(q1.field, GRID) - 1) < 1e-3
    grid = Grid.centred(61, 0.2, "fixed")
    part = {"family": "axial", "a": 3, "b": 1, "size": 1.0, "centre": [0, 0, 0], "orientation": [0, 0, 0]}
    field = add_noise(initial_field(grid, part), grid, 0.02, 0)
    field = field * grid.free_mask() + np.array([0, 0, 1.0]) * (1 - grid.free_mask())
    q3 = minimise(skyrme_faddeev_model(grid, "sixth"), field, "lbfgs", rule)
    assert q3.converged and q3.stopped_by == "force" and q3.max_force < 1e-3
    assert abs(hopf_charge(q3.field, grid) - 3) < 2e-3
