"""Verdicts on a relaxed configuration, with the evidence behind them: measure
(`solitons.judge.evidence.gather`), then decide (`solitons.judge.rules.decide`).  The
verdicts and their rules are listed in `solitons.judge.rules`; every threshold is in
`solitons.judge.thresholds`; the trust measures are described in
`solitons.judge.evidence`.  This module is the one entry the callers use."""

from __future__ import annotations

from solitons.judge.evidence import (
    Evidence,
    boundary_energy_fraction,
    core_thickness,
    energy_size,
    gather,
    needed_box_side,
    snapshot,
    virial_trend,
)
from solitons.judge.rules import VERDICT_RULES, WARNING_RULES, Decision, bounded_below_notice, decide
from solitons.judge.thresholds import ENERGY_STOP_FORCE, SPACING_LIMIT, VERDICT_MARGIN

__all__ = ["ENERGY_STOP_FORCE", "SPACING_LIMIT", "VERDICT_MARGIN", "VERDICT_RULES", "WARNING_RULES", "Decision",
           "Evidence", "assess", "boundary_energy_fraction", "bounded_below_notice", "core_thickness", "decide",
           "energy_size", "gather", "needed_box_side", "snapshot", "virial_trend"]


def assess(field, grid, energy_density, hopf_charge: float, expected_charge: int, virial: float, status: str,
           history: dict | None = None, energy_history=None, negative_density: bool = False,
           hessian: dict | None = None, saddle_check: dict | None = None, **run) -> dict:
    """Verdict, evidence and warnings of a finished relaxation (``{"verdict", "evidence",
    "warnings"}``): `gather` then `decide`; the arguments are `gather`'s."""
    evidence = gather(field, grid, energy_density, hopf_charge, expected_charge, virial, status, history,
                      energy_history, negative_density, hessian, saddle_check, **run)
    return decide(evidence).as_dict()
