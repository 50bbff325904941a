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

``non-finite``     the energy or force became NaN/Inf (last finite state kept)
``unbounded``      the energy went negative and kept falling, or fell while the density is
                   known to take negative values (energy running away downwards)
``collapsed``      Derrick collapse: the core thinned to the lattice scale (thickness <=
                   COLLAPSE_CELLS spacings) while the virial kept one sign, far from balance,
                   at every monitored step: nothing in the model stops the shrinking
``under-resolved`` the lattice decided: either the core thinned to the lattice scale and
                   lost the charge although the virial came near balance on the way (a
                   soliton exists but is smaller than this lattice resolves), or a converged
                   state's core spans fewer than 1 / SPACING_LIMIT spacings.  The evidence
                   names the spacing that would resolve it (``resolving_spacing``)
``spread``         the soliton grew until it filled the box (size above SPREAD_FRACTION of
                   the half side and still growing, or BOUNDARY_SPREAD of the energy on the
                   border)
``box too small``  converged with the charge kept, no longer growing, but the box shapes
                   it: more than BOX_VERDICT_FRACTION of the energy on the border, or more
                   than BOUNDARY_FRACTION_LIMIT with the virial beyond VIRIAL_LIMIT.  A
                   soliton too big for this box, not one that spreads; the evidence names
                   the box side that would hold it (``needed_box_side``; also given, with a
                   warning, for a stable state with more than BOUNDARY_FRACTION_LIMIT on
                   the border)
``unwound``        the charge changed by more than 1/2 without collapse or spreading
``unbounded``      (also) a relaxed state of a model whose density takes negative values
``not converged``  the stopping rule was not met
``saddle``         converged, but the Hessian has a clearly negative mode, or a perturbed
                   copy relaxed to a clearly lower energy (`saddle_check`)
