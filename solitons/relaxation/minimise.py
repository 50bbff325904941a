"""Minimisers on the product of spheres, each a small loop around one evaluation of the
energy and its tangent gradient (Model.evaluate or the jitted Model.value_and_grad).

* ``lbfgs``: limited-memory BFGS on the product of spheres (Nocedal & Wright, Numerical
  Optimization, 2nd ed., Alg. 7.4; directions from the compact form, Byrd, Nocedal &
  Schnabel 1994): the search direction is built from tangent gradients, a step moves along
  it and renormalises (retraction), stored pairs are transported by projection onto the
  new tangent planes, and a backtracking Armijo line search guards each step.  The initial
  inverse Hessian is gamma W with W = (-Delta_h + shift)^-1 (solitons.lattice.preconditioner), which
  makes the step count independent of the spacing (Q = 1: 1081 steps without it at
  h = 0.0625, about 50 with it at any h); ``preconditioner="none"`` gives W = 1 (the
  inverse site weight on a stretched grid).  The state lives in numpy arrays and every
  vector operation is one fused, threaded pass (solitons.lattice.fieldops); evaluations go
  through Model.evaluate (the numba kernel where it applies).  Memory 4 pairs by default.
* ``scipy_lbfgs``: scipy's L-BFGS-B on the unconstrained parametrisation n = u / |u|, kept
  as an independent reference implementation.
* ``arrested_newton``: second-order flow  d^2 n / dt^2 = force, force = -P(dE/dn) / s with
  s = NORMALISATION * cell volume (so the force is the Euler-Lagrange expression of the
  density); symplectic Euler with the velocity projected on the tangent plane, and the
  velocity set to zero whenever the energy rises (Battye & Sutcliffe, PRL 81 (1998) 4798
  describe this flow for Hopf solitons).
* ``gradient_flow``: dn/dt = force, explicit Euler and renormalisation, kept as the
  simplest reference.

Time steps of the flows.  Both are explicit, so a step is stable only below a limit set by
the stiffest mode of the lattice operator: for a mode of curvature lambda (force per unit
displacement) explicit Euler needs dt < 2 / lambda and symplectic Euler dt < 2 / sqrt(lambda)
(common practice; derived for x'' = -lambda x and x' = -lambda x).  lambda_max depends on the
scheme's stencil (the sixth-order symbol reaches 4.5 times the second-order one) and on the
model's stiffness in the core, so the default step is measured, not fixed: a power
iteration with Hessian-vector products from differences of the tangent force
(`largest_curvature`) gives lambda_max of the initial data, and the flows take half the
stability limit, dt = 1 / lambda_max (gradient flow) and dt = 1 / sqrt(lambda_max)
(arrested Newton).  A step is rejected, the last good state restored and dt halved when
it raises the energy by more than ``RISE_FACTOR`` (relative), or by more than
``KINETIC_FACTOR`` times the kinetic energy the flow
carried into it (a stable symplectic step can only turn kinetic into potential energy, so
from rest, or in gradient flow, any rise beyond rounding, ``ROUNDOFF_RISE``, is rejected:
there every stable mode descends), or when the energy becomes non-finite.  After ``MAX_HALVINGS`` halvings the run stops with
status ``numerical blow-up`` (or ``non-finite`` if the last failure was a non-finite energy),
never with a physics verdict.

Stopping rule (all methods): converged when the largest tangent force over the lattice,
max_x |P dE/dn| / s, is below ``force_tol``, or when the relative energy change per step has
stayed below ``energy_tol`` for ``patience`` consecutive steps; status ``runaway`` when the
energy falls below -``runaway`` times the magnitude of the first recorded energy.  A non-finite energy or
gradient stops the run at once and hands back the last finite state.
"""

from __future__ import annotations

import functools
import math
import time
from collections.abc import Callable
from dataclasses import dataclass
from dataclasses import field as dataclass_field

import jax
import jax.numpy as jnp
import numpy as np
import scipy.optimize

from solitons.judge.outcomes import Outcome
from solitons.model.energy import Model, normalise, project_tangent

METHODS = ("lbfgs", "newton_krylov", "arrested_newton", "gradient_flow", "scipy_lbfgs")
PRECONDITIONERS = ("laplacian", "laplacian_second", "none")

CONVERGED = Outcome.CONVERGED
MAX_STEPS = Outcome.MAX_STEPS
NON_FINITE = Outcome.NON_FINITE
RUNAWAY = Outcome.RUNAWAY
INTERRUPTED = Outcome.INTERRUPTED
BLOWUP = Outcome.NUMERICAL_BLOWUP

# Step guard of the flows (module docstring).
RISE_FACTOR = 0.05      # a step that raises E by more than this (relative) is rejected
KINETIC_FACTOR = 2.0    # ... or by more than this times the kinetic energy carried in
ROUNDOFF_RISE = 1e-12   # ... and any rise above rounding (relative) from rest
MAX_HALVINGS = 12       # then the run stops: numerical blow-up
CURVATURE_ITERATIONS = 30


