"""One relaxation from a validated RunSpec to result files: the edge where the pure core
(model, initial data, minimiser, topology, verdicts) meets files and the terminal."""

from __future__ import annotations

import contextlib
import datetime
import functools
import hashlib
import json
import math
import sys
import time
import tomllib
from pathlib import Path
from typing import TextIO

import numpy as np

from solitons import __version__, interrupts
from solitons.config import USER_KIND, RunSpec
from solitons.diagnose import assess, snapshot, stopping_record
from solitons.energy import Model, kernel_couplings
from solitons.grid import Grid
from solitons.initial import add_noise, initial_field, interpolate_field
from solitons.io import (
    check_output_dir,
    prepare_output_dir,
    read_checkpoint,
    read_result,
    stale_temporaries,
    write_checkpoint,
    write_json,
    write_result,
    write_xdmf,
)
from solitons.knots import solution_label
from solitons.minimise import History, StoppingRule, minimise
from solitons.outcomes import Outcome
from solitons.stability import lowest_modes, probe_density
from solitons.terms import BUILTIN_TERMS, Term
from solitons.topology import hopf_charge
from solitons.userterms import load_user_term

NORMALISATION_TEXT = (
    "E = 1/(32 sqrt(2) pi^2) * sum_terms coupling * Int density d^3x; with dirichlet and "
    "skyrme_faddeev couplings 1 this is the Battye-Sutcliffe normalisation (Q = 1 minimum ~ 1.22)"
)

RESULT = "result.h5"
XDMF = "result.xdmf"
SUMMARY = "summary.json"
CHECKPOINT = "checkpoint.h5"

# Peak growth of resident memory per grid point during an L-BFGS relaxation (float64,
# memory 4), measured with analysis/bench_memory.py: 461-488 bytes per point at 96^3 for the
# default model on the fused kernel (any scheme), 441 at 128^3 with a built-in correction
# (staged kernel), 799 and 909 at 128^3 with a user term without and with a Laplacian
# (the compiled pointwise part holds the local fields of every site and their derivative
# rows).  The diagnostics (Hopf charge FFTs in complex128, curves, figures) come on top and
# are not in that measurement, so the guard keeps the earlier, larger figure.
BYTES_PER_POINT = 2600


# Relative tolerance of the check of the initial data's charge against its family formula.
CHARGE_CHECK = 0.02

# Steps between the slower diagnostics kept in the history (virial, Hopf charge): each
# costs about one energy evaluation plus a few FFTs.
MONITOR_EVERY = 20  # and every 5 steps during the first 40


class RunError(RuntimeError):
    """A run cannot start (bad output directory, memory, resume mismatch)."""


def make_grid(spec: RunSpec) -> Grid:
    return Grid.centred(spec.grid.points, spec.grid.spacing, spec.grid.boundary, spec.grid.stretch)


def make_terms(spec: RunSpec) -> tuple[Term, ...]:
    """Terms of the model; user terms are imported and validated here (UserTermError)."""
    terms = []
    for t in spec.terms:
        if t.kind == USER_KIND:
            kind, _ = load_user_term(t.file, t.function, t.derivatives, t.laplacian,
                                     dict(t.parameters), name=t.name)
            terms.append(Term(t.name, kind, t.coupling))
        else:
            terms.append(Term(t.name, BUILTIN_TERMS[t.kind], t.coupling, t.parameters))
    return tuple(terms)


def make_model(spec: RunSpec, grid: Grid) -> Model:
    return Model(make_terms(spec), grid, spec.grid.scheme, spec.relax.backend)


def make_initial_field(spec: RunSpec, grid: Grid) -> np.ndarray:
    init = spec.initial
    if init.family == "result":
        field = field_from_result(init.part["file"], grid)
    else:
        field = initial_field(grid, init.part)
    if grid.boundary == "fixed":
        field = field * grid.free_mask() + np.array([0.0, 0.0, 1.0]) * (1.0 - grid.free_mask())
    return add_noise(field, grid, init.noise, init.seed)


def field_from_result(path: str, grid: Grid) -> np.ndarray:
    """The relaxed field of a result file on ``grid``: an axial result rotated out from its
    half plane (solitons.axial.to_3d), a 3D one as it is when its grid is this one."""
    from solitons.axial import read_axial

    axial = read_axial(path)
    if axial is not None:
        from solitons.axial import to_3d

        return to_3d(axial["field"], axial["grid"], grid)
    data = read_result(path)
    if data["grid"] != grid:
        raise RunError(f"{path}: its grid {data['grid'].shape} (h = {data['grid'].spacing}) is not this run's "
                       f"{grid.shape} (h = {grid.spacing}); a 3D result seeds a run on the same grid")
    return data["field"]


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
                      preconditioner=spec.relax.preconditioner, preconditioner_shift=spec.relax.preconditioner_shift)
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
                        preconditioner_shift=spec.relax.preconditioner_shift)

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


