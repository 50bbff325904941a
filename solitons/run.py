"""One relaxation from a validated RunSpec to result files: the edge where the pure core
(model, initial data, minimiser, topology, verdicts) meets files and the terminal."""

from __future__ import annotations

import contextlib
import datetime
import math
import sys
import time
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
    NORMALISATION_TEXT,
    RESULT,
    SUMMARY,
    XDMF,
    check_output_dir,
    prepare_output_dir,
    read_checkpoint,
    stale_temporaries,
    write_checkpoint,
    write_json,
    write_result,
    write_xdmf,
)
from solitons.judge.diagnose import assess, snapshot, stopping_record
from solitons.judge.outcomes import Outcome
from solitons.lattice.grid import Grid
from solitons.measure.knots import solution_label
from solitons.measure.stability import lowest_modes, probe_density
from solitons.measure.topology import hopf_charge
from solitons.model.energy import Model, kernel_couplings
from solitons.relaxation.initial import add_noise, interpolate_field
from solitons.relaxation.minimise import History, StoppingRule, minimise
from solitons.reporting import Progress, continue_hint, curve_summary, describe_model, report

# names other modules and tests reach through this one (their owners are imported above)
__all__ = ["CHECKPOINT", "RESULT", "SUMMARY", "XDMF", "RunError", "config_hash", "field_from_result", "make_grid",
           "make_model", "make_terms", "provenance", "relax", "report", "run_hash", "user_files"]


# Relative tolerance of the check of the initial data's charge against its family formula.
CHARGE_CHECK = 0.02

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