@dataclass(frozen=True)
class StoppingRule:
    """When a relaxation stops: the force rule (largest tangent force below ``force_tol``),
    the energy rule (relative energy change below ``energy_tol`` for ``patience`` steps in a
    row), ``max_steps`` (all resumed segments together) and the runaway guard.  Built once
    per run (`solitons.config.RelaxSpec.stopping_rule`); it refuses values it cannot apply
    and `fired` names the rule that stopped a run, so no caller guesses it afterwards."""

    max_steps: int = 4000
    force_tol: float = 1e-3
    energy_tol: float = 1e-10
    patience: int = 20
    runaway: float = 10.0  # stop when E < -runaway * |E at the start|: energy running away

    def __post_init__(self) -> None:
        checks = {"max_steps": isinstance(self.max_steps, int) and self.max_steps >= 0,
                  "force_tol": math.isfinite(self.force_tol) and self.force_tol >= 0,
                  "energy_tol": math.isfinite(self.energy_tol) and self.energy_tol >= 0,
                  "patience": isinstance(self.patience, int) and self.patience >= 1,
                  "runaway": math.isfinite(self.runaway) and self.runaway > 0}
        for name, ok in checks.items():
            if not ok:
                raise ValueError(f"stopping rule: {name} = {getattr(self, name)!r} is not allowed")

    def fired(self, max_force: float, quiet_steps: int) -> str | None:
        """"force" or "energy" when that rule says stop (the force rule first), else None."""
        if max_force < self.force_tol:
            return FORCE_RULE
        if quiet_steps >= self.patience:
            return ENERGY_RULE
        return None


FORCE_RULE, ENERGY_RULE, STEP_LIMIT = "force", "energy", "max_steps"


@dataclass
class History:
    """Per-step record (step index, energy, largest tangent force, wall seconds) and, every
    few steps, the slower diagnostics with their steps: virial residual, Hopf charge,
    size (RMS radius of the energy), core thickness and boundary energy fraction."""

    step: list = dataclass_field(default_factory=list)
    energy: list = dataclass_field(default_factory=list)
    force: list = dataclass_field(default_factory=list)
    seconds: list = dataclass_field(default_factory=list)
    monitor_step: list = dataclass_field(default_factory=list)
    virial: list = dataclass_field(default_factory=list)
    hopf_charge: list = dataclass_field(default_factory=list)
    size: list = dataclass_field(default_factory=list)
    thickness: list = dataclass_field(default_factory=list)
    boundary_fraction: list = dataclass_field(default_factory=list)

    def append(self, step, energy, force, seconds):
        self.step.append(int(step))
        self.energy.append(float(energy))
        self.force.append(float(force))
        self.seconds.append(float(seconds))

    def append_monitor(self, step, values: dict):
        """values: virial, hopf_charge, size, thickness, boundary_fraction."""
        self.monitor_step.append(int(step))
        for key in ("virial", "hopf_charge", "size", "thickness", "boundary_fraction"):
            getattr(self, key).append(float(values[key]))

    def as_arrays(self) -> dict[str, np.ndarray]:
        return {k: np.asarray(v) for k, v in vars(self).items()}

    @classmethod
    def from_arrays(cls, arrays) -> History:
        return cls(**{k: list(np.asarray(arrays[k]).tolist()) for k in vars(cls()) if k in arrays})


@dataclass
class MinimiseResult:
    field: np.ndarray  # (Nx, Ny, Nz, 3), the last finite state
    status: str  # an Outcome: converged | max_steps | non-finite | runaway | interrupted
    steps: int  # total steps, including those of a resumed run
    evaluations: int  # value_and_grad calls in this call (a resumed run: since the resume)
    energy: float
    max_force: float
    history: History
    wall_seconds: float
    message: str = ""
    stopped_by: str | None = None  # "force", "energy" (converged) or "max_steps"; None otherwise
    rejected_steps: int = 0  # flows: trial steps rejected by the step guard (each halved dt)
    time_step: float | None = None  # flows: the step in use at the end (model lengths, or lengths^2)

    @property
    def converged(self) -> bool:
        return self.status == CONVERGED