def config_hash(text: str) -> str:
    return hashlib.sha256(text.encode()).hexdigest()[:16]


def user_files(spec: RunSpec) -> list[dict]:
    """The user-term files of a run: term name, path, SHA-256 and content (text)."""
    files = []
    for term in spec.terms:
        if term.kind == USER_KIND:
            data = Path(term.file).read_bytes()
            files.append({"term": term.name, "file": term.file, "sha256": hashlib.sha256(data).hexdigest(),
                          "content": data.decode("utf-8", errors="replace")})
    return files


def run_hash(spec: RunSpec) -> str:
    """What decides a run's numbers: the merged configuration and the content of every
    user-term file it loads.  Campaigns skip a finished run only when this is unchanged."""
    digest = hashlib.sha256(spec.text.encode())
    for entry in user_files(spec):
        digest.update(entry["sha256"].encode())
    return digest.hexdigest()[:16]


@functools.lru_cache(maxsize=1)
def _git_commit() -> dict:
    """The commit of the package's source tree when it is a git checkout (an editable
    install), with whether tracked files differ from it; {} otherwise."""
    import subprocess

    where = Path(__file__).resolve().parent
    try:
        commit = subprocess.run(["git", "-C", str(where), "rev-parse", "HEAD"], capture_output=True, text=True,
                                timeout=10)
        if commit.returncode != 0:
            return {}
        dirty = subprocess.run(["git", "-C", str(where), "status", "--porcelain", "--untracked-files=no"],
                               capture_output=True, text=True, timeout=10)
        return {"git_commit": commit.stdout.strip(), "git_dirty": bool(dirty.stdout.strip())}
    except (OSError, subprocess.SubprocessError):
        return {}


def provenance(spec: RunSpec) -> dict:
    """Where a result's numbers come from: package version (and git commit), Python and
    library versions, and every user-term file with its hash and content."""
    from importlib import metadata

    versions = {}
    for name in ("jax", "jaxlib", "numba", "numpy", "scipy", "h5py"):
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            versions[name] = None
    return {"solitons": __version__, **_git_commit(), "python": sys.version.split()[0], "libraries": versions,
            "user_terms": user_files(spec)}


def physics_hash(text: str) -> str:
    """Hash of what defines the field being relaxed (grid, terms, initial data): a resumed
    run may change the [relax] settings (more steps, other tolerances), nothing else."""
    data = tomllib.loads(text)
    data.pop("relax", None)
    return hashlib.sha256(json.dumps(data, sort_keys=True).encode()).hexdigest()[:16]


def available_memory_bytes() -> int | None:
    try:
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemAvailable:"):
                return int(line.split()[1]) * 1024
    except OSError:
        return None
    return None


def check_memory(grid: Grid) -> None:
    need = BYTES_PER_POINT * grid.npoints
    have = available_memory_bytes()
    if have is not None and need > 0.9 * have:
        raise RunError(
            f"grid {grid.shape} needs about {need / 2**30:.1f} GiB "
            f"({BYTES_PER_POINT} bytes per point) but {have / 2**30:.1f} GiB is available"
        )


class Progress:
    """Progress lines on a stream at most every ``seconds``."""

    def __init__(self, stream: TextIO | None, seconds: float):
        self.stream = stream
        self.seconds = seconds
        self.last = -np.inf
        self.last_step = 0

    def __call__(self, step, energy, force, elapsed):
        if self.stream is None or elapsed - self.last < self.seconds:
            return
        since = elapsed - self.last if np.isfinite(self.last) else elapsed
        rate = (step - self.last_step) / max(since, 1e-9)
        self.last, self.last_step = elapsed, step
        print(f"  step {step:6d}  E = {energy:.8f}  max force {force:.2e}  "
              f"{rate:.1f} steps/s  {elapsed:.0f} s", file=self.stream, flush=True)