# model lengths: wider border cells on a stretched grid are warned about (analysis/
# stretched_grid_study.txt: Q = 1 held with cells up to 5.3 wide, unwound with 17.4)
STRETCH_CELL_LIMIT = 8.0
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
    Returns the summary dictionary.  ``stream`` receives progress (None: quiet);
    ``initial_field`` replaces the configured initial data (continuation in scans).
    ``symmetric_start``: whether the start can be symmetric, so that a would-be stable
    state needs the saddle check (default: noise-free configured initial data; a caller
    that hands over a field derived from such data, as the continuum levels do, says so).

    DIR is locked for the run (`solitons.io.locks`): a second run into it meanwhile is
    refused at once with DirectoryInUse, naming the owner.
    Raises RunError (and writes nothing) when the run cannot start: output in the way,
    memory, a checkpoint of another configuration, non-finite initial data.  A SIGINT or
    SIGTERM (see solitons.interrupts) stops the relaxation after its current step, writes
    DIR/checkpoint.h5 with the minimiser's full state and raises `Interrupted`; resuming
    from it takes the same steps as a run never stopped.  The summary records every
    segment of a resumed run (``segments``); ``iterations``, ``evaluations`` and
    ``wall_seconds`` count all of them."""
    with holding(out_dir, stream):  # a second run into DIR meanwhile is refused (DirectoryInUse)
        if spec.grid.symmetry == "axial":
            from solitons.axial.run import relax_axial

            return relax_axial(spec, out_dir, resume=resume, overwrite=overwrite, stream=stream)
        return _relax(spec, out_dir, resume, overwrite, stream, initial_field, symmetric_start)


def _relax(spec: RunSpec, out_dir: str | Path, resume: bool, overwrite: bool, stream: TextIO | None,
           initial_field: np.ndarray | None, symmetric_start: bool | None) -> dict:
    """`relax` inside the directory's lock."""
    out = Path(out_dir)
    grid = make_grid(spec)
    check_memory(grid)
    model = make_model(spec, grid)
    checkpoint_path = out / CHECKPOINT
    history, start_step, saved_state, segments = None, 0, None, []
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
        if (out / RESULT).exists() and not overwrite:
            raise RunError(f"{out / RESULT} exists; pass --overwrite to replace it or --resume")
        if checkpoint_path.exists() and not overwrite:
            raise RunError(f"{checkpoint_path} holds an unfinished run; pass --resume to continue it or "
                           "--overwrite to start again (which deletes it)")
        field0 = make_initial_field(spec, grid) if initial_field is None else np.asarray(initial_field)
        if field0.shape != grid.shape + (3,):
            raise RunError(f"initial field of shape {field0.shape} does not fit the grid {grid.shape}")
    prepare_output_dir(out)
    for stale in stale_temporaries(out):  # left by a killed process: never a complete file
        stale.unlink(missing_ok=True)
        if stream is not None:
            print(f"  removed {stale}, a half-written file left by an interrupted process", file=stream)
    if not resume:
        checkpoint_path.unlink(missing_ok=True)  # --overwrite: the old run's checkpoint goes too
    expected = spec.initial.expected_charge
    initial_charge = hopf_charge(field0, grid)
    segment_started, segment_clock = _utc_now(), [time.perf_counter()]

    def record_with(step, evaluations, ended):
        current = _segment(segment_started, start_step, step, evaluations, time.perf_counter() - segment_clock[0],
                           ended)
        return {"segments": segments + [current]}

    def checkpoint(field, step, hist, state, ended=None):
        ended = ended or ("interrupted" if interrupts.requested() is not None
                          else state.get("saved_at_stop") or "running")
        write_checkpoint(checkpoint_path, field, grid, step, hist.as_arrays(), spec.text, state,
                         record_with(step, state.get("evaluations", 0), ended))

    probe = probe_density(model.terms)
    if probe["negative"] and stream is not None:
        print("WARNING: the energy density is negative for some local fields "
              f"(quartic part a = {probe['quartic']['a']:g}, b = {probe['quartic']['b']:g}; "
              "bounded needs b >= 0 and a + 4b >= 0): the energy may not be bounded below",
              file=stream, flush=True)
    relax_spec = spec.relax
    rule = relax_spec.stopping_rule()
    if stream is not None:
        print(f"relaxing Q = {spec.initial.expected_charge} ({spec.initial.description}) "
              f"on {grid.shape[0]}x{grid.shape[1]}x{grid.shape[2]}, "
              f"h = {grid.spacing}{' at the centre, stretch ' + str(grid.stretch) if grid.stretched else ''}, "
              f"box side {tuple(round(x, 4) for x in grid.side)}, {grid.boundary} boundary, "
              f"{spec.grid.scheme}-order scheme, method {relax_spec.method}",
              file=stream, flush=True)
        print(f"  model: {describe_model(model)}", file=stream, flush=True)
    _check_finite_start(model, field0, warm_up(model, field0, stream))
    segment_clock[0] = time.perf_counter()
    coarse = None
    with interrupts.deferred(), _naming_checkpoint(checkpoint_path):
        if relax_spec.coarse_start and not resume and initial_field is None:
            coarse, coarse_field = coarse_stage(spec, grid, model, rule, stream)
            if coarse_field is not None:
                field0 = coarse_field
        result = minimise(
            model, field0, relax_spec.method, rule,
            time_step=relax_spec.time_step or None,
            history=history, start_step=start_step,
            progress=Progress(stream, relax_spec.progress_seconds),
            checkpoint=checkpoint, checkpoint_every=relax_spec.checkpoint_every,
            monitor=lambda f: monitor_values(model, f),
            monitor_every=MONITOR_EVERY,
            preconditioner=relax_spec.preconditioner,
            preconditioner_shift=relax_spec.preconditioner_shift,
            resume=saved_state,
            should_stop=interrupts.stop_requested,
        )
    if result.status == Outcome.INTERRUPTED:
        raise interrupts.Interrupted(interrupts.requested(), checkpoint_path, result.steps)
    segments.append(_segment(segment_started, start_step, result.steps, result.evaluations,
                             time.perf_counter() - segment_clock[0], result.status))
    needs_saddle_check = (spec.initial.noise == 0.0 and initial_field is None) if symmetric_start is None \
        else symmetric_start

    def finish() -> dict:
        """Diagnostics, verdict and result files of the relaxed state."""
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
        def verdict_with(saddle=None):
            return assess(field, grid, density, charge, expected, virial["total"], result.status,
                          result.history.as_arrays(), result.history.energy, probe["negative"], hessian, saddle)

        verdict = verdict_with()
        # only a state that would be called stable needs the evidence that it is no saddle
        if verdict["verdict"] == Outcome.STABLE and spec.relax.saddle_check and needs_saddle_check:
            with interrupts.deferred():
                saddle = saddle_check(model, field, result.energy, rule, spec, stream)
            if saddle is None:  # interrupted (the handler below checkpoints the relaxed state)
                raise interrupts.Interrupted(interrupts.requested())
            verdict = verdict_with(saddle)
        if abs(initial_charge - expected) > CHARGE_CHECK * expected:
            verdict["warnings"].append(
                f"the initial data measures Q = {initial_charge:.4f} against the family's {expected}: "
                f"the grid (h = {grid.spacing[0]:g}) is too coarse for this family and size")
        if grid.stretched and grid.largest_cell() > STRETCH_CELL_LIMIT:
            verdict["warnings"].append(
                f"the outermost cells of the stretched grid are {grid.largest_cell():.2f} model lengths wide: a soliton "
                "that drifts or spreads into them can unwind through the lattice (seen: Q = 1 on 81^3, h = 0.25, "
                "stretch 2, cells 17.4 wide; held up to 5.3); use a larger stretch or fewer points")
        if coarse is not None and not coarse["used"]:
            verdict["warnings"].append(f"the coarse start was discarded ({coarse['reason']}); "
                                       "the run started from the initial data on the fine grid")
        stopped_by = result.stopped_by
        stop_warnings = stopping_record(stopped_by, result.max_force, rule.force_tol, rule.energy_tol, rule.patience)
        verdict["warnings"] += stop_warnings
        curves = solution_label(field, grid, density=density)
        if curves["open_chains"]:
            verdict["warnings"].append(f"{curves['open_chains']} preimage curves are cut by the box: "
                                       "the soliton touches the border")
        if abs(curves["linking_charge"] - charge) > 0.1 * max(1.0, abs(charge)):
            verdict["warnings"].append(
                f"the linking number of two preimages ({curves['linking_charge']:.3f}) disagrees with "
                f"the Whitehead integral Q = {charge:.4f}: curves under-resolved or field not smooth")
        segments[-1]["wall_seconds"] = time.perf_counter() - segment_clock[0]  # diagnostics included
        summary = {
            "energy": float(sum(energies.values())),
            "terms": energies,
            "hopf_charge": charge,
            "expected_charge": expected,
            "initial_charge": initial_charge,
            "family": spec.initial.description,
            "label": curves["label"],
            "curves": curve_summary(curves),
            "virial": virial["total"],
            "virial_per_axis": virial["per_axis"],
            "converged": result.converged,
            "status": str(result.status),
            "stopped_by": stopped_by,
            "iterations": result.steps,
            "evaluations": sum(seg["evaluations"] for seg in segments),
            "segments": segments,
            "max_force": result.max_force,
            "grid": {"shape": list(grid.shape), "spacing": list(grid.spacing),
                     "origin": list(grid.origin), "boundary": grid.boundary, "stretch": list(grid.stretch),
                     "scheme": spec.grid.scheme, "box_side": list(grid.side)},
            "method": relax_spec.method,
            "backend": model.route.name,
            "model": describe_model(model),
            "plain_model": kernel_couplings(model.terms) == (1.0, 1.0),
            "coarse_stage": coarse,
            "rejected_steps": result.rejected_steps,
            "time_step": result.time_step,
            "bounded_below_probe": probe,
            "verdict": str(verdict["verdict"]),
            "evidence": verdict["evidence"],
            "warnings": verdict["warnings"],
            "wall_seconds": sum(seg["wall_seconds"] for seg in segments),
            "normalisation": NORMALISATION_TEXT,
            "version": __version__,
            "config_hash": run_hash(spec),
            "provenance": provenance(spec),
        }
        if not (math.isfinite(summary["energy"]) and np.all(np.isfinite(density)) and np.all(np.isfinite(field))):
            raise RunError(f"the final state's energy is non-finite (E = {summary['energy']}): "
                           f"{first_non_finite(model, field)}; no result was written")
        write_result(out / RESULT, field, grid, density, summary, result.history.as_arrays(),
                     spec.text, __version__)
        write_xdmf(out / XDMF, out / RESULT, grid)
        resumable = checkpoint_path.exists() and stopped_by in ("energy", "max_steps")
        if resumable:  # kept: --resume continues the run exactly, with more steps or a tighter rule
            summary["continue_with"] = continue_hint(stopped_by, rule, out)
        else:
            checkpoint_path.unlink(missing_ok=True)
        write_json(out / SUMMARY, summary)
        return summary

    try:
        return finish()
    except interrupts.Interrupted as stop:  # during the diagnostics: keep the relaxed state for --resume
        segments.pop()  # the checkpoint's record writes this segment again, as interrupted
        checkpoint(result.field, result.steps, result.history, {"evaluations": result.evaluations}, "interrupted")
        stop.checkpoint, stop.step = checkpoint_path, result.steps
        raise


