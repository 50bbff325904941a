"""One relaxation from a validated RunSpec to result files: the edge where the pure core
(model, initial data, minimiser, topology, verdicts) meets files and the terminal."""

from __future__ import annotations

import contextlib
import datetime
import math
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass
from dataclasses import field as dataclass_field
from pathlib import Path
from typing import TextIO

import numpy as np

from solitons import __version__, interrupts
from solitons.assemble import (
    RunError,
    check_memory,
    field_from_result,
    make_grid,
    make_initial_field,
    make_model,
    make_terms,
)
from solitons.config import RunSpec
from solitons.io.locks import holding
from solitons.io.provenance import config_hash, physics_hash, provenance, run_hash, user_files
from solitons.io.results import (
    CHECKPOINT,
    RESULT,
    SUMMARY,
    XDMF,
    as_json,
    check_output_dir,
    prepare_output_dir,
    read_checkpoint,
    stale_temporaries,
    write_checkpoint,
    write_json,
    write_result,
    write_xdmf,
)
from solitons.judge.diagnose import Evidence, bounded_below_notice, decide, gather, snapshot
from solitons.judge.outcomes import Outcome
from solitons.lattice.grid import Grid
from solitons.measure.inertia import model_inertia
from solitons.measure.knots import solution_label
from solitons.measure.stability import lowest_modes, probe_density
from solitons.measure.topology import hopf_charge
from solitons.model.energy import Model
from solitons.record import Result
from solitons.relaxation.initial import add_noise, interpolate_field
from solitons.relaxation.minimise import History, StoppingRule, minimise
from solitons.reporting import Progress, continue_hint, describe_model, report, run_summary

# names other modules and tests reach through this one (their owners are imported above)
__all__ = ["CHECKPOINT", "RESULT", "SUMMARY", "XDMF", "RunError", "config_hash", "field_from_result", "make_grid",
           "make_model", "make_terms", "provenance", "relax", "relax_record", "report", "run_hash", "user_files"]


# Steps between the slower diagnostics kept in the history (virial, Hopf charge): each
# costs about one energy evaluation plus a few FFTs.
MONITOR_EVERY = 20  # and every 5 steps during the first 40


def coarse_stage(spec: RunSpec, grid: Grid, model: Model, rule: StoppingRule, stream):
    """Coarse-to-fine continuation: relax the initial data on the grid of spacing about 2h
    spanning the same box, interpolate, and hand the result to the fine relaxation.  The
    coarse result is discarded when it lost the charge (a coarse lattice lets knots unwind)
    or did not stay finite.  Returns (report, field or None)."""
    try:
        coarse_grid = grid.coarsened()
        coarse_model = Model(model.terms, coarse_grid, model.scheme, model.backend)
    except ValueError as error:
        return {"used": False, "reason": str(error)}, None
    if stream is not None:
        print(f"  coarse start on {'x'.join(map(str, coarse_grid.shape))}, h = {coarse_grid.spacing[0]:g}",
              file=stream, flush=True)
    start = time.perf_counter()
    result = minimise(coarse_model, make_initial_field(spec, coarse_grid), spec.relax.method, rule,
                      preconditioner=spec.relax.preconditioner, preconditioner_shift=spec.relax.preconditioner_shift,
                      should_stop=interrupts.stop_requested)
    if result.status == Outcome.INTERRUPTED:  # nothing of the fine run exists yet to checkpoint
        raise interrupts.Interrupted(interrupts.requested(), None, 0)
    charge = hopf_charge(result.field, coarse_grid)
    expected = spec.initial.expected_charge
    report = {"used": False, "grid": list(coarse_grid.shape), "spacing": list(coarse_grid.spacing),
              "steps": result.steps, "evaluations": result.evaluations, "status": result.status,
              "energy": result.energy, "hopf_charge": charge, "wall_seconds": time.perf_counter() - start}
    if result.status == Outcome.NON_FINITE:
        report["reason"] = "the energy became non-finite on the coarse grid"
        return report, None
    if abs(charge - expected) > 0.1 * max(1, abs(expected)):
        report["reason"] = f"the coarse grid changed the charge to {charge:.3f}"
        return report, None
    report["used"] = True
    return report, interpolate_field(result.field, coarse_grid, grid)


