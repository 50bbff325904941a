"""Verdicts on a relaxed configuration, with the evidence behind them, and the numbers
that say how far a result can be trusted.

Trust measures (printed next to every energy):

* virial residual, sum_a h_a dE/dh_a / E: zero for a stationary point of the continuum
  energy in infinite space (Derrick); a box that squeezes the soliton makes it negative.
* core thickness, pi / max_x |grad n|: the length over which n would turn from one pole
  to the other at the field's steepest rate; ``spacing_over_thickness`` is the largest
  lattice spacing in those units.
* boundary energy fraction: share of the energy on the two outermost layers of sites.
* size: RMS radius of the energy distribution about its centre.
* distance of the measured Hopf charge from the nearest integer.

Verdicts (first that applies):

``non-finite``   the energy or force became NaN/Inf (last finite state kept)
``unbounded``    the energy went negative and kept falling, or fell while the density is
                 known to take negative values (energy running away downwards)
``collapsed``    the core thinned to the lattice scale (thickness <= COLLAPSE_CELLS
                 spacings at some point) and the charge was lost or the core was still
                 thinning: the lattice, not the model, stopped the shrinking
``spread``       the soliton grew until it filled the box (size above SPREAD_FRACTION of
                 the half side and still growing, or BOUNDARY_SPREAD of the energy on the
                 border)
``unwound``      the charge changed by more than 1/2 without collapse or spreading
``unbounded``    (also) a relaxed state of a model whose density takes negative values
``not converged`` the stopping rule was not met
``saddle``       converged, but the Hessian has a clearly negative mode
``stable``       converged, charge kept, none of the above
"""

from __future__ import annotations

import numpy as np

from solitons.grid import STENCILS, Grid

STABLE = "stable"
UNWOUND = "unwound"
COLLAPSED = "collapsed"
SPREAD = "spread"
UNBOUNDED = "unbounded"
SADDLE = "saddle"
NOT_CONVERGED = "not converged"
NON_FINITE = "non-finite"
VERDICTS = (STABLE, COLLAPSED, SPREAD, UNWOUND, UNBOUNDED, SADDLE, NOT_CONVERGED, NON_FINITE)

CHARGE_TOLERANCE = 0.05  # |Q - round(Q)| beyond this is flagged
BOUNDARY_FRACTION_LIMIT = 1e-3
VIRIAL_LIMIT = 0.05
SPACING_LIMIT = 0.3
COLLAPSE_CELLS = 2.0
SPREAD_FRACTION = 0.45
BOUNDARY_SPREAD = 0.05


def core_thickness(field: np.ndarray, grid: Grid) -> float:
    """pi / max |grad n| with the lattice's forward differences (model length units);
    inf for a uniform field.  One numba pass: the per-step monitor calls it."""
    from solitons.kernels import max_forward_gradient_sq

    factors = [grid.difference_factors(a, STENCILS["second"])[0] / h for a, h in enumerate(grid.spacing)]
    steepest = float(np.sqrt(max_forward_gradient_sq(np.ascontiguousarray(field, dtype=np.float64), *factors,
                                                     grid.boundary == "periodic")))
    return np.pi / steepest if steepest > 1e-12 else float("inf")


def _energy_per_site(energy_density, grid: Grid) -> np.ndarray:
    weights = np.abs(np.asarray(energy_density))
    return weights * grid.site_weights() if grid.stretched else weights


def boundary_energy_fraction(energy_density: np.ndarray, grid: Grid, width: int = 2) -> float:
    """Share of |energy| on the ``width`` outermost layers of sites."""
    per_site = _energy_per_site(energy_density, grid)
    total = float(per_site.sum())
    if total == 0.0:
        return 0.0
    return float(per_site[grid.border_shell_mask(width)].sum()) / total


def energy_size(energy_density: np.ndarray, grid: Grid) -> float:
    """RMS radius of |energy density| about its centre (model length units).  From the
    three marginal distributions (exact: r^2 is a sum over axes), so no coordinate mesh."""
    weights = _energy_per_site(energy_density, grid)
    total = weights.sum()
    if total == 0:
        return 0.0
    r2 = 0.0
    for axis, x in enumerate(grid.axes()):
        marginal = weights.sum(axis=tuple(a for a in range(3) if a != axis))
        centre = float((marginal * x).sum() / total)
        r2 += float((marginal * (x - centre) ** 2).sum() / total)
    return float(np.sqrt(r2))


def snapshot(field, grid: Grid, energy_density) -> dict:
    """Size, thickness and boundary fraction of one configuration."""
    return {"size": energy_size(energy_density, grid),
            "thickness": core_thickness(np.asarray(field), grid),
            "boundary_fraction": boundary_energy_fraction(np.asarray(energy_density), grid)}


def _series(history: dict | None, key: str) -> np.ndarray:
    if not history or key not in history:
        return np.zeros(0)
    return np.asarray(history[key], dtype=float)


