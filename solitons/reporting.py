"""What a run prints: progress lines, the model's description, the summary's curve entry
and the closing account of a finished run."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import TextIO

import numpy as np

from solitons.io.results import RESULT, SUMMARY, XDMF


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
    if summary.get("continue_with"):
        lines.append(f"continue      {summary['continue_with']}   (checkpoint kept: the same steps as a run "
                     "never stopped)")
    lines.append(f"files         {Path(out_dir) / RESULT}  {Path(out_dir) / SUMMARY}  "
                 f"{Path(out_dir) / XDMF}")
    print("\n".join(lines), file=stream or sys.stdout, flush=True)