SADDLE_FORCE_FACTOR = 0.1  # both copies are relaxed to this fraction of force_tol ...
SADDLE_MAX_STEPS = 400     # ... for at most this many steps each


def saddle_check(model: Model, field: np.ndarray, energy: float, rule: StoppingRule, spec: RunSpec, stream) -> dict:
    """Relax two copies of a state reached from symmetric (noise-free) initial data under
    the same tighter rule (force below SADDLE_FORCE_FACTOR of the run's, at most
    SADDLE_MAX_STEPS steps): the state itself (the reference) and the state perturbed by
    seeded noise.  At a minimum both end at one energy; at a saddle the perturbed copy
    falls lower along the negative mode the symmetry hid (measured: the axial Q = 3 state,
    0.7-0.9 %).  Comparing with the reference, not with the state, keeps a state that the
    energy rule stopped early from passing for a saddle (seen: axial Q = 2 at h = 0.2,
    stopped at force 4e-3, whose perturbed copy relaxed 1.2e-4 lower).  Returns the record
    `diagnose.assess` reads."""
    noise = spec.relax.saddle_noise
    if stream is not None:
        print(f"  saddle check: relaxing the state and a copy perturbed by noise {noise:g} ...", file=stream, flush=True)
    start = time.perf_counter()
    tight = StoppingRule(SADDLE_MAX_STEPS, SADDLE_FORCE_FACTOR * rule.force_tol, rule.energy_tol, rule.patience)

    def relaxed(start_field):
        return minimise(model, start_field, spec.relax.method, tight, preconditioner=spec.relax.preconditioner,
                        preconditioner_shift=spec.relax.preconditioner_shift, should_stop=interrupts.stop_requested)

    reference = relaxed(field)
    if reference.status == Outcome.INTERRUPTED:
        return None
    copy = relaxed(add_noise(field, model.grid, noise, spec.initial.seed + 1))
    if copy.status == Outcome.INTERRUPTED:
        return None
    record = {"noise": noise, "energy": float(energy), "reference_energy": float(reference.energy),
              "perturbed_energy": float(copy.energy),
              "perturbed_hopf_charge": float(hopf_charge(copy.field, model.grid)),
              "steps": reference.steps + copy.steps, "wall_seconds": time.perf_counter() - start}
    if stream is not None:
        print(f"  saddle check: perturbed E = {copy.energy:.8f}, reference E = {reference.energy:.8f} "
              f"({record['steps']} steps)", file=stream, flush=True)
    return record


MONITOR_CHARGE_SPACING = 0.125  # the monitor's Hopf charge uses every s-th site while s h <= this


def monitor_charge(field, grid: Grid) -> float:
    """Hopf charge for the monitor: on every s-th site per axis, the largest s with
    s h <= MONITOR_CHARGE_SPACING (s = 1 on grids of h > 0.0625).  It only watches for
    unwinding (a jump of the charge by about one); the reported charge uses every site.
    At 128^3 the full-resolution FFTs cost about a second per call (measured)."""
    stride = max(1, int(MONITOR_CHARGE_SPACING / max(grid.spacing) + 1e-9))
    if stride == 1 or grid.boundary == "periodic":
        return hopf_charge(field, grid)
    field = np.asarray(field)[::stride, ::stride, ::stride]
    coarse = Grid(field.shape[:3], tuple(stride * h for h in grid.spacing), grid.origin, grid.boundary,
                  grid.stretch)
    return hopf_charge(field, coarse)


def monitor_values(model: Model, field) -> dict:
    """The slow diagnostics kept in the history every MONITOR_EVERY steps."""
    field = np.asarray(field)
    density, virial = model.density_and_virial(field)
    values = snapshot(field, model.grid, density)
    values["virial"] = virial["total"]
    values["hopf_charge"] = monitor_charge(field, model.grid)
    return values


_WARM: set = set()


def warm_up(model, field, stream) -> tuple[float, np.ndarray]:
    """The first evaluation of a run, returned (energy, gradient) for the finite-start
    check.  The first one in a process, announced, loads the route's compiled numba code
    from its disk cache or compiles it (a minute or two after an install or an upgrade) -
    without a word that pause looks like a hang."""
    key = (type(model.route).__name__, np.asarray(field).dtype.str)
    announce = key not in _WARM and stream is not None
    if announce:
        print(f"  evaluation route: {model.route.name}; loading or compiling its code ...", end="",
              file=stream, flush=True)
    begin = time.perf_counter()
    evaluation = model.evaluate(np.asarray(field))
    seconds = time.perf_counter() - begin
    _WARM.add(key)
    if announce:
        note = " (compiled; cached on disk for the next runs)" if seconds > 5.0 else ""
        print(f" {seconds:.1f} s{note}", file=stream, flush=True)
    return evaluation


