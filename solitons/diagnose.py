"""Verdicts on a relaxed configuration, with the evidence behind them, and the numbers
that say how far a result can be trusted.

Trust measures (printed next to every energy):

* virial residual, sum_a h_a dE/dh_a / E: zero for a stationary point of the continuum
  energy in infinite space (Derrick); a box that squeezes the soliton makes it negative.
* core thickness, pi / max_x |grad n|: the length over which n would turn from one pole
  to the other at the field's steepest rate; ``spacing_over_thickness`` is the largest
  lattice spacing in those units (common practice: a few tenths or less for per-cent
  accuracy; measure with the convergence study in analysis/).
* boundary energy fraction: share of the energy on the outermost layers of sites; a
  soliton that reaches the box border is squeezed or spreading.
* distance of the measured Hopf charge from the nearest integer.
"""

from __future__ import annotations

import numpy as np

from solitons.grid import Grid

STABLE = "stable"
UNWOUND = "unwound"
NOT_CONVERGED = "not converged"
NON_FINITE = "non-finite"

CHARGE_TOLERANCE = 0.05  # |Q - round(Q)| beyond this is flagged
BOUNDARY_FRACTION_LIMIT = 1e-3
VIRIAL_LIMIT = 0.05
SPACING_LIMIT = 0.3


def core_thickness(field: np.ndarray, grid: Grid) -> float:
    """pi / max |grad n| with forward differences (model length units)."""
    gradient_sq = np.zeros(grid.shape)
    for axis, h in enumerate(grid.spacing):
        difference = (np.roll(field, -1, axis=axis) - field) / h
        if grid.boundary == "fixed":
            index = [slice(None)] * 3
            index[axis] = -1
            difference[tuple(index)] = 0.0
        gradient_sq += np.sum(difference**2, axis=-1)
    steepest = float(np.sqrt(gradient_sq.max()))
    return np.pi / steepest if steepest > 0 else float("inf")


def boundary_energy_fraction(energy_density: np.ndarray, grid: Grid, width: int = 2) -> float:
    total = float(energy_density.sum())
    if total == 0.0:
        return 0.0
    return float(energy_density[grid.border_shell_mask(width)].sum()) / total


def assess(field, grid: Grid, energy_density, hopf_charge: float, expected_charge: int,
           virial: float, status: str) -> dict:
    """Verdict, evidence and warnings for a finished relaxation."""
    thickness = core_thickness(np.asarray(field), grid)
    spacing_ratio = max(grid.spacing) / thickness
    fraction = boundary_energy_fraction(np.asarray(energy_density), grid)
    nearest = int(round(hopf_charge))
    evidence = {
        "hopf_charge": hopf_charge,
        "expected_charge": expected_charge,
        "charge_off_integer": abs(hopf_charge - nearest),
        "virial": virial,
        "core_thickness": thickness,
        "spacing_over_thickness": spacing_ratio,
        "boundary_energy_fraction": fraction,
        "status": status,
    }
    warnings = []
    if status == "non_finite":
        verdict = NON_FINITE
        warnings.append("the energy or force became non-finite; the last finite state was kept")
    elif abs(hopf_charge - expected_charge) > 0.5:
        verdict = UNWOUND
        warnings.append(f"charge changed from {expected_charge} to {hopf_charge:.3f}")
    elif status != "converged":
        verdict = NOT_CONVERGED
        warnings.append("NOT CONVERGED: the stopping rule was not met; energies are upper "
                        "bounds of an unrelaxed state")
    else:
        verdict = STABLE
    if evidence["charge_off_integer"] > CHARGE_TOLERANCE:
        warnings.append(f"Hopf charge {hopf_charge:.4f} is far from an integer: the lattice "
                        "does not resolve the field")
    if fraction > BOUNDARY_FRACTION_LIMIT:
        warnings.append(f"{100 * fraction:.2f} % of the energy sits on the two outermost layers "
                        "of sites: the soliton touches the box, which squeezes it; enlarge "
                        "the box for sub-per-cent energies")
    if abs(virial) > VIRIAL_LIMIT:
        warnings.append(f"virial residual {virial:+.3f}: not a stationary point of the "
                        "infinite-space energy (box too small, lattice too coarse, or unrelaxed)")
    if spacing_ratio > SPACING_LIMIT:
        warnings.append(f"spacing is {spacing_ratio:.2f} of the core thickness: under-resolved")
    return {"verdict": verdict, "evidence": evidence, "warnings": warnings}