class _Tracker:
    """Shared bookkeeping: history, stopping rule, progress, checkpoints."""

    def __init__(self, model, rule, history, start_step, progress, checkpoint, checkpoint_every,
                 monitor=None, monitor_every=0, resume=None, should_stop=None):
        self.should_stop = should_stop
        self.monitor = monitor
        self.monitor_every = monitor_every
        self.model = model
        self.rule = rule
        self.history = history if history is not None else History()
        self.step = start_step
        self.progress = progress
        self.checkpoint = checkpoint
        self.checkpoint_every = checkpoint_every
        self.quiet_steps = 0
        self.stopped_by = None
        self.rejected = 0  # flows: steps rejected by the step guard
        self.time_step = None  # flows: the step in use
        self.start = time.perf_counter()
        self.last_energy = self.history.energy[-1] if self.history.energy else None
        self.first_energy = self.history.energy[0] if self.history.energy else None
        self.offset = self.history.seconds[-1] if self.history.seconds else 0.0
        if resume is not None:  # the counter of quiet steps is not in the history
            self.quiet_steps = int(resume.get("quiet_steps", 0))

    def remaining(self, rule) -> int:
        """Steps left under max_steps, which counts the steps before a resume too."""
        return max(0, rule.max_steps - self.step)

    def save(self, field, state, final: bool = False) -> None:
        """Checkpoint the field, the history and the minimiser's state (``state()``: the
        arrays and numbers its loop carries between steps, plus this tracker's counter)."""
        if self.checkpoint is None:
            return
        values = dict(state()) if state is not None else {}
        values["quiet_steps"] = self.quiet_steps
        # the last step of a run a rule or max_steps stopped: how it ended (else "")
        values["saved_at_stop"] = (str(CONVERGED) if self.rule.fired(self.history.force[-1], self.quiet_steps)
                                   else str(MAX_STEPS)) if final else ""
        self.checkpoint(np.asarray(field), self.step, self.history, values)

    def record(self, field, energy, max_force, state=None) -> str | None:
        """Log one accepted step; return a status if the run should stop.  ``state``: a
        callable returning the minimiser's loop state, called only for a checkpoint."""
        self.step += 1
        elapsed = time.perf_counter() - self.start
        self.history.append(self.step, energy, max_force, self.offset + elapsed)
        if not (math.isfinite(energy) and math.isfinite(max_force)):
            return NON_FINITE
        if self.last_energy is not None:
            change = abs(energy - self.last_energy) / max(abs(energy), 1e-300)
            self.quiet_steps = self.quiet_steps + 1 if change < self.rule.energy_tol else 0
        if self.first_energy is None:
            self.first_energy = energy
        self.last_energy = energy
        if energy < -self.rule.runaway * abs(self.first_energy):
            return RUNAWAY
        if self.progress is not None:
            self.progress(self.step, energy, max_force, elapsed)
        if self.monitor is not None and self.monitor_every and (
                self.step % self.monitor_every == 0
                or (self.step < 2 * self.monitor_every and self.step % max(1, self.monitor_every // 4) == 0)):
            # denser early on, where collapse or unwinding can happen within a few steps
            self.history.append_monitor(self.step, self.monitor(field))
        if self.should_stop is not None and self.should_stop():  # e.g. SIGINT / SIGTERM: stop here, state saved
            self.save(field, state)
            return INTERRUPTED
        fired = self.rule.fired(max_force, self.quiet_steps)
        final = fired is not None or self.step >= self.rule.max_steps
        if self.checkpoint is not None and (final or (self.checkpoint_every and self.step % self.checkpoint_every == 0)):
            # the last step is always saved, so that a run stopped by a rule or by
            # max_steps continues exactly (given more steps or a tighter rule)
            self.save(field, state, final)
        if fired is not None:
            self.stopped_by = fired
            return CONVERGED
        if self.step >= self.rule.max_steps:
            self.stopped_by = STEP_LIMIT
        return None


def _max_force(model: Model, gradient) -> float:
    return float(jnp.max(jnp.linalg.norm(gradient / model.site_scale(), axis=-1)))


def minimise(
    model: Model,
    field0,
    method: str = "lbfgs",
    rule: StoppingRule = StoppingRule(),
    time_step: float | None = None,
    history: History | None = None,
    start_step: int = 0,
    progress: Callable | None = None,
    checkpoint: Callable | None = None,
    checkpoint_every: int = 0,
    lbfgs_memory: int = 4,
    monitor: Callable | None = None,
    monitor_every: int = 0,
    preconditioner: str = "laplacian",
    preconditioner_shift: float | None = None,
    resume: dict | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> MinimiseResult:
    """Relax ``field0`` (Nx, Ny, Nz, 3) with ``method``.

    time_step: for the flows, in units of the smallest spacing h (arrested Newton flow)
    or of h^2 (gradient flow); None (default): half the stability limit of the measured
    largest curvature (module docstring).  progress(step, energy,
    max_force, seconds) and checkpoint(field, step, history) are optional callbacks;
    monitor(field) -> dict (see History.append_monitor) is called every ``monitor_every`` steps and its
    values kept in the history.  preconditioner ("laplacian" or "none") and
    preconditioner_shift (1 / length^2, default solitons.lattice.preconditioner.SHIFT) set the
    initial inverse Hessian of ``lbfgs``; the other methods ignore them.

    checkpoint(field, step, history, state) receives, besides the field, the minimiser's
    loop state (``state``: arrays and numbers; "evaluations" counts this call's); handing that dict
    back as ``resume`` (with ``history`` and ``start_step``) continues the run exactly
    where it stopped: the same steps and energies as a run never stopped (lbfgs,
    arrested_newton, gradient_flow; scipy_lbfgs keeps its state inside scipy and restarts
    from the field).  ``should_stop()`` is asked after every step (the command passes
    `solitons.interrupts.stop_requested`, true once a SIGINT or SIGTERM arrived): when it
    says yes the run stops with status ``interrupted``, its state checkpointed.
    """
    if method not in METHODS:
        raise ValueError(f"unknown method {method!r}; choose from {METHODS}")
    if resume is not None and resume.get("method") != method:
        resume = None  # another method's state: start this one from the field
    tracker = _Tracker(model, rule, history, start_step, progress, checkpoint, checkpoint_every,
                       monitor, monitor_every, resume, should_stop)
    if monitor is not None and monitor_every and not tracker.history.monitor_step:
        tracker.history.append_monitor(start_step, monitor(jnp.asarray(field0)))
    start = time.perf_counter()
    runner = {"lbfgs": functools.partial(_lbfgs, preconditioner=preconditioner,
                                         preconditioner_shift=preconditioner_shift),
              "newton_krylov": functools.partial(_newton_krylov, preconditioner=preconditioner,
                                                 preconditioner_shift=preconditioner_shift),
              "arrested_newton": _arrested_newton, "gradient_flow": _gradient_flow, "scipy_lbfgs": _scipy_lbfgs}
    field, status, evaluations, message = runner[method](
        model, jnp.asarray(field0, dtype=jnp.float64), tracker, rule, time_step, lbfgs_memory, resume
    )
    final_energy, final_gradient = model.evaluate(np.asarray(field))
    return MinimiseResult(
        field=np.asarray(field),
        status=status,
        # (a resume with no steps left stops at once: still the step limit)
        stopped_by=(tracker.stopped_by or (STEP_LIMIT if status == MAX_STEPS and tracker.step >= rule.max_steps
                                           else None)) if status in (CONVERGED, MAX_STEPS) else None,
        rejected_steps=tracker.rejected,
        time_step=tracker.time_step,
        steps=tracker.step,
        evaluations=evaluations,
        energy=float(final_energy),
        max_force=float(np.max(np.linalg.norm(np.asarray(final_gradient) / model.site_scale(), axis=-1))),
        history=tracker.history,
        wall_seconds=time.perf_counter() - start,
        message=message,
    )


def largest_curvature(model: Model, field, iterations: int = CURVATURE_ITERATIONS, seed: int = 0) -> float:
    """Estimate of lambda_max, the largest curvature of the energy along the product of
    spheres in force units (the largest eigenvalue of the Jacobian of the force
    -P(dE/dn) / s at ``field``): power iteration on Hessian-vector products taken as
    differences of the tangent force along the retraction (which also carries the sphere's
    curvature term -(n . dE/dn) v).  The start is a seeded random tangent field times the
    checkerboard (-1)^(i+j+k), the top of the lattice spectrum.  Costs ``iterations`` + 1
    evaluations; the Rayleigh quotient approaches lambda_max from below."""
    field = np.asarray(field, dtype=np.float64)
    scale = model.site_scale()
    mask = model.grid.free_mask()
    rng = np.random.default_rng(seed)
    index = np.indices(field.shape[:-1]).sum(axis=0)
    vector = rng.standard_normal(field.shape) * np.where(index % 2 == 0, 1.0, -1.0)[..., None] * mask
    _, gradient = model.evaluate(field)
    base = np.asarray(gradient) / scale
    estimate = 0.0
    for _ in range(iterations):
        vector = vector - np.sum(vector * field, axis=-1, keepdims=True) * field
        largest = float(np.max(np.linalg.norm(vector, axis=-1)))
        if not largest > 0:
            return estimate
        vector = vector / largest
        epsilon = 1e-6
        moved = field + epsilon * vector
        moved /= np.linalg.norm(moved, axis=-1, keepdims=True)
        _, gradient = model.evaluate(moved)
        product = (np.asarray(gradient) / scale - base) / epsilon
        product = (product - np.sum(product * field, axis=-1, keepdims=True) * field) * mask
        if not np.all(np.isfinite(product)):
            return estimate
        estimate = float(np.sum(vector * product) / np.sum(vector * vector))
        vector = product
    return abs(estimate)


def flow_time_step(model: Model, field, method: str, time_step: float | None) -> float:
    """The flow's step in model units: ``time_step`` times h (arrested Newton) or h^2
    (gradient flow) when given, else half the stability limit of the measured lambda_max
    (module docstring)."""
    h = min(model.grid.spacing)
    if time_step:
        return time_step * (h if method == "arrested_newton" else h * h)
    curvature = largest_curvature(model, field)
    if not curvature > 0:  # a flat start (no force anywhere): the former fixed defaults
        return 0.07 * h if method == "arrested_newton" else 0.01 * h * h
    return 1.0 / math.sqrt(curvature) if method == "arrested_newton" else 1.0 / curvature


def _rejected(new_value: float, value: float, kinetic: float = 0.0) -> bool:
    """The step guard: a non-finite energy, a rise above RISE_FACTOR (relative), or a rise
    above KINETIC_FACTOR times the kinetic energy carried into the step plus rounding
    (from rest: any rise)."""
    if not math.isfinite(new_value):
        return True
    rise = new_value - value
    return rise > RISE_FACTOR * abs(value) or rise > KINETIC_FACTOR * kinetic + ROUNDOFF_RISE * abs(value)


def _give_up(tracker, field, last_value) -> tuple:
    """After MAX_HALVINGS: non-finite if the last failed trial was, else numerical blow-up."""
    if not math.isfinite(last_value):
        tracker.record(field, float("nan"), float("nan"))
        return NON_FINITE, "energy or force became non-finite at every step size tried"
    return BLOWUP, (f"numerical blow-up: {MAX_HALVINGS} halvings of the time step did not give a step that "
                    "lowers the energy (the flow is unstable at this spacing; this is not physics)")


def _arrested_newton(model, field, tracker, rule, time_step, _memory, resume=None):
    scale = jnp.asarray(model.site_scale())  # per site on stretched grids: force per unit volume
    step_fn = _anf_step_fn(model)
    if resume is None:
        dt = flow_time_step(model, field, "arrested_newton", time_step)
        velocity = jnp.zeros_like(field)
        value, grad = model.value_and_grad(field)
        evaluations, halvings, at_rest = 1 + (0 if time_step else CURVATURE_ITERATIONS + 1), 0, True
    else:
        velocity, grad = jnp.asarray(resume["velocity"]), jnp.asarray(resume["gradient"])
        value, evaluations = float(resume["value"]), 0
        dt, halvings, at_rest = float(resume["dt"]), int(resume["halvings"]), bool(resume["at_rest"])
        tracker.rejected = int(resume.get("rejected", 0))
    tracker.time_step = dt

    def state():
        return {"method": "arrested_newton", "velocity": np.asarray(velocity), "gradient": np.asarray(grad),
                "value": float(value), "evaluations": evaluations, "dt": dt, "halvings": halvings,
                "at_rest": at_rest, "rejected": tracker.rejected}

    while tracker.step < rule.max_steps:
        new_field, new_velocity, new_value, new_grad, max_force, kinetic = step_fn(field, velocity, grad, scale, dt)
        evaluations += 1
        new_value = float(new_value)
        if _rejected(new_value, float(value), 0.0 if at_rest else float(kinetic)) or not math.isfinite(float(max_force)):
            tracker.rejected += 1
            halvings += 1
            if halvings > MAX_HALVINGS:
                status, message = _give_up(tracker, field, new_value if math.isfinite(float(max_force)) else np.nan)
                return field, status, evaluations, message
            dt *= 0.5  # back to the last good state, from rest
            tracker.time_step = dt
            velocity, at_rest = jnp.zeros_like(velocity), True
            continue
        at_rest = new_value > float(value)
        if at_rest:
            new_velocity = jnp.zeros_like(new_velocity)  # arrest
        field, velocity, value, grad = new_field, new_velocity, new_value, new_grad
        status = tracker.record(field, value, float(max_force), state)
        if status:
            return field, status, evaluations, ""
    return field, MAX_STEPS, evaluations, f"stopped after max_steps={rule.max_steps}"


def _anf_step_fn(model):
    @jax.jit
    def step(field, velocity, grad, scale, dt):
        # kinetic energy carried into the step (site masses: the force scale, so that
        # force = -gradient / mass); half-step velocity, in energy units
        kinetic = 0.5 * jnp.sum(scale * jnp.sum(velocity * velocity, axis=-1, keepdims=True))
        velocity = velocity - dt * grad / scale
        new_field = normalise(field + dt * velocity)
        velocity = project_tangent(new_field, velocity)
        value, new_grad = model.value_and_grad(new_field)
        max_force = jnp.max(jnp.linalg.norm(new_grad / scale, axis=-1))
        return new_field, velocity, value, new_grad, max_force, kinetic

    return step


def _gradient_flow(model, field, tracker, rule, time_step, _memory, resume=None):
    scale = jnp.asarray(model.site_scale())

    @jax.jit
    def step(field, grad, scale, dt):
        new_field = normalise(field - dt * grad / scale)
        value, new_grad = model.value_and_grad(new_field)
        return new_field, value, new_grad, jnp.max(jnp.linalg.norm(new_grad / scale, axis=-1))

    if resume is None:
        dt = flow_time_step(model, field, "gradient_flow", time_step)
        value, grad = model.value_and_grad(field)
        value = float(value)
        evaluations, halvings = 1 + (0 if time_step else CURVATURE_ITERATIONS + 1), 0
    else:
        grad, evaluations = jnp.asarray(resume["gradient"]), 0
        value, dt, halvings = float(resume["value"]), float(resume["dt"]), int(resume["halvings"])
        tracker.rejected = int(resume.get("rejected", 0))
    tracker.time_step = dt

    def state():
        return {"method": "gradient_flow", "gradient": np.asarray(grad), "value": value, "dt": dt,
                "halvings": halvings, "rejected": tracker.rejected, "evaluations": evaluations}

    while tracker.step < rule.max_steps:
        new_field, new_value, new_grad, max_force = step(field, grad, scale, dt)
        evaluations += 1
        new_value = float(new_value)
        if _rejected(new_value, value) or not math.isfinite(float(max_force)):
            tracker.rejected += 1
            halvings += 1
            if halvings > MAX_HALVINGS:
                status, message = _give_up(tracker, field, new_value if math.isfinite(float(max_force)) else np.nan)
                return field, status, evaluations, message
            dt *= 0.5
            tracker.time_step = dt
            continue
        field, grad, value = new_field, new_grad, new_value
        status = tracker.record(field, value, float(max_force), state)
        if status:
            return field, status, evaluations, ""
    return field, MAX_STEPS, evaluations, f"stopped after max_steps={rule.max_steps}"


def preconditioner_operator(model, preconditioner: str, shift: float | None):
    """W of `lbfgs` and `newton_krylov`: None for "none"; the model's own when it brings one
    (the axial half plane: `solitons.axial.model.AxialPreconditioner`); else the shifted
    Laplacian with the scheme's own symbol ("laplacian") or the second-order one
    ("laplacian_second", the former W)."""
    from solitons.lattice.preconditioner import SHIFT, LaplacianPreconditioner

    if preconditioner not in PRECONDITIONERS:
        raise ValueError(f"unknown preconditioner {preconditioner!r}; choose from {PRECONDITIONERS}")
    if preconditioner == "none":
        return None
    shift = SHIFT if shift is None else shift
    make = getattr(model, "preconditioner", None)
    if make is not None:
        return make(shift)
    return LaplacianPreconditioner(model.grid, shift, model.stencil.taps if preconditioner == "laplacian" else None)


# Truncated Newton (newton_krylov): inner conjugate-gradient iterations at most, forcing
# term at most, largest site displacement of one step (radians on S^2).
NEWTON_MAX_CG = 100
NEWTON_MAX_FORCING = 0.5
NEWTON_MAX_SITE_STEP = 0.3


def _newton_krylov(model, field, tracker, rule, _time_step, _memory, resume=None, preconditioner="laplacian",
                   preconditioner_shift=None):
    """Truncated (inexact) Newton on the product of spheres: each step solves H p = -g
    approximately by preconditioned conjugate gradients (Nocedal & Wright, Numerical
    Optimization, 2nd ed., Alg. 7.1, line-search Newton-CG), with Hessian-vector products
    from differences of the tangent gradient along the retraction (which carry the
    sphere's curvature term), the forcing term eta = min(1/2, sqrt(|g| / |g_0|)) (Eisenstat &
    Walker's choice, quadratic-like convergence near the minimum), CG stopped at negative
    curvature, the same preconditioner W as L-BFGS, and a backtracking Armijo search on the
    retracted step.  Zero modes (translations, rotations of the whole soliton) cost nothing:
    the gradient has no component along them, so CG never builds one.  The loop carries
    only the point, so a resume from the checkpoint is exact."""

    shape = field.shape
    sites = int(np.prod(shape[:-1]))
    scale = model.site_scale()
    mask = np.asarray(model.grid.free_mask(), dtype=np.float64)
    field = np.array(field, dtype=np.float64)
    operator = preconditioner_operator(model, preconditioner, preconditioner_shift)
    work = np.empty((sites, 3))
    weights = 1.0 / model.grid.site_weights()[..., None] if model.grid.stretched else None

    def tangent(vectors, at):
        return (vectors - np.sum(vectors * at, axis=-1, keepdims=True) * at) * mask

    def precondition(residual):
        if operator is None:
            return residual * weights if weights is not None else residual.copy()
        return tangent(operator.apply(residual.reshape(sites, 3), work).reshape(shape).copy(), field)

    def force(gradient):
        return float(np.max(np.linalg.norm(gradient / scale, axis=-1)))

    if resume is None:
        value, gradient = model.evaluate(field)
        value, gradient = float(value), np.array(gradient)
        evaluations = 1
        first_norm = float(np.linalg.norm(gradient))
    else:
        value, gradient = float(resume["value"]), np.array(resume["gradient"], dtype=np.float64)
        evaluations, first_norm = 0, float(resume["first_norm"])

    def state():
        return {"method": "newton_krylov", "value": value, "gradient": gradient, "first_norm": first_norm,
                "evaluations": evaluations}

    def hessian_times(vector):
        nonlocal evaluations
        epsilon = 1e-6 / max(float(np.max(np.linalg.norm(vector, axis=-1))), 1e-300)
        moved = field + epsilon * vector
        moved /= np.linalg.norm(moved, axis=-1, keepdims=True)
        _, moved_gradient = model.evaluate(moved)
        evaluations += 1
        return tangent((np.asarray(moved_gradient) - gradient) / epsilon, field)

    def newton_direction():
        """Approximate solution of H p = -g by PCG; -W g when the first direction already
        has non-positive curvature."""
        g_norm = float(np.linalg.norm(gradient))
        forcing = min(NEWTON_MAX_FORCING, math.sqrt(g_norm / max(first_norm, 1e-300)))
        solution = np.zeros_like(gradient)
        residual = -gradient
        z = precondition(residual)
        direction = z.copy()
        rz = float(np.sum(residual * z))
        for iteration in range(NEWTON_MAX_CG):
            product = hessian_times(direction)
            curvature = float(np.sum(direction * product))
            if not curvature > 0:
                return z if iteration == 0 else solution
            alpha = rz / curvature
            solution += alpha * direction
            residual -= alpha * product
            if float(np.linalg.norm(residual)) <= forcing * g_norm:
                break
            z = precondition(residual)
            rz_new = float(np.sum(residual * z))
            direction = z + (rz_new / rz) * direction
            rz = rz_new
        return solution

    while tracker.step < rule.max_steps:
        step = newton_direction()
        slope = float(np.sum(gradient * step))
        if not slope < 0:  # rounding level: the direction no longer descends
            step = precondition(-gradient)
            slope = float(np.sum(gradient * step))
        largest = float(np.max(np.linalg.norm(step, axis=-1)))
        alpha = min(1.0, NEWTON_MAX_SITE_STEP / max(largest, 1e-300))
        accepted = saw_non_finite = False
        for _ in range(30):
            trial = field + alpha * step
            trial /= np.linalg.norm(trial, axis=-1, keepdims=True)
            new_value, new_gradient = model.evaluate(trial)
            new_value = float(new_value)
            evaluations += 1
            if math.isfinite(new_value) and new_value <= value + 1e-4 * alpha * slope:
                accepted = True
                break
            saw_non_finite |= not math.isfinite(new_value)
            alpha *= 0.5 if math.isfinite(new_value) else 0.1
        if not accepted:
            if saw_non_finite:
                tracker.record(field, float("nan"), float("nan"))
                return field, NON_FINITE, evaluations, "energy became non-finite"
            return field, MAX_STEPS, evaluations, "line search failed (rounding-error level reached)"
        field, value, gradient = trial, new_value, np.array(new_gradient)
        status = tracker.record(field, value, force(gradient), state)
        if status:
            return field, status, evaluations, ""
    return field, MAX_STEPS, evaluations, f"stopped after max_steps={rule.max_steps}"


def _scipy_lbfgs(model, field, tracker, rule, _time_step, memory, _resume=None):
    shape = field.shape
    scale = model.force_scale()
    site_scale = jnp.asarray(model.site_scale())

    @jax.jit
    def value_and_grad_u(u, site_scale):
        # d/du E(u / |u|) = P_n(dE/dn) / |u|: one evaluation gives both the objective's
        # gradient and the tangent force used by the stopping rule.
        length = jnp.linalg.norm(u, axis=-1, keepdims=True)
        n = u / length
        value, tangent = model.value_and_grad(n)
        max_force = jnp.max(jnp.linalg.norm(tangent / site_scale, axis=-1))
        return value, tangent / length, max_force, n

    state = {"evaluations": 0, "last_finite": field, "status": None, "max_force": np.inf}

    def fun(flat):
        u = jnp.asarray(flat.reshape(shape))
        value, grad, max_force, n = value_and_grad_u(u, site_scale)
        state["evaluations"] += 1
        value = float(value)
        if not math.isfinite(value):
            state["status"] = NON_FINITE
            raise StopIteration
        state["max_force"] = float(max_force)
        state["current"] = n
        return value / scale, np.asarray(grad, dtype=np.float64).ravel() / scale

    def callback(intermediate_result):
        n = state["current"]
        state["last_finite"] = n
        status = tracker.record(n, float(intermediate_result.fun) * scale, state["max_force"])
        if status:
            state["status"] = status
            raise StopIteration

    # Scaling by 1/s puts the objective in Euler-Lagrange units, so scipy's internal
    # tolerances (switched off here; ours decide) and line search see O(1) numbers.
    try:
        scipy.optimize.minimize(
            fun,
            np.asarray(field, dtype=np.float64).ravel(),
            jac=True,
            method="L-BFGS-B",
            callback=callback,
            options={"maxiter": tracker.remaining(rule), "maxcor": memory, "ftol": 0.0, "gtol": 0.0,
                     "maxls": 40, "maxfun": 10 * rule.max_steps},
        )
    except StopIteration:  # older scipy versions propagate it from fun
        pass
    field = state["last_finite"]
    status = state["status"]
    if status is None:
        status = MAX_STEPS
    message = {MAX_STEPS: "stopped before the stopping rule was met (step or line-search limit)",
               NON_FINITE: "energy became non-finite"}.get(status, "")
    return field, status, state["evaluations"], message


# Precision of the stored L-BFGS pairs.  float32 halves the traffic of the two history
# passes (every dot product entering the direction is taken of the stored values, in
# float64), but Q = 1 on 64^3 then took 507 steps instead of 463; analysis/bench_relax.py
# compares both (--history-dtype).
HISTORY_DTYPE = np.float64


def _lbfgs(model, field, tracker, rule, _time_step, memory, resume=None, preconditioner="laplacian",
           preconditioner_shift=None):
    """Numpy state with the fused passes of solitons.lattice.fieldops; one evaluation per trial
    point through Model.evaluate (the numba kernel where it applies, jax otherwise).
    Directions from the compact form of L-BFGS (two passes over the history per step) with
    the initial inverse Hessian gamma W: W the shifted-Laplacian preconditioner
    (solitons.lattice.preconditioner; two applications per step, W g and W y) or, with
    preconditioner "none", the inverse site weight (1 on a uniform grid)."""
    from solitons.lattice import fieldops

    scale = model.force_scale()
    inv_scale = 1.0 / scale
    shape = field.shape
    sites = int(np.prod(shape[:-1]))
    mask = np.ascontiguousarray(model.grid.free_mask().reshape(sites), dtype=np.float64)
    field = np.array(field, dtype=np.float64).reshape(sites, 3)
    s_hist = np.empty((memory, sites, 3), dtype=HISTORY_DTYPE)
    y_hist = np.empty((memory, sites, 3), dtype=HISTORY_DTYPE)  # W y when preconditioned
    s_flat, y_flat = s_hist.reshape(memory, 3 * sites), y_hist.reshape(memory, 3 * sites)
    sy = np.zeros((memory, memory))  # sy[i, j] = s_i . y_j, yy[i, j] = y_i . W y_j, by slot
    yy = np.zeros((memory, memory))
    order: list[int] = []  # history slots, oldest first
    step, trial_field = np.empty((sites, 3)), np.empty((sites, 3))
    spare = np.empty((sites, 3))  # the trial gradient; swapped with the current one on acceptance
    weights = np.zeros(0)  # diagonal W: stretched grids use per-site 1 / (dx/dxi product), the volume metric
    weights3 = np.zeros(0)
    operator = preconditioner_operator(model, preconditioner, preconditioner_shift)
    if operator is not None:
        w_gradient = np.empty((sites, 3))  # W g of the current point
        # the newest accepted y and a scratch pair buffer (y_hist holds W y)
        y_buffers = [np.empty((sites, 3), dtype=HISTORY_DTYPE), np.empty((sites, 3), dtype=HISTORY_DTYPE)]
    if model.grid.stretched:
        weights = np.ascontiguousarray(1.0 / model.grid.site_weights().reshape(sites))
        if operator is None:
            weights3 = np.repeat(weights, 3)
    newest_y = None  # flat view of the newest y

    def force(gradient):
        if not weights.shape[0]:
            return fieldops.max_norm(gradient) * inv_scale
        return fieldops.max_weighted_norm(gradient, weights) * inv_scale

    def evaluate(values, out):
        energy, grad = model.evaluate(values.reshape(shape), out.reshape(shape))
        return float(energy), out

    def preconditioned(gradient):
        """W g, flat (g itself when W is diagonal or 1: compact_direction applies it)."""
        if operator is None:
            return gradient.reshape(-1)
        return operator.apply(gradient, w_gradient).reshape(-1)

    def direction(gradient, base):
        """-P(H g / scale) into ``step`` from g and base = `preconditioned`(g): (largest site
        step, slope g . step)."""
        slots = np.asarray(order, dtype=np.int64)
        flat_gradient, flat_field, flat_step = gradient.reshape(-1), field.reshape(-1), step.reshape(-1)
        if not order:
            return fieldops.compact_direction(flat_field, flat_gradient, base, inv_scale, 1.0, s_flat, y_flat, slots,
                                              np.zeros(0), np.zeros(0), weights3, mask, flat_step)
        newest = order[-1]
        dots = fieldops.history_dots(flat_gradient, s_flat, y_flat, newest_y, slots, weights3)
        sy[slots, newest] = dots[2]
        yy[slots, newest] = yy[newest, slots] = dots[3]
        gamma = sy[newest, newest] / yy[newest, newest]
        p_coef, q_coef = fieldops.compact_coefficients(inv_scale * dots[0], inv_scale * dots[1],
                                                       sy[np.ix_(slots, slots)], yy[np.ix_(slots, slots)], gamma)
        return fieldops.compact_direction(flat_field, flat_gradient, base, inv_scale, gamma, s_flat, y_flat, slots,
                                          p_coef, q_coef, weights3, mask, flat_step)

    if resume is not None and int(resume["memory"]) != memory:
        resume = None  # another history length: start from the field (still a valid run)
    if resume is None:
        value, gradient = evaluate(field, np.empty((sites, 3)))
        evaluations = 1
    else:  # the loop state as it was after the last accepted step (see `state`)
        value, evaluations = float(resume["value"]), 0
        gradient = np.array(resume["gradient"], dtype=np.float64).reshape(sites, 3)
        s_hist[...], y_hist[...] = resume["s_hist"], resume["y_hist"]
        sy[...], yy[...] = resume["sy"], resume["yy"]
        order = [int(k) for k in np.asarray(resume["order"]).ravel()]
        if order and operator is not None:
            y_buffers[0][...] = np.asarray(resume["newest_y"]).reshape(sites, 3)
            newest_y = y_buffers[0].reshape(-1)
        elif order:
            newest_y = y_hist[order[-1]].reshape(-1)

    def state():
        """Everything the loop carries from one step to the next: with it a resumed run
        takes the same steps as one never stopped."""
        return {"method": "lbfgs", "memory": memory, "value": value, "gradient": gradient.reshape(shape),
                "s_hist": s_hist, "y_hist": y_hist, "sy": sy, "yy": yy, "order": np.asarray(order, dtype=np.int64),
                "newest_y": (np.zeros(0) if newest_y is None or operator is None else newest_y.reshape(shape)),
                "evaluations": evaluations}

    h = min(model.grid.spacing)
    for _ in range(tracker.remaining(rule)):
        base = preconditioned(gradient)
        largest, slope = direction(gradient, base)
        if not slope < 0:  # not a descent direction: restart from (preconditioned) steepest descent
            order = []
            largest, slope = direction(gradient, base)
        alpha = 1.0
        if not order:  # no curvature known: move no site by more than a tenth of h
            alpha = min(1.0, 0.1 * h / max(largest, 1e-300))
        accepted = False
        saw_non_finite = False
        for _ in range(30):
            fieldops.retract(field, step, alpha, trial_field)
            new_value, new_gradient = evaluate(trial_field, spare)
            evaluations += 1
            if math.isfinite(new_value) and new_value <= value + 1e-4 * alpha * slope:
                accepted = True
                break
            saw_non_finite |= not math.isfinite(new_value)
            alpha *= 0.5 if math.isfinite(new_value) else 0.1
        max_force = force(new_gradient)
        if not accepted:
            if saw_non_finite:  # the line search was stopped by a region of non-finite energy
                tracker.record(field.reshape(shape), float("nan"), float("nan"))
                return field.reshape(shape), NON_FINITE, evaluations, "energy became non-finite"
            return field.reshape(shape), MAX_STEPS, evaluations, "line search failed (rounding-error level reached)"
        slot = next(k for k in range(memory) if k not in order) if len(order) < memory else order[0]
        y_out = y_hist[slot] if operator is None else y_buffers[1]
        pair_sy, pair_ss, pair_yy = fieldops.curvature_pair(trial_field, step, alpha, gradient, new_gradient, mask,
                                                            inv_scale, s_hist[slot], y_out)
        order = [k for k in order if k != slot]  # the slot is overwritten either way
        if pair_sy > 1e-12 * math.sqrt(pair_ss * pair_yy):
            order.append(slot)
            newest_y = y_out.reshape(-1)
            if operator is not None:
                operator.apply(y_out, y_hist[slot])
                y_buffers.reverse()
        field, trial_field = trial_field, field
        spare = gradient
        value, gradient = new_value, new_gradient
        status = tracker.record(field.reshape(shape), value, float(max_force), state)
        if status:
            return field.reshape(shape), status, evaluations, ""
    return field.reshape(shape), MAX_STEPS, evaluations, f"stopped after max_steps={rule.max_steps}"