def _utc_now() -> str:
    return datetime.datetime.now(datetime.UTC).isoformat(timespec="seconds")


def first_non_finite(model: Model, field) -> str:
    """Where a field's energy is first non-finite: the term and a site (index and
    position), from the per-term densities of the reference (jax) expression."""
    from solitons.model.energy import term_densities

    field = np.asarray(field)
    if not np.all(np.isfinite(field)):
        site = tuple(int(i) for i in np.argwhere(~np.all(np.isfinite(field), axis=-1))[0])
        return f"the field itself is non-finite at site {site}"
    densities = term_densities(field, model.spacing_array(), model.grid, model.terms, model.scheme)
    for term, density in zip(model.terms, densities):
        bad = np.argwhere(~np.isfinite(np.asarray(density)))
        if len(bad):
            site = tuple(int(i) for i in bad[0])
            position = model.grid.index_to_position(np.asarray(site, dtype=float))
            return (f"term {term.name!r} is non-finite at {len(bad)} sites, first at site {site} "
                    f"(x, y, z = {', '.join(f'{v:.4g}' for v in position)}), field there "
                    f"n = ({', '.join(f'{v:.4g}' for v in field[site])})")
    return "every term's density is finite, but the total or its gradient is not (an overflow in the sum)"


def _check_finite_start(model: Model, field, evaluation) -> None:
    energy, gradient = evaluation
    if math.isfinite(energy) and np.all(np.isfinite(gradient)):
        return
    raise RunError(f"the energy of the initial data is already non-finite (E = {energy}): "
                   f"{first_non_finite(model, field)}; nothing was relaxed or written")


@contextlib.contextmanager
def _naming_checkpoint(path: Path):
    """A second signal raises at once, from inside a step: name the last periodic
    checkpoint, if there is one, in the exception."""
    try:
        yield
    except interrupts.Interrupted as stop:
        if stop.checkpoint is None and path.exists():
            stop.checkpoint = path
        raise


def _segment(started: str, from_step: int, to_step: int, evaluations: int, seconds: float, ended: str) -> dict:
    return {"started": started, "from_step": int(from_step), "to_step": int(to_step),
            "evaluations": int(evaluations), "wall_seconds": float(seconds), "ended": str(ended)}


def relax(spec: RunSpec, out_dir: str | Path, resume: bool = False, overwrite: bool = False,
          stream: TextIO | None = sys.stderr, initial_field: np.ndarray | None = None,
          symmetric_start: bool | None = None) -> dict:
    """Relax the configuration of ``spec`` and write DIR/result.h5 and DIR/summary.json.
    Returns the summary dictionary (`relax_record` returns the whole record).  ``stream``
    receives progress (None: quiet); ``initial_field`` replaces the configured initial
    data (continuation in scans).  ``symmetric_start``: whether the start can be
    symmetric, so that a would-be stable state needs the saddle check (default: noise-free
    configured initial data; a caller that hands over a field derived from such data, as
    the continuum levels do, says so).

    DIR is locked for the run (`solitons.io.locks`): a second run into it meanwhile is
    refused at once with DirectoryInUse, naming the owner.
    Raises RunError (and writes nothing) when the run cannot start: output in the way,
    memory, a checkpoint of another configuration, non-finite initial data.  A SIGINT or
    SIGTERM (see solitons.interrupts) stops the relaxation after its current step, writes
    DIR/checkpoint.h5 with the minimiser's full state and raises `Interrupted`; resuming
    from it takes the same steps as a run never stopped.  The summary records every
    segment of a resumed run (``segments``); ``iterations``, ``evaluations`` and
    ``wall_seconds`` count all of them."""
    return relax_record(spec, out_dir, resume, overwrite, stream, initial_field, symmetric_start).summary