def assess(field, grid: Grid, energy_density, hopf_charge: float, expected_charge: int,
           virial: float, status: str, history: dict | None = None,
           energy_history=None, negative_density: bool = False, hessian: dict | None = None) -> dict:
    """Verdict, evidence and warnings for a finished relaxation.

    history: monitor series (size, thickness, boundary_fraction, hopf_charge) if any;
    energy_history: per-step energies; negative_density: the bounded-below probe found a
    negative density; hessian: result of `solitons.stability.lowest_modes`."""
    now = snapshot(field, grid, energy_density)
    h = max(grid.spacing)
    half_side = 0.5 * min(grid.side)
    thickness = _series(history, "thickness")
    size = _series(history, "size")
    energies = np.asarray(energy_history if energy_history is not None else [], dtype=float)
    nearest = int(round(hopf_charge))
    finite_thickness = thickness[np.isfinite(thickness)]
    min_thickness = float(finite_thickness.min()) if len(finite_thickness) else now["thickness"]
    evidence = {
        "hopf_charge": hopf_charge,
        "expected_charge": expected_charge,
        "charge_off_integer": abs(hopf_charge - nearest),
        "virial": virial,
        "core_thickness": now["thickness"],
        "spacing_over_thickness": h / now["thickness"],
        "min_thickness_over_spacing": min_thickness / h,
        "size": now["size"],
        "size_over_half_side": now["size"] / half_side,
        "initial_size": float(size[0]) if len(size) else None,
        "boundary_energy_fraction": now["boundary_fraction"],
        "status": status,
        "final_energy": float(energies[-1]) if len(energies) else None,
        "negative_density": negative_density,
    }
    if hessian is not None:
        evidence["hessian"] = hessian
    charge_lost = abs(hopf_charge - expected_charge) > 0.5
    falling = len(energies) > 10 and energies[-1] < energies[-10]
    thinning = len(finite_thickness) > 2 and finite_thickness[-1] < 0.9 * finite_thickness[0]
    growing = len(size) > 2 and size[-1] > 1.1 * size[0]
    warnings = []
    if status == "non_finite":
        verdict = NON_FINITE
        warnings.append("the energy or force became non-finite; the last finite state was kept")
    elif status == "runaway" or (len(energies) and ((energies[-1] < 0 and falling) or (
            negative_density and falling and status != "converged"))):
        verdict = UNBOUNDED
        warnings.append("the energy is running away downwards: not bounded below")
    elif min_thickness <= COLLAPSE_CELLS * h and (charge_lost or thinning):
        verdict = COLLAPSED
        warnings.append(f"the core thinned to {min_thickness / h:.2f} lattice spacings: collapse "
                        "(stopped or unwound by the lattice)")
    elif not charge_lost and ((now["size"] > SPREAD_FRACTION * half_side and growing)
                              or now["boundary_fraction"] > BOUNDARY_SPREAD):
        verdict = SPREAD
        warnings.append(f"the soliton spread to the box (size {now['size']:.2f} of half side "
                        f"{half_side:.2f}, {100 * now['boundary_fraction']:.1f} % of the energy on the border)")
    elif charge_lost:
        verdict = UNWOUND
        warnings.append(f"charge changed from {expected_charge} to {hopf_charge:.3f}")
    elif negative_density:
        verdict = UNBOUNDED
        warnings.append("this state may be a local minimum, but of an energy that is not "
                        "bounded below: metastable at best, not a stable soliton")
    elif status != "converged":
        verdict = NOT_CONVERGED
        warnings.append("NOT CONVERGED: the stopping rule was not met; energies are upper "
                        "bounds of an unrelaxed state")
    elif hessian is not None and hessian.get("negative_modes", 0) > 0:
        verdict = SADDLE
        warnings.append(f"the Hessian has {hessian['negative_modes']} clearly negative mode(s): "
                        "a saddle point, not a minimum")
    else:
        verdict = STABLE
    if negative_density:
        warnings.append("the energy density takes negative values for some local fields: "
                        "the energy may not be bounded below")
    if evidence["charge_off_integer"] > CHARGE_TOLERANCE:
        warnings.append(f"Hopf charge {hopf_charge:.4f} is far from an integer: the lattice "
                        "does not resolve the field")
    if BOUNDARY_FRACTION_LIMIT < now["boundary_fraction"] and verdict != SPREAD:
        warnings.append(f"{100 * now['boundary_fraction']:.2f} % of the energy sits on the two "
                        "outermost layers of sites: the soliton touches the box, which squeezes "
                        "it; enlarge the box for sub-per-cent energies")
    if abs(virial) > VIRIAL_LIMIT:
        warnings.append(f"virial residual {virial:+.3f}: not a stationary point of the "
                        "infinite-space energy (box too small, lattice too coarse, or unrelaxed)")
    if h / now["thickness"] > SPACING_LIMIT:
        warnings.append(f"spacing is {h / now['thickness']:.2f} of the core thickness: under-resolved")
    return {"verdict": verdict, "evidence": evidence, "warnings": warnings}