def describe_model(model) -> str:
    """The terms with their couplings and constants, e.g. "1 dirichlet + 1 skyrme_faddeev +
    0.2 log_quartic(c0=1, c1=0.1, scale=1, delta=1e-08)"."""
    parts = []
    for term in model.terms:
        constants = term.parameter_values()
        inside = ", ".join(f"{k}={v:g}" for k, v in constants.items())
        label = term.name if term.name == term.kind.name else f"{term.name} [{term.kind.name}]"
        parts.append(f"{term.coupling:g} {label}" + (f"({inside})" if inside else ""))
    return " + ".join(parts)


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
    from solitons.energy import term_densities

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

    Raises RunError (and writes nothing) when the run cannot start: output in the way,
    memory, a checkpoint of another configuration, non-finite initial data.  A SIGINT or
    SIGTERM (see solitons.interrupts) stops the relaxation after its current step, writes
    DIR/checkpoint.h5 with the minimiser's full state and raises `Interrupted`; resuming
    from it takes the same steps as a run never stopped.  The summary records every
    segment of a resumed run (``segments``); ``iterations``, ``evaluations`` and
    ``wall_seconds`` count all of them."""
    if spec.grid.symmetry == "axial":
        from solitons.axial_run import relax_axial

        return relax_axial(spec, out_dir, resume=resume, overwrite=overwrite, stream=stream)
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
        ended = ended or ("interrupted" if interrupts.requested() is not None else "running")
        write_checkpoint(checkpoint_path, field, grid, step, hist.as_arrays(), spec.text, state,
                         record_with(step, state.get("evaluations", 0), ended))

    probe = probe_density(model.terms)
    if probe["negative"] and stream is not None:
        print("WARNING: the energy density is negative for some local fields "
              f"(quartic part a = {probe['quartic']['a']:g}, b = {probe['quartic']['b']:g}; "
              "bounded needs b >= 0 and a + 4b >= 0): the energy may not be bounded below",
              file=stream, flush=True)
    relax_spec = spec.relax
    rule = StoppingRule(relax_spec.max_steps, relax_spec.force_tol, relax_spec.energy_tol,
                        relax_spec.patience)
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
        stopped_by, stop_warnings = stopping_record(result.converged, result.max_force, rule.force_tol,
                                                    rule.energy_tol, rule.patience)
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
        write_json(out / SUMMARY, summary)
        checkpoint_path.unlink(missing_ok=True)
        return summary

    try:
        return finish()
    except interrupts.Interrupted as stop:  # during the diagnostics: keep the relaxed state for --resume
        segments.pop()  # the checkpoint's record writes this segment again, as interrupted
        checkpoint(result.field, result.steps, result.history, {"evaluations": result.evaluations}, "interrupted")
        stop.checkpoint, stop.step = checkpoint_path, result.steps
        raise


def curve_summary(curves: dict) -> dict:
    """The summary's ``curves`` entry from `solitons.knots.solution_label`."""
    return {key: curves[key] for key in ("components", "pair_linking", "linking_charge", "open_chains", "symmetry")}


def report(summary: dict, out_dir: str | Path, stream: TextIO | None = None) -> None:
    """Human-readable account of a finished run."""
    e = summary["evidence"]
    g = summary["grid"]
    reference = ("; the plain model's Q = 1 minimum is about 1.22"
                 if summary.get("plain_model") and summary.get("expected_charge") == 1 else "")
    lines = [
        f"energy        E = {summary['energy']:.6f}   (Battye-Sutcliffe units{reference})",
    ]
    for name, value in summary["terms"].items():
        lines.append(f"  {name:22s} {value:.6f}")
    lines += [
        f"trust         virial residual {summary['virial']:+.4f} "
        f"(per axis {', '.join(f'{v:+.4f}' for v in summary['virial_per_axis'])}); "
        f"spacing / core thickness {e['spacing_over_thickness']:.3f} "
        f"(core thickness {e['core_thickness']:.3f}); "
        f"boundary energy {100 * e['boundary_energy_fraction']:.3f} %",
        f"Hopf charge   Q = {summary['hopf_charge']:.6f}   (expected {summary['expected_charge']} from "
        f"{summary['family']}; initial data {summary['initial_charge']:.4f}; linking of two preimages "
        f"{summary['curves']['linking_charge']:.3f})",
        f"label         {summary['label']}",
        f"converged     {'yes' if summary['converged'] else 'NO'} ({summary['status']}"
        f"{' by the ' + summary['stopped_by'] + ' rule' if summary.get('stopped_by') else ''}, "
        f"{summary['iterations']} steps, {summary['evaluations']} evaluations, "
        f"max force {summary['max_force']:.2e}, {summary['wall_seconds']:.1f} s)",
        f"grid          {g['shape'][0]}x{g['shape'][1]}x{g['shape'][2]}, h = {g['spacing'][0]:g}, "
        f"box side {g['box_side'][0]:g}, {g['boundary']}, {g['scheme']}-order"
        + (f"; AXIAL mode: half plane {summary['axial']['shape'][0]}x{summary['axial']['shape'][1]}, "
           f"winding {summary['axial']['winding']}, virial rho {summary['axial']['virial_rho']:+.2e} "
           f"z {summary['axial']['virial_z']:+.2e} (the 3D files hold the field rotated out)"
           if summary.get("symmetry") == "axial" else ""),
        f"verdict       {summary['verdict']}",
    ]
    for warning in summary["warnings"]:
        lines.append(f"WARNING       {warning}")
    lines.append(f"files         {Path(out_dir) / RESULT}  {Path(out_dir) / SUMMARY}  "
                 f"{Path(out_dir) / XDMF}")
    print("\n".join(lines), file=stream or sys.stdout, flush=True)