def relax_record(spec: RunSpec, out_dir: str | Path | None, resume: bool = False, overwrite: bool = False,
                 stream: TextIO | None = sys.stderr, initial_field: np.ndarray | None = None,
                 symmetric_start: bool | None = None) -> Result:
    """`relax`, returning the `Result` record (field, grid, energy density, history,
    summary, configuration).  With ``out_dir`` None nothing is written: no lock, no
    checkpoint, no result files (and nothing to resume)."""
    if out_dir is None:
        if resume:
            raise RunError("--resume needs an output directory holding the checkpoint")
        return _pipeline(spec, None, False, overwrite, stream, initial_field, symmetric_start)
    with holding(out_dir, stream):  # a second run into DIR meanwhile is refused (DirectoryInUse)
        return _pipeline(spec, Path(out_dir), resume, overwrite, stream, initial_field, symmetric_start)


def _pipeline(spec: RunSpec, out: Path | None, resume: bool, overwrite: bool, stream: TextIO | None,
              initial_field: np.ndarray | None, symmetric_start: bool | None) -> Result:
    """prepare (resume or start), relax, measure, judge, write."""
    if spec.grid.symmetry == "axial":
        from solitons.axial.run import relax_axial

        return relax_axial(spec, out, resume=resume, overwrite=overwrite, stream=stream)
    start = prepare(spec, out, resume, overwrite, initial_field, stream)
    result, coarse = relax_start(spec, start, initial_field, stream)
    symmetric = (spec.initial.noise == 0.0 and initial_field is None) if symmetric_start is None \
        else symmetric_start
    try:
        state = measure(spec, start, result, coarse, symmetric, stream)
        decision = decide(state.evidence)
        summary = run_summary(spec, start.model, start.grid, energies=state.energies, charge=state.charge,
                              initial_charge=start.initial_charge, curves=state.curves, virial=state.virial,
                              result=result, segments=start.segments, backend=start.model.route.name,
                              probe=start.probe, decision=decision, wall_seconds=state.wall_seconds,
                              coarse_stage=coarse, inertia=state.inertia)
        write(spec, out, start, result, state, summary)
    except interrupts.Interrupted as stop:  # during the diagnostics: keep the relaxed state for --resume
        if start.checkpoint_path is not None:
            start.segments.pop()  # the checkpoint's record writes this segment again, as interrupted
            start.checkpoint(result.field, result.steps, result.history, {"evaluations": result.evaluations},
                             "interrupted")
            stop.checkpoint, stop.step = start.checkpoint_path, result.steps
        raise
    history = result.history.as_arrays()
    return Result(as_json(summary), np.asarray(result.field), start.grid, state.density, history, spec.text, out)


@dataclass
class Start:
    """What a relaxation starts from (`prepare`): the grid and model, the initial field
    (or the checkpoint's), the state of a resumed run and the checkpoint writer."""

    grid: Grid
    model: Model
    field: np.ndarray
    initial_charge: float
    probe: dict
    rule: StoppingRule
    history: History | None = None
    step: int = 0
    saved_state: dict | None = None
    segments: list = dataclass_field(default_factory=list)
    checkpoint_path: Path | None = None
    checkpoint: Callable | None = None
    started: str = ""
    clock: float = 0.0
    resumed: bool = False


