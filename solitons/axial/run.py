"""One relaxation in the axial mode (``grid.symmetry = "axial"``): the I/O edge of
`solitons.axial.model`, called by `solitons.run.relax` so that relax, scan, survey and
continuum run it unchanged.

The half plane covers the box of the 3D grid the configuration describes: rho sites at
(i + 1/2) h_x out to its half side ((points - 1) / 2 of them), z sites as the 3D z axis,
the stretch of x for rho and of z for z.  The winding is the initial map's a.

Outputs are those of a 3D run, so every reader works: result.h5 holds the field rotated
out onto that 3D grid (`/field`; coarsened to at most 129 points per axis, same box) and the axial density interpolated there
(`/energy_density`: per unit volume, so its sum times the site volumes is the energy up
to the interpolation), plus the half-plane field and density under `/axial`
(`solitons.io.results.read_axial`).  The verdict is the 3D one of the rotated-out field (size, thickness,
border energy, charge), with the axial caveat: an axial minimum can be a saddle in 3D.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path
from typing import TextIO

import numpy as np

from solitons import __version__, interrupts
from solitons.assemble import RunError, make_grid, make_terms
from solitons.axial.model import (
    AxialGrid,
    AxialModel,
    AxialTermError,
    axial_initial,
    check_invariance,
    density_to_3d,
    hopf_charge,
    to_3d,
)
from solitons.config import RunSpec
from solitons.io.results import (
    RESULT,
    SUMMARY,
    XDMF,
    as_json,
    check_output_dir,
    prepare_output_dir,
    stale_temporaries,
    write_json,
    write_result,
    write_xdmf,
)
from solitons.judge.diagnose import bounded_below_notice, decide, gather
from solitons.judge.outcomes import Outcome
from solitons.measure.stability import probe_density
from solitons.record import Result
from solitons.relaxation.minimise import minimise
from solitons.reporting import Progress, describe_model, run_summary


def make_axial_grid(spec: RunSpec) -> AxialGrid:
    g = spec.grid
    n_rho = (g.points[0] - 1) // 2
    return AxialGrid((n_rho, g.points[2]), (g.spacing[0], g.spacing[2]), spec.initial.part["a"],
                     (g.stretch[0], g.stretch[2]))


EMBED_POINTS = 129  # at most this many points per axis in the rotated-out 3D field


def embedding_grid(grid3):
    """The configuration's 3D grid, coarsened (same box) until no axis has more than
    `EMBED_POINTS` points: the files' 3D field is for looking at and for seeding 3D runs
    (which interpolate from the half plane itself), and 241^3 sites would cost 335 MB."""
    while max(grid3.shape) > EMBED_POINTS:
        grid3 = grid3.coarsened()
    return grid3


def axial_start(spec: RunSpec, grid: AxialGrid) -> np.ndarray:
    part = spec.initial.part
    m = axial_initial(grid, part["b"], part["size"], part["centre"][2])
    if spec.initial.noise:
        rng = np.random.default_rng(spec.initial.seed)
        m = m + spec.initial.noise * rng.standard_normal(m.shape) * grid.free_mask()
        m /= np.linalg.norm(m, axis=-1, keepdims=True)
    return m


def relax_axial(spec: RunSpec, out_dir: str | Path | None, resume: bool = False, overwrite: bool = False,
                stream: TextIO | None = sys.stderr) -> Result:
    """Relax on the half plane and write the run's files (see the module docstring; none
    when ``out_dir`` is None).  Returns the record of the rotated-out state.  ``resume``
    is refused: axial runs take seconds and keep no checkpoint."""
    from solitons.measure.knots import solution_label

    out = Path(out_dir) if out_dir is not None else None
    if out is not None:
        check_output_dir(out)
    if resume:
        raise RunError("axial runs keep no checkpoint (they take seconds): run again without --resume")
    if out is not None and (out / RESULT).exists() and not overwrite:
        raise RunError(f"{out / RESULT} exists; pass --overwrite to replace it")
    grid = make_axial_grid(spec)
    grid3 = embedding_grid(make_grid(spec))
    terms = make_terms(spec)
    try:
        check_invariance(terms, grid.winding)
    except AxialTermError as error:
        raise RunError(str(error)) from None
    model = AxialModel(terms, grid, spec.grid.scheme)
    start = axial_start(spec, grid)
    if out is not None:
        prepare_output_dir(out)
        for stale in stale_temporaries(out):
            stale.unlink(missing_ok=True)
    relax_spec = spec.relax
    rule = relax_spec.stopping_rule()
    expected = spec.initial.expected_charge
    initial_charge = hopf_charge(start, grid)
    probe = probe_density(model.terms)
    notice = bounded_below_notice(probe)
    if notice and stream is not None:
        print(notice, file=stream, flush=True)
    if stream is not None:
        rho, z = grid.axes()
        print(f"relaxing Q = {expected} ({spec.initial.description}) in the axial mode: half plane "
              f"{grid.shape[0]}x{grid.shape[1]} (rho to {rho[-1]:.4g}, z in +-{z[-1]:.4g}), h = {grid.spacing}"
              f"{', stretch ' + str(grid.stretch) if any(grid.stretch) else ''}, winding {grid.winding}, "
              f"{spec.grid.scheme}-order scheme, method {relax_spec.method}", file=stream, flush=True)
        print(f"  model: {describe_model(model)}", file=stream, flush=True)
    energy0, _ = model.evaluate(start)
    if not np.isfinite(energy0):
        raise RunError(f"the initial data's energy is non-finite (E = {energy0}); nothing was written")
    clock = time.perf_counter()
    with interrupts.deferred():
        result = minimise(model, start, relax_spec.method, rule, time_step=relax_spec.time_step or None,
                          progress=Progress(stream, relax_spec.progress_seconds),
                          preconditioner=relax_spec.preconditioner,
                          preconditioner_shift=relax_spec.preconditioner_shift,
                          should_stop=interrupts.stop_requested)
    if result.status == Outcome.INTERRUPTED:
        raise interrupts.Interrupted(interrupts.requested(), None, result.steps)
    m = result.field
    energies = model.energies(m)
    density, virial = model.density_and_virial(m)
    charge = hopf_charge(m, grid)
    field3 = to_3d(m, grid, grid3)
    density3 = density_to_3d(density, grid, grid3)
    curves = solution_label(field3, grid3, density=density3)
    evidence = gather(field3, grid3, density3, charge, expected, virial["total"], result.status, None,
                      result.history.energy, probe["negative"], initial_charge=initial_charge,
                      stopped_by=result.stopped_by, max_force=result.max_force, force_tol=rule.force_tol,
                      energy_tol=rule.energy_tol, patience=rule.patience, axial=True,
                      result_path=str(out / RESULT) if out is not None else "(not written)")
    decision = decide(evidence)
    axial = {"shape": list(grid.shape), "spacing": list(grid.spacing), "stretch": list(grid.stretch),
             "winding": grid.winding, "rho_max": float(grid.axes()[0][-1]),
             "virial_rho": virial["rho"], "virial_z": virial["z"]}
    summary = run_summary(spec, model, grid3, energies=energies, charge=charge, initial_charge=initial_charge,
                          curves=curves, virial=virial, result=result, segments=[],
                          backend="jax (axial half plane)", probe=probe, decision=decision,
                          wall_seconds=time.perf_counter() - clock, symmetry="axial", axial=axial)
    if not (np.isfinite(summary["energy"]) and np.all(np.isfinite(m))):
        raise RunError(f"the final state's energy is non-finite (E = {summary['energy']}); no result was written")
    history = result.history.as_arrays()
    if out is not None:
        write_result(out / RESULT, field3, grid3, density3, summary, history, spec.text, __version__,
                     axial={"field": m, "energy_density": density, "spacing": grid.spacing,
                            "stretch": grid.stretch, "winding": grid.winding})
        write_xdmf(out / XDMF, out / RESULT, grid3)
        write_json(out / SUMMARY, summary)
    return Result(as_json(summary), field3, grid3, density3, history, spec.text, out)
