"""The measuring pass of a verdict: the numbers that say what a relaxed state is and how
far it can be trusted, gathered into one frozen `Evidence` record.  Nothing here decides;
`solitons.judge.rules` reads the record and gives the verdict and the warnings.

Trust measures (printed next to every energy):

* virial residual, sum_a h_a dE/dh_a / E: zero for a stationary point of the continuum
  energy in infinite space (Derrick); a box that squeezes the soliton makes it negative.
* core thickness, pi / max_x |grad n|: the length over which n would turn from one pole
  to the other at the field's steepest rate; ``spacing_over_thickness`` is the largest
  lattice spacing in those units.
* boundary energy fraction: share of the energy on the two outermost layers of sites.
* size: RMS radius of the energy distribution about its centre.
* distance of the measured Hopf charge from the nearest integer.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from solitons.judge.thresholds import (
    BOUNDARY_FRACTION_LIMIT,
    CHARGE_LOST,
    COLLAPSE_CELLS,
    FALLING_STEPS,
    GROWN,
    OUTSIDE_TARGET,
    STILL_GROWING,
    THINNING,
    TREND_CHANGE,
)
from solitons.lattice.grid import STENCILS, Grid


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


@dataclass(frozen=True)
class Evidence:
    """What the decision table reads: measured values of the relaxed state and its
    history, and the facts of the run around it (None where the caller has none: an
    axial run has no monitor history, a run without a coarse start no coarse report).
    Lengths in model units, energies in the normalisation of the run."""

    # the relaxed state
    status: str                        # how the minimiser stopped (`Outcome`)
    hopf_charge: float                 # Whitehead integral
    expected_charge: int               # the initial data's family
    virial: float                      # Derrick residual
    spacing: float                     # largest lattice spacing h
    core_thickness: float              # pi / max |grad n|
    min_thickness: float               # smallest core thickness over the monitored states
    size: float                        # RMS radius of the energy
    half_side: float                   # half the smallest box side
    box_sides: tuple                   # the box sides
    boundary_energy_fraction: float    # share on the two outermost layers
    needed_box_side: float | None      # box side for OUTSIDE_TARGET outside (when touching)
    initial_size: float | None
    final_energy: float | None
    negative_density: bool             # the bounded-below probe found a negative density
    # the history
    energy_falling: bool               # below its value FALLING_STEPS steps before
    core_thinning: bool                # last thickness below THINNING x the first
    size_grown: bool                   # last size above GROWN x the first
    size_still_growing: bool           # last size above STILL_GROWING x two monitors before
    virial_trend: dict | None          # `virial_trend`
    # optional checks
    hessian: dict | None = None        # `solitons.measure.stability.lowest_modes`
    saddle_check: dict | None = None   # the perturb-and-relax record (`solitons.run.saddle_check`)
    # the run around the state
    initial_charge: float | None = None
    largest_cell: float | None = None  # widest cell of a stretched grid
    coarse_discarded: str | None = None  # why the coarse start was discarded
    stopped_by: str | None = None      # the stopping rule that fired
    max_force: float | None = None
    force_tol: float | None = None
    energy_tol: float | None = None
    patience: int | None = None
    open_chains: int | None = None     # preimage curves cut by the box
    linking_charge: float | None = None  # linking number of two preimages
    axial: bool = False                # the state is an axial run's, rotated out
    result_path: str | None = None     # where the result is written (named in advice)

    @property
    def charge_off_integer(self) -> float:
        return abs(self.hopf_charge - round(self.hopf_charge))

    @property
    def charge_lost(self) -> bool:
        return abs(self.hopf_charge - self.expected_charge) > CHARGE_LOST

    @property
    def spacing_over_thickness(self) -> float:
        return self.spacing / self.core_thickness

    @property
    def min_thickness_over_spacing(self) -> float:
        return self.min_thickness / self.spacing

    @property
    def size_over_half_side(self) -> float:
        return self.size / self.half_side

    @property
    def at_lattice_scale(self) -> bool:
        """The core reached the lattice scale on the way and was thinning or lost the charge."""
        return self.min_thickness <= COLLAPSE_CELLS * self.spacing and (self.charge_lost or self.core_thinning)

    def as_dict(self) -> dict:
        """The record as the summary's ``evidence`` (the measured values of the state)."""
        record = {
            "hopf_charge": self.hopf_charge,
            "expected_charge": self.expected_charge,
            "charge_off_integer": self.charge_off_integer,
            "virial": self.virial,
            "core_thickness": self.core_thickness,
            "spacing_over_thickness": self.spacing_over_thickness,
            "min_thickness_over_spacing": self.min_thickness_over_spacing,
            "size": self.size,
            "size_over_half_side": self.size_over_half_side,
            "initial_size": self.initial_size,
            "boundary_energy_fraction": self.boundary_energy_fraction,
            "status": self.status,
            "final_energy": self.final_energy,
            "negative_density": self.negative_density,
        }
        if self.hessian is not None:
            record["hessian"] = self.hessian
        if self.saddle_check is not None:
            record["saddle_check"] = self.saddle_check
        record["virial_trend"] = self.virial_trend
        if self.boundary_energy_fraction > BOUNDARY_FRACTION_LIMIT:
            record["needed_box_side"] = self.needed_box_side
        return record


def gather(field, grid: Grid, energy_density, hopf_charge: float, expected_charge: int, virial: float,
           status: str, history: dict | None = None, energy_history=None, negative_density: bool = False,
           hessian: dict | None = None, saddle_check: dict | None = None, **run) -> Evidence:
    """Measure a finished relaxation into an `Evidence` record.

    history: monitor series (size, thickness, boundary_fraction, hopf_charge, virial) if
    any; energy_history: per-step energies; negative_density: the bounded-below probe found
    a negative density; hessian: `solitons.measure.stability.lowest_modes`; saddle_check:
    the perturb-and-relax record (``reference_energy``, ``perturbed_energy``, ``noise``);
    ``run``: the run's facts, as the `Evidence` fields of that name."""
    now = snapshot(field, grid, energy_density)
    thickness = _series(history, "thickness")
    size = _series(history, "size")
    energies = np.asarray(energy_history if energy_history is not None else [], dtype=float)
    finite_thickness = thickness[np.isfinite(thickness)]
    touching = now["boundary_fraction"] > BOUNDARY_FRACTION_LIMIT
    return Evidence(
        status=str(status), hopf_charge=float(hopf_charge), expected_charge=int(expected_charge),
        virial=float(virial), spacing=float(max(grid.spacing)), core_thickness=now["thickness"],
        min_thickness=float(finite_thickness.min()) if len(finite_thickness) else now["thickness"],
        size=now["size"], half_side=0.5 * min(grid.side), box_sides=tuple(float(x) for x in grid.side),
        boundary_energy_fraction=now["boundary_fraction"],
        needed_box_side=needed_box_side(energy_density, grid) if touching else None,
        initial_size=float(size[0]) if len(size) else None,
        final_energy=float(energies[-1]) if len(energies) else None,
        negative_density=bool(negative_density),
        energy_falling=bool(len(energies) > FALLING_STEPS and energies[-1] < energies[-FALLING_STEPS]),
        core_thinning=bool(len(finite_thickness) > 2 and finite_thickness[-1] < THINNING * finite_thickness[0]),
        size_grown=bool(len(size) > 2 and size[-1] > GROWN * size[0]),
        size_still_growing=bool(len(size) > 3 and size[-1] > STILL_GROWING * size[-3]),
        virial_trend=virial_trend(history, expected_charge),
        hessian=hessian, saddle_check=saddle_check, **run)