def prepare(spec: RunSpec, out: Path | None, resume: bool, overwrite: bool, initial_field, stream) -> Start:
    """Check the output directory, read the checkpoint of a resumed run or make the initial
    data, clear what --overwrite replaces, announce the run and evaluate its first state
    (which compiles the route's code on a first run)."""
    grid = make_grid(spec)
    check_memory(grid)
    model = make_model(spec, grid)
    checkpoint_path = out / CHECKPOINT if out is not None else None
    history, start_step, saved_state, segments = None, 0, None, []
    if out is not None:
        check_output_dir(out)
    if resume:
        if not checkpoint_path.exists():
            raise RunError(f"{checkpoint_path}: no checkpoint to resume from")
        saved = read_checkpoint(checkpoint_path)
        if physics_hash(saved["config"]) != physics_hash(spec.text):
            raise RunError(f"{checkpoint_path}: the checkpoint belongs to a different configuration "
                           "(grid, terms or initial data differ; only [relax] may change on resume)")
        field0 = saved["field"]
        history = History.from_arrays(saved["history"])
        start_step = saved["step"]
        saved_state = saved["state"]
        segments = list(saved["record"].get("segments", []))
        if segments and segments[-1]["ended"] == "running":  # a periodic checkpoint, then the process died
            segments[-1]["ended"] = "killed (steps after this checkpoint were redone)"
        if saved_state is not None and saved_state.get("method") != spec.relax.method:
            saved_state = None
    else:
        if out is not None and (out / RESULT).exists() and not overwrite:
            raise RunError(f"{out / RESULT} exists; pass --overwrite to replace it or --resume")
        if out is not None and checkpoint_path.exists() and not overwrite:
            raise RunError(f"{checkpoint_path} holds an unfinished run; pass --resume to continue it or "
                           "--overwrite to start again (which deletes it)")
        field0 = make_initial_field(spec, grid) if initial_field is None else np.asarray(initial_field)
        if field0.shape != grid.shape + (3,):
            raise RunError(f"initial field of shape {field0.shape} does not fit the grid {grid.shape}")
    if out is not None:
        prepare_output_dir(out)
        for stale in stale_temporaries(out):  # left by a killed process: never a complete file
            stale.unlink(missing_ok=True)
            if stream is not None:
                print(f"  removed {stale}, a half-written file left by an interrupted process", file=stream)
        if not resume:
            checkpoint_path.unlink(missing_ok=True)  # --overwrite: the old run's checkpoint goes too
    start = Start(grid, model, field0, hopf_charge(field0, grid), probe_density(model.terms),
                  spec.relax.stopping_rule(), history, start_step, saved_state, segments, checkpoint_path,
                  started=_utc_now(), resumed=resume)
    if out is not None:
        def checkpoint(field, step, hist, state, ended=None):
            ended = ended or ("interrupted" if interrupts.requested() is not None
                              else state.get("saved_at_stop") or "running")
            current = _segment(start.started, start_step, step, state.get("evaluations", 0),
                               time.perf_counter() - start.clock, ended)
            write_checkpoint(checkpoint_path, field, grid, step, hist.as_arrays(), spec.text, state,
                             {"segments": segments + [current]})

        start.checkpoint = checkpoint
    notice = bounded_below_notice(start.probe)
    if notice and stream is not None:
        print(notice, file=stream, flush=True)
    if stream is not None:
        print(f"relaxing Q = {spec.initial.expected_charge} ({spec.initial.description}) "
              f"on {grid.shape[0]}x{grid.shape[1]}x{grid.shape[2]}, "
              f"h = {grid.spacing}{' at the centre, stretch ' + str(grid.stretch) if grid.stretched else ''}, "
              f"box side {tuple(round(x, 4) for x in grid.side)}, {grid.boundary} boundary, "
              f"{spec.grid.scheme}-order scheme, method {spec.relax.method}",
              file=stream, flush=True)
        print(f"  model: {describe_model(model)}", file=stream, flush=True)
    _check_finite_start(model, field0, warm_up(model, field0, stream))
    start.clock = time.perf_counter()
    return start


def relax_start(spec: RunSpec, start: Start, initial_field, stream):
    """The coarse stage (a fresh run from configured data) and the minimiser.  Returns
    (MinimiseResult, coarse report or None); a signal raises `Interrupted` after the
    checkpoint."""
    relax_spec = spec.relax
    coarse, field0 = None, start.field
    with interrupts.deferred(), _naming_checkpoint(start.checkpoint_path):
        if relax_spec.coarse_start and not start.resumed and initial_field is None:
            coarse, coarse_field = coarse_stage(spec, start.grid, start.model, start.rule, stream)
            if coarse_field is not None:
                field0 = coarse_field
        result = minimise(
            start.model, field0, relax_spec.method, start.rule,
            time_step=relax_spec.time_step or None,
            history=start.history, start_step=start.step,
            progress=Progress(stream, relax_spec.progress_seconds),
            checkpoint=start.checkpoint, checkpoint_every=relax_spec.checkpoint_every,
            monitor=lambda f: monitor_values(start.model, f),
            monitor_every=MONITOR_EVERY,
            preconditioner=relax_spec.preconditioner,
            preconditioner_shift=relax_spec.preconditioner_shift,
            resume=start.saved_state,
            should_stop=interrupts.stop_requested,
        )
    if result.status == Outcome.INTERRUPTED:
        raise interrupts.Interrupted(interrupts.requested(), start.checkpoint_path, result.steps)
    start.segments.append(_segment(start.started, start.step, result.steps, result.evaluations,
                                   time.perf_counter() - start.clock, result.status))
    return result, coarse