``stable``         converged, charge kept, none of the above
"""

from __future__ import annotations

import numpy as np

from solitons.judge.outcomes import Outcome
from solitons.lattice.grid import STENCILS, Grid

STABLE = Outcome.STABLE
UNWOUND = Outcome.UNWOUND
COLLAPSED = Outcome.COLLAPSED
SPREAD = Outcome.SPREAD
UNBOUNDED = Outcome.UNBOUNDED
SADDLE = Outcome.SADDLE
NOT_CONVERGED = Outcome.NOT_CONVERGED
NON_FINITE = Outcome.NON_FINITE
UNDER_RESOLVED = Outcome.UNDER_RESOLVED
BOX_TOO_SMALL = Outcome.BOX_TOO_SMALL

CHARGE_TOLERANCE = 0.05  # |Q - round(Q)| beyond this is flagged
BOUNDARY_FRACTION_LIMIT = 1e-3
VIRIAL_LIMIT = 0.05
SPACING_LIMIT = 0.3
# A measured value within this band above a verdict's threshold keeps the milder verdict
# and gets a warning naming the value and the threshold (no knife edge: spacing / core 0.302
# against 0.3 was `under-resolved`, exit 1, for a run that was converged and sound).
VERDICT_MARGIN = 0.1
COLLAPSE_CELLS = 2.0
SPREAD_FRACTION = 0.45
BOUNDARY_SPREAD = 0.05
BOX_VERDICT_FRACTION = 5e-3
SPREAD_VIRIAL = 0.5  # a state squeezed this far from balance by its box is no soliton held by it
TREND_CHANGE = 0.05  # the virial must move this much towards balance to count as a trend
# energy outside the box half side that a "needed box side" aims at (a proxy of the box
# error, which is of this order for a soliton squeezed by a fixed border)
OUTSIDE_TARGET = 1e-4
# A perturbed copy that relaxes lower than the state (relaxed alike) by more than
# SADDLE_DROP (relative) shows a descent direction: the state is a saddle.  Smaller drops
# come from the lattice itself: the axial Q = 2 state, a minimum (docs/references.md
# [R14]), gave perturbed copies 1.3e-4 lower at h = 0.2 (61^3, box 12) and 4.8e-5 lower at
# h = 0.15 (81^3), a cubic lattice preferring some orientations, shrinking with h
# (measured).  The axial Q = 3 saddle gave 6.8e-3 to 9.3e-3 (measured; [R17]).  Drops
# above LATTICE_DROP but below SADDLE_DROP are reported with a warning, not a verdict.
ENERGY_STOP_FORCE = 10.0  # a run the energy rule stopped with max force above this x force_tol is flagged
SADDLE_DROP = 1e-3
LATTICE_DROP = 1e-5


def core_thickness(field: np.ndarray, grid: Grid) -> float:
    """pi / max |grad n| with the lattice's forward differences (model length units);
    inf for a uniform field.  One numba pass: the per-step monitor calls it."""
    from solitons.model.routes.kernels import max_forward_gradient_sq

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


def needed_box_side(energy_density: np.ndarray, grid: Grid, target: float = OUTSIDE_TARGET) -> float | None:
    """Box side that would leave a fraction ``target`` of the energy outside its half side,
    from a power-law fit F(r) = A r^-k of the fraction F of |energy| beyond radius r (about
    the energy centre) over r in [0.4, 0.9] of the half side.  A massless soliton's tail is a
    power law; an exponential tail makes this an overestimate (a safe side).  None when the
    tail cannot be fitted (too little energy there)."""
    weights = _energy_per_site(energy_density, grid)
    total = float(weights.sum())
    if total == 0.0:
        return None
    axes = grid.axes()
    centre = [float((weights.sum(axis=tuple(b for b in range(3) if b != a)) * x).sum() / total)
              for a, x in enumerate(axes)]
    mesh = np.meshgrid(*(x - c for x, c in zip(axes, centre)), indexing="ij")
    radius = np.sqrt(sum(m**2 for m in mesh)).ravel()
    order = np.argsort(radius)
    beyond = 1.0 - np.cumsum(weights.ravel()[order]) / total
    half = 0.5 * min(grid.side)
    r = np.linspace(0.4 * half, 0.9 * half, 12)
    fraction = np.interp(r, radius[order], beyond)
    if np.any(fraction <= 1e-12):
        return None
    slope, intercept = np.polyfit(np.log(r), np.log(fraction), 1)
    if slope >= -0.5:
        return None
    return float(2.0 * np.exp((np.log(target) - intercept) / slope))


def virial_trend(history: dict | None, expected_charge: int) -> dict | None:
    """Where the virial was heading as the size changed: a fit v = a + b ln(size) over the
    monitored states that still held the charge, and the size s* where it would cross zero.

    Derrick: a term with d derivatives scales as size^(3 - d), so the reported virial
    (for the Skyrme-Faddeev model (E2 - E4) / E) rises with the size and crosses zero at
    the soliton's own size; a model with no balance keeps it pinned (+1 for the Dirichlet
    term alone, -1 for the quartic alone; derived).  So a trend towards zero means a
    soliton exists at s* and the lattice (core too thin) or the box (size too large) stopped
    the run short of it.  None when the virial did not move by TREND_CHANGE towards zero or
    fewer than three such states were monitored."""
    if not history:
        return None
    size, virial, thickness = (_series(history, k) for k in ("size", "virial", "thickness"))
    charge = _series(history, "hopf_charge")
    n = min(len(size), len(virial), len(thickness), len(charge))
    if n < 3:
        return None
    size, virial, thickness, charge = size[:n], virial[:n], thickness[:n], charge[:n]
    keep = (np.isfinite(size) & np.isfinite(virial) & np.isfinite(thickness) & (size > 0)
            & (np.abs(charge - expected_charge) < 0.5))
    if keep.sum() < 3:
        return None
    log_size, v, t = np.log(size[keep]), virial[keep], thickness[keep]
    if np.ptp(log_size) < 0.02 or abs(v[-1]) > abs(v[0]) - TREND_CHANGE:
        return None
    slope, intercept = np.polyfit(log_size, v, 1)
    if slope <= 0:
        return None
    balance_log = -intercept / slope
    nearest = int(np.argmin(np.abs(log_size - balance_log)))
    balance_size = float(np.exp(balance_log))
    # the core thickness scales with the size (Derrick scaling of a fixed shape)
    return {"balance_size": balance_size, "slope": float(slope), "states": int(keep.sum()),
            "thickness_at_balance": float(t[nearest] * balance_size / np.exp(log_size[nearest]))}


def _sides(grid: Grid) -> str:
    return " x ".join(f"{x:.3g}" for x in grid.side)


def _box_advice(energy_density, grid: Grid, evidence: dict) -> str:
    needed = needed_box_side(energy_density, grid)
    evidence["needed_box_side"] = needed
    if needed is None:
        return "a larger box (or grid.stretch)"
    return (f"a box side of about {needed:.3g} (keeps {100 * (1 - OUTSIDE_TARGET):g} % of the energy inside, "
            "from a power-law fit of the tail; grid.stretch reaches it with few points)")


def assess(field, grid: Grid, energy_density, hopf_charge: float, expected_charge: int,
           virial: float, status: str, history: dict | None = None,
           energy_history=None, negative_density: bool = False, hessian: dict | None = None,
           saddle_check: dict | None = None) -> dict:
    """Verdict, evidence and warnings for a finished relaxation.

    history: monitor series (size, thickness, boundary_fraction, hopf_charge, virial) if
    any; energy_history: per-step energies; negative_density: the bounded-below probe found
    a negative density; hessian: result of `solitons.measure.stability.lowest_modes`;
    saddle_check: the perturb-and-relax record of the driver (``reference_energy``,
    ``perturbed_energy``)."""
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
    if saddle_check is not None:
        evidence["saddle_check"] = saddle_check
    charge_lost = abs(hopf_charge - expected_charge) > 0.5
    falling = len(energies) > 10 and energies[-1] < energies[-10]
    thinning = len(finite_thickness) > 2 and finite_thickness[-1] < 0.9 * finite_thickness[0]
    growing = len(size) > 2 and size[-1] > 1.1 * size[0]
    still_growing = len(size) > 3 and size[-1] > 1.02 * size[-3]
    trend = virial_trend(history, expected_charge)
    evidence["virial_trend"] = trend
    lattice_scale = min_thickness <= COLLAPSE_CELLS * h and (charge_lost or thinning)
    warnings = []
    if status == Outcome.NON_FINITE:
        verdict = NON_FINITE
        warnings.append("the energy or force became non-finite; the last finite state was kept")
    elif status == Outcome.NUMERICAL_BLOWUP:
        verdict = Outcome.NUMERICAL_BLOWUP
        warnings.append("NUMERICAL BLOW-UP: the flow's time step kept raising the energy after repeated halving; "
                        "the state says nothing about the model (use lbfgs, or a smaller relax.time_step)")
    elif status == Outcome.RUNAWAY or (len(energies) and ((energies[-1] < 0 and falling) or (
            negative_density and falling and status != Outcome.CONVERGED))):
        verdict = UNBOUNDED
        warnings.append("the energy is running away downwards: not bounded below")
    elif lattice_scale and trend is None:
        verdict = COLLAPSED
        warnings.append(f"the core thinned to {min_thickness / h:.2f} lattice spacings while the virial stayed "
                        "on one side of balance: Derrick collapse (stopped or unwound by the lattice)")
    elif lattice_scale:
        verdict = UNDER_RESOLVED
        resolving = SPACING_LIMIT * trend["thickness_at_balance"]
        evidence["resolving_spacing"] = resolving
        warnings.append(f"UNDER-RESOLVED: the virial was heading for balance at size {trend['balance_size']:.3g} "
                        f"(core about {trend['thickness_at_balance']:.3g} thick), but the core thinned to "
                        f"{min_thickness / h:.2f} spacings of h = {h:g} first: the lattice, not the model, "
                        f"decided; rerun with h <= {resolving:.3g}")
    elif not charge_lost and growing and trend is None and (
            now["boundary_fraction"] > BOUNDARY_SPREAD
            or (now["size"] > SPREAD_FRACTION * half_side and (still_growing or status != Outcome.CONVERGED))
            or (now["boundary_fraction"] > BOUNDARY_FRACTION_LIMIT and virial < -SPREAD_VIRIAL)):
        verdict = SPREAD
        warnings.append(f"the soliton spread to the box (size {now['size']:.2f} of half side "
                        f"{half_side:.2f}, {100 * now['boundary_fraction']:.1f} % of the energy on the border) "
                        f"with the virial ({virial:+.3f}) on one side of balance all the way: Derrick spreading")
    elif charge_lost:
        verdict = UNWOUND
        warnings.append(f"charge changed from {expected_charge} to {hopf_charge:.3f}")
    elif negative_density:
        verdict = UNBOUNDED
        warnings.append("this state may be a local minimum, but of an energy that is not "
                        "bounded below: metastable at best, not a stable soliton")
    elif status != Outcome.CONVERGED:
        verdict = NOT_CONVERGED
        warnings.append("NOT CONVERGED: the stopping rule was not met; energies are upper "
                        "bounds of an unrelaxed state")
    elif h / now["thickness"] > SPACING_LIMIT * (1 + VERDICT_MARGIN):
        verdict = UNDER_RESOLVED
        evidence["resolving_spacing"] = SPACING_LIMIT * now["thickness"]
        warnings.append(f"UNDER-RESOLVED: the core is {now['thickness']:.3f} thick, {now['thickness'] / h:.1f} "
                        f"spacings of h = {h:g}; rerun with h <= {SPACING_LIMIT * now['thickness']:.3g}")
    elif now["boundary_fraction"] > BOX_VERDICT_FRACTION * (1 + VERDICT_MARGIN) or (
            now["boundary_fraction"] > BOUNDARY_FRACTION_LIMIT * (1 + VERDICT_MARGIN)
            and abs(virial) > VIRIAL_LIMIT * (1 + VERDICT_MARGIN)):
        verdict = BOX_TOO_SMALL
        warnings.append(f"BOX TOO SMALL: converged and no longer growing, but {100 * now['boundary_fraction']:.2f} % "
                        f"of the energy sits on the border of the {_sides(grid)} box (virial {virial:+.3f}): the "
                        f"box, not the model, shapes this state; rerun with {_box_advice(energy_density, grid, evidence)}")
    elif hessian is not None and hessian.get("negative_modes", 0) > 0:
        verdict = SADDLE
        warnings.append(f"the Hessian has {hessian['negative_modes']} clearly negative mode(s): "
                        "a saddle point, not a minimum")
    elif saddle_check is not None and (saddle_check["perturbed_energy"]
                                       < saddle_check["reference_energy"] * (1 - SADDLE_DROP)):
        verdict = SADDLE
        drop = 1.0 - saddle_check["perturbed_energy"] / saddle_check["reference_energy"]
        warnings.append(f"SADDLE: a perturbed copy (noise {saddle_check['noise']:g}) relaxed {100 * drop:.3f} % lower "
                        f"than the state relaxed alike, to E = {saddle_check['perturbed_energy']:.6f}: the symmetric "
                        "state is not a minimum; rerun with initial.noise > 0")
    else:
        verdict = STABLE
        if saddle_check is not None and (saddle_check["perturbed_energy"]
                                         < saddle_check["reference_energy"] * (1 - LATTICE_DROP)):
            drop = 1.0 - saddle_check["perturbed_energy"] / saddle_check["reference_energy"]
            warnings.append(f"a perturbed copy relaxed {drop:.1e} (relative) lower than the state, below the saddle "
                            f"threshold {SADDLE_DROP:g}: the size the lattice's preferred orientations give at "
                            "these spacings (measured 1.3e-4 at h = 0.2 for the axial Q = 2 minimum); if it does "
                            "not shrink at a finer spacing, the state is a saddle")
    if negative_density:
        warnings.append("the energy density takes negative values for some local fields: "
                        "the energy may not be bounded below")
    if evidence["charge_off_integer"] > CHARGE_TOLERANCE:
        warnings.append(f"Hopf charge {hopf_charge:.4f} is far from an integer: the lattice "
                        "does not resolve the field")
    if BOUNDARY_FRACTION_LIMIT < now["boundary_fraction"] and verdict not in (SPREAD, BOX_TOO_SMALL):
        warnings.append(f"{100 * now['boundary_fraction']:.2f} % of the energy sits on the two "
                        "outermost layers of sites: the soliton touches the box, which squeezes "
                        f"it; for sub-per-cent energies use {_box_advice(energy_density, grid, evidence)}")
    if abs(virial) > VIRIAL_LIMIT:
        warnings.append(f"virial residual {virial:+.3f}: not a stationary point of the "
                        "infinite-space energy (box too small, lattice too coarse, or unrelaxed)")
    if h / now["thickness"] > SPACING_LIMIT and verdict != UNDER_RESOLVED:
        ratio = h / now["thickness"]
        kept = (f" (within the {VERDICT_MARGIN:.0%} margin: the milder verdict is kept)"
                if ratio <= SPACING_LIMIT * (1 + VERDICT_MARGIN) else "")
        warnings.append(f"spacing is {ratio:.3f} of the core thickness, above the limit {SPACING_LIMIT:g}{kept}: "
                        "under-resolved; check on a finer grid")
    return {"verdict": verdict, "evidence": evidence, "warnings": warnings}


def stopping_record(stopped_by: str | None, max_force: float, force_tol: float, energy_tol: float,
                    patience: int) -> list[str]:
    """The warnings of how a run stopped.  ``stopped_by`` is the rule the minimiser
    recorded (`solitons.relaxation.minimise.StoppingRule.fired`: "force", "energy", or
    "max_steps").  Warned: a run the energy rule stopped with the force still above
    ENERGY_STOP_FORCE times force_tol: the energy has nearly settled, the largest force has not (measured:
    every run but Q = 1 of analysis/survey_q1_16 at h = 0.2 stopped so, with max force
    0.006-0.19 against force_tol 1e-3; the Q = 13 one, continued 2000 steps, fell a
    further 6e-6 relative with the force still at 0.012)."""
    warnings = []
    if stopped_by == "energy" and max_force > ENERGY_STOP_FORCE * force_tol:
        warnings.append(f"stopped by the energy rule (relative change below {energy_tol:g} for {patience} steps) "
                        f"with max force {max_force:.2e} = {max_force / force_tol:.0f} x force_tol: the energy "
                        "has nearly settled (it may creep a little lower), the largest force has not; for the "
                        "field itself (or a verdict at a tighter tolerance) rerun with a smaller energy_tol or "
                        "a larger patience; --resume continues this run exactly")
    return warnings
