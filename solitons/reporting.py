"""What a run prints and records: progress lines, the model's description, the summary of
a finished run (one builder for 3D and axial runs) and its closing account."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import TextIO

import numpy as np

from solitons import __version__
from solitons.io.provenance import provenance, run_hash
from solitons.io.results import NORMALISATION_TEXT, RESULT, SUMMARY, XDMF


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


def curve_summary(curves: dict) -> dict:
    """The summary's ``curves`` entry from `solitons.measure.knots.solution_label`."""
    return {key: curves[key] for key in ("components", "pair_linking", "linking_charge", "open_chains", "symmetry")}


def run_summary(spec, model, grid, *, energies: dict, charge: float, initial_charge: float, curves: dict,
                virial: dict, result, segments: list, backend: str, probe: dict, decision,
                wall_seconds: float, **extra) -> dict:
    """The summary of a finished run, 3D or axial: its energies, charge, curves, virial,
    how the minimiser ended, the grid (for an axial run the 3D grid its files hold), the
    model, the verdict with its evidence and warnings, and the provenance.  ``result`` is
    the `MinimiseResult` of the last segment, ``segments`` every segment's record;
    ``extra`` adds entries of one kind of run (the coarse stage, the axial half plane)."""
    from solitons.model.energy import kernel_couplings

    summary = {
        "energy": float(sum(energies.values())),
        "terms": energies,
        "hopf_charge": charge,
        "expected_charge": spec.initial.expected_charge,
        "initial_charge": initial_charge,
        "family": spec.initial.description,
        "label": curves["label"],
        "curves": curve_summary(curves),
        "virial": virial["total"],
        "virial_per_axis": virial["per_axis"],
        "converged": result.converged,
        "status": str(result.status),
        "stopped_by": result.stopped_by,
        "iterations": result.steps,
        "evaluations": sum(seg["evaluations"] for seg in segments) if segments else result.evaluations,
        "segments": segments,
        "max_force": result.max_force,
        "grid": {"shape": list(grid.shape), "spacing": list(grid.spacing), "origin": list(grid.origin),
                 "boundary": grid.boundary, "stretch": list(grid.stretch), "scheme": spec.grid.scheme,
                 "box_side": list(grid.side)},
        "method": spec.relax.method,
        "backend": backend,
        "model": describe_model(model),
        "plain_model": kernel_couplings(model.terms) == (1.0, 1.0),
        "rejected_steps": result.rejected_steps,
        "time_step": result.time_step,
        "bounded_below_probe": probe,
        "verdict": str(decision.verdict),
        "evidence": decision.evidence,
        "warnings": list(decision.warnings),
        "wall_seconds": wall_seconds,
        "normalisation": NORMALISATION_TEXT,
        "version": __version__,
        "config_hash": run_hash(spec),
        "provenance": provenance(spec),
    }
    summary.update(extra)
    return summary


def continue_hint(stopped_by: str, rule, out_dir: str | Path) -> str:
    """How to continue a run a rule or max_steps stopped: the command line that resumes it
    exactly from its checkpoint with more steps or a tighter rule."""
    if stopped_by == "max_steps":
        change = f"relax.max_steps={2 * rule.max_steps}"
    else:
        change = f"relax.energy_tol=0 relax.max_steps={2 * rule.max_steps}"
    return f"solitons relax CONFIG --out {out_dir} --resume {change}"


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
        (f"trust         virial residual {summary['virial']:+.4f} "
        f"(per axis {', '.join(f'{v:+.4f}' for v in summary['virial_per_axis'])}); "
        f"spacing / core thickness {e['spacing_over_thickness']:.3f} "
        f"(core thickness {e['core_thickness']:.3f}); "
        f"boundary energy {100 * e['boundary_energy_fraction']:.3f} %"),
        (f"Hopf charge   Q = {summary['hopf_charge']:.6f}   (expected {summary['expected_charge']} from "
        f"{summary['family']}; initial data {summary['initial_charge']:.4f}; linking of two preimages "
        f"{summary['curves']['linking_charge']:.3f})"),
        f"label         {summary['label']}",
        (f"converged     {'yes' if summary['converged'] else 'NO'} ({summary['status']}"
        f"{' by the ' + summary['stopped_by'] + ' rule' if summary.get('stopped_by') else ''}, "
        f"{summary['iterations']} steps, {summary['evaluations']} evaluations, "
        f"max force {summary['max_force']:.2e}, {summary['wall_seconds']:.1f} s)"),
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
    if summary.get("continue_with"):
        lines.append(f"continue      {summary['continue_with']}   (checkpoint kept: the same steps as a run "
                     "never stopped)")
    lines.append(f"files         {Path(out_dir) / RESULT}  {Path(out_dir) / SUMMARY}  "
                 f"{Path(out_dir) / XDMF}")
    print("\n".join(lines), file=stream or sys.stdout, flush=True)