@dataclass(frozen=True)
class Measured:
    """The relaxed state's measurements (`measure`)."""

    energies: dict
    virial: dict
    charge: float
    density: np.ndarray
    curves: dict
    evidence: Evidence
    wall_seconds: float
    inertia: dict


def measure(spec: RunSpec, start: Start, result, coarse: dict | None, symmetric: bool, stream) -> Measured:
    """Energies, virial, charge, density and curves of the relaxed state, the Hessian and
    the saddle check where asked for, gathered into the verdict's `Evidence`."""
    model, grid, rule = start.model, start.grid, start.rule
    field = result.field
    energies = model.energies(field)
    virial = model.virial(field)
    charge = hopf_charge(field, grid)
    density = model.energy_density(field)
    if not result.history.monitor_step or result.history.monitor_step[-1] != result.steps:
        # the final state's diagnostics, from the values just computed
        final = snapshot(field, grid, density)
        final.update(virial=virial["total"], hopf_charge=charge)
        result.history.append_monitor(result.steps, final)
    hessian = None
    if spec.relax.hessian_modes and result.converged:
        if stream is not None:
            print(f"  Hessian: lowest {spec.relax.hessian_modes} modes by Lanczos ...", file=stream, flush=True)
        hessian = lowest_modes(model, field, spec.relax.hessian_modes)
    curves = solution_label(field, grid, density=density)
    context = {
        "initial_charge": start.initial_charge, "largest_cell": grid.largest_cell() if grid.stretched else None,
        "coarse_discarded": coarse["reason"] if coarse is not None and not coarse["used"] else None,
        "stopped_by": result.stopped_by, "max_force": result.max_force, "force_tol": rule.force_tol,
        "energy_tol": rule.energy_tol, "patience": rule.patience, "open_chains": curves["open_chains"],
        "linking_charge": curves["linking_charge"]}

    def evidence_with(saddle=None):
        return gather(field, grid, density, charge, spec.initial.expected_charge, virial["total"], result.status,
                      result.history.as_arrays(), result.history.energy, start.probe["negative"], hessian, saddle,
                      **context)

    evidence = evidence_with()
    # only a state that would be called stable needs the evidence that it is no saddle
    if decide(evidence).verdict == Outcome.STABLE and spec.relax.saddle_check and symmetric:
        with interrupts.deferred():
            saddle = saddle_check(model, field, result.energy, rule, spec, stream)
        if saddle is None:  # interrupted (the caller checkpoints the relaxed state)
            raise interrupts.Interrupted(interrupts.requested())
        evidence = evidence_with(saddle)
    inertia = model_inertia(np.asarray(field), grid, density, model.terms)
    start.segments[-1]["wall_seconds"] = time.perf_counter() - start.clock  # diagnostics included
    return Measured(energies, virial, charge, density, curves, evidence,
                    sum(seg["wall_seconds"] for seg in start.segments), inertia)


def write(spec: RunSpec, out: Path | None, start: Start, result, state: Measured, summary: dict) -> None:
    """Check the final state is finite, then write result.h5, the XDMF sidecar and
    summary.json; keep the checkpoint of a run a rule stopped short of the force rule
    (``continue_with`` in the summary says how to go on)."""
    field, grid = result.field, start.grid
    if not (math.isfinite(summary["energy"]) and np.all(np.isfinite(state.density)) and np.all(np.isfinite(field))):
        raise RunError(f"the final state's energy is non-finite (E = {summary['energy']}): "
                       f"{first_non_finite(start.model, field)}; no result was written")
    if out is None:
        return
    write_result(out / RESULT, field, grid, state.density, summary, result.history.as_arrays(),
                 spec.text, __version__)
    write_xdmf(out / XDMF, out / RESULT, grid)
    checkpoint_path = start.checkpoint_path
    resumable = checkpoint_path.exists() and result.stopped_by in ("energy", "max_steps")
    if resumable:  # kept: --resume continues the run exactly, with more steps or a tighter rule
        summary["continue_with"] = continue_hint(result.stopped_by, start.rule, out)
    else:
        checkpoint_path.unlink(missing_ok=True)
    write_json(out / SUMMARY, summary)
