"""The decision table: verdicts and warnings as rules over an `Evidence` record.

`VERDICT_RULES` are tried in order and the first that applies gives the verdict (and its
own warning); `WARNING_RULES` then each add their warning where they apply, knowing the
verdict.  Every threshold comes from `solitons.judge.thresholds`.  The rules of the
verdicts (first that applies):

``non-finite``        the energy or force became NaN/Inf (last finite state kept)
``numerical blow-up`` a flow's step kept raising the energy after repeated halving
``unbounded``         the energy went negative and kept falling, or fell while the density
                      is known to take negative values (energy running away downwards)
``collapsed``         Derrick collapse: the core thinned to the lattice scale (thickness <=
                      COLLAPSE_CELLS spacings) while the virial kept one sign, far from
                      balance, at every monitored step: nothing in the model stops it
``under-resolved``    the lattice decided: the core thinned to the lattice scale although the
                      virial came near balance on the way (a soliton exists, smaller than
                      this lattice resolves); also, after the rules below down to
                      ``not converged``, a converged core spanning fewer than 1 /
                      SPACING_LIMIT spacings.  The evidence names ``resolving_spacing``
``spread``            the soliton grew until it filled the box (size above SPREAD_FRACTION
                      of the half side and still growing, or BOUNDARY_SPREAD of the energy on
                      the border) with no balance in sight
``unwound``           the charge changed by more than CHARGE_LOST without collapse or spreading
``unbounded``         (also) a relaxed state of a model whose density takes negative values
``not converged``     the stopping rule was not met
``box too small``     converged with the charge kept, no longer growing, but the box shapes
                      it: more than BOX_VERDICT_FRACTION of the energy on the border, or more
                      than BOUNDARY_FRACTION_LIMIT with the virial beyond VIRIAL_LIMIT
                      (``needed_box_side`` in the evidence)
``saddle``            converged, but the Hessian has a clearly negative mode, or a perturbed
                      copy relaxed to a clearly lower energy (SADDLE_DROP)
``stable``            converged, charge kept, none of the above

Thresholds of the converged verdicts get the VERDICT_MARGIN: a value within it keeps the
milder verdict and a warning names the value and the threshold.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

from solitons.judge.evidence import Evidence
from solitons.judge.outcomes import Outcome
from solitons.judge.thresholds import (
    BOUNDARY_FRACTION_LIMIT,
    BOUNDARY_SPREAD,
    BOX_VERDICT_FRACTION,
    CHARGE_CHECK,
    CHARGE_TOLERANCE,
    ENERGY_STOP_FORCE,
    LATTICE_DROP,
    LINKING_DISAGREEMENT,
    OUTSIDE_TARGET,
    SADDLE_DROP,
    SPACING_LIMIT,
    SPREAD_FRACTION,
    SPREAD_VIRIAL,
    STRETCH_CELL_LIMIT,
    VERDICT_MARGIN,
    VIRIAL_LIMIT,
)

MILD = 1 + VERDICT_MARGIN


@dataclass(frozen=True)
class Rule:
    """One row of the table.  ``applies(evidence, verdict)`` (verdict None for the verdict
    rules themselves); ``message(evidence)`` the warning it adds (None: none);
    ``records(evidence)`` what it adds to the summary's evidence."""

    name: str
    outcome: Outcome | None  # the verdict a verdict rule gives; None for a warning rule
    applies: Callable[[Evidence, Outcome | None], bool]
    message: Callable[[Evidence], str] | None = None
    records: Callable[[Evidence], dict] | None = None


@dataclass(frozen=True)
class Decision:
    verdict: Outcome
    warnings: tuple[str, ...]
    fired: tuple[str, ...]   # names of the rules that applied: the verdict's first
    evidence: dict           # the summary's evidence: the record's values and the rules' additions

    def as_dict(self) -> dict:
        return {"verdict": self.verdict, "evidence": self.evidence, "warnings": list(self.warnings)}


# --- the conditions and messages that need more than one line -----------------------------

def _runaway(e: Evidence, _=None) -> bool:
    return e.status == Outcome.RUNAWAY or (e.energy_falling and (
        e.final_energy < 0 or (e.negative_density and e.status != Outcome.CONVERGED)))


def _spreading(e: Evidence, _=None) -> bool:
    f = e.boundary_energy_fraction
    return (not e.charge_lost and e.size_grown and e.virial_trend is None and (
        f > BOUNDARY_SPREAD
        or (e.size > SPREAD_FRACTION * e.half_side and (e.size_still_growing or e.status != Outcome.CONVERGED))
        or (f > BOUNDARY_FRACTION_LIMIT and e.virial < -SPREAD_VIRIAL)))


def _box_shapes_it(e: Evidence, _=None) -> bool:
    f = e.boundary_energy_fraction
    return f > BOX_VERDICT_FRACTION * MILD or (f > BOUNDARY_FRACTION_LIMIT * MILD and abs(e.virial) > VIRIAL_LIMIT * MILD)


def _perturbed_drop(e: Evidence) -> float:
    return 1.0 - e.saddle_check["perturbed_energy"] / e.saddle_check["reference_energy"]


def _perturbed_lower(e: Evidence, by: float) -> bool:
    check = e.saddle_check
    return check is not None and check["perturbed_energy"] < check["reference_energy"] * (1 - by)


def _sides(e: Evidence) -> str:
    return " x ".join(f"{x:.3g}" for x in e.box_sides)


def _box_advice(e: Evidence) -> str:
    if e.needed_box_side is None:
        return "a larger box (or grid.stretch)"
    return (f"a box side of about {e.needed_box_side:.3g} (keeps {100 * (1 - OUTSIDE_TARGET):g} % of the energy "
            "inside, from a power-law fit of the tail; grid.stretch reaches it with few points)")


def _lattice_resolving(e: Evidence) -> float:
    return SPACING_LIMIT * e.virial_trend["thickness_at_balance"]


def _msg_lattice_decided(e: Evidence) -> str:
    t = e.virial_trend
    return (f"UNDER-RESOLVED: the virial was heading for balance at size {t['balance_size']:.3g} "
            f"(core about {t['thickness_at_balance']:.3g} thick), but the core thinned to "
            f"{e.min_thickness_over_spacing:.2f} spacings of h = {e.spacing:g} first: the lattice, not the model, "
            f"decided; rerun with h <= {_lattice_resolving(e):.3g}")


def _msg_spread(e: Evidence) -> str:
    return (f"the soliton spread to the box (size {e.size:.2f} of half side {e.half_side:.2f}, "
            f"{100 * e.boundary_energy_fraction:.1f} % of the energy on the border) with the virial "
            f"({e.virial:+.3f}) on one side of balance all the way: Derrick spreading")


def _msg_thin_core(e: Evidence) -> str:
    return (f"UNDER-RESOLVED: the core is {e.core_thickness:.3f} thick, {e.core_thickness / e.spacing:.1f} "
            f"spacings of h = {e.spacing:g}; rerun with h <= {SPACING_LIMIT * e.core_thickness:.3g}")


def _msg_box(e: Evidence) -> str:
    return (f"BOX TOO SMALL: converged and no longer growing, but {100 * e.boundary_energy_fraction:.2f} % "
            f"of the energy sits on the border of the {_sides(e)} box (virial {e.virial:+.3f}): the box, not the "
            f"model, shapes this state; rerun with {_box_advice(e)}")


def _msg_saddle(e: Evidence) -> str:
    return (f"SADDLE: a perturbed copy (noise {e.saddle_check['noise']:g}) relaxed {100 * _perturbed_drop(e):.3f} % "
            f"lower than the state relaxed alike, to E = {e.saddle_check['perturbed_energy']:.6f}: the symmetric "
            "state is not a minimum; rerun with initial.noise > 0")


def _msg_lattice_drop(e: Evidence) -> str:
    return (f"a perturbed copy relaxed {_perturbed_drop(e):.1e} (relative) lower than the state, below the saddle "
            f"threshold {SADDLE_DROP:g}: the size the lattice's preferred orientations give at these spacings "
            "(measured 1.3e-4 at h = 0.2 for the axial Q = 2 minimum); if it does not shrink at a finer spacing, "
            "the state is a saddle")


def _msg_spacing(e: Evidence) -> str:
    ratio = e.spacing_over_thickness
    kept = (f" (within the {VERDICT_MARGIN:.0%} margin: the milder verdict is kept)"
            if ratio <= SPACING_LIMIT * MILD else "")
    return (f"spacing is {ratio:.3f} of the core thickness, above the limit {SPACING_LIMIT:g}{kept}: "
            "under-resolved; check on a finer grid")


def _msg_initial_charge(e: Evidence) -> str:
    where = ("the half plane is too coarse or too small for this size" if e.axial
             else f"the grid (h = {e.spacing:g}) is too coarse for this family and size")
    return f"the initial data measures Q = {e.initial_charge:.4f} against the family's {e.expected_charge}: {where}"


def _msg_energy_stop(e: Evidence) -> str:
    return (f"stopped by the energy rule (relative change below {e.energy_tol:g} for {e.patience} steps) "
            f"with max force {e.max_force:.2e} = {e.max_force / e.force_tol:.0f} x force_tol: the energy "
            "has nearly settled (it may creep a little lower), the largest force has not; for the "
            "field itself (or a verdict at a tighter tolerance) rerun with a smaller energy_tol or "
            "a larger patience; --resume continues this run exactly")


AXIAL_CAVEAT = ("axial minimum: stable within the axial ansatz only; in 3D it may be a saddle. Test it in 3D "
                "from this result: initial.family = \"result\", initial.file = \"{path}\", initial.noise = 0.02")


VERDICT_RULES: tuple[Rule, ...] = (
    Rule("non-finite", Outcome.NON_FINITE, lambda e, _: e.status == Outcome.NON_FINITE,
         lambda e: "the energy or force became non-finite; the last finite state was kept"),
    Rule("numerical blow-up", Outcome.NUMERICAL_BLOWUP, lambda e, _: e.status == Outcome.NUMERICAL_BLOWUP,
         lambda e: ("NUMERICAL BLOW-UP: the flow's time step kept raising the energy after repeated halving; "
                    "the state says nothing about the model (use lbfgs, or a smaller relax.time_step)")),
    Rule("runaway", Outcome.UNBOUNDED, _runaway,
         lambda e: "the energy is running away downwards: not bounded below"),
    Rule("collapse", Outcome.COLLAPSED, lambda e, _: e.at_lattice_scale and e.virial_trend is None,
         lambda e: (f"the core thinned to {e.min_thickness_over_spacing:.2f} lattice spacings while the virial "
                    "stayed on one side of balance: Derrick collapse (stopped or unwound by the lattice)")),
    Rule("lattice decided", Outcome.UNDER_RESOLVED, lambda e, _: e.at_lattice_scale, _msg_lattice_decided,
         lambda e: {"resolving_spacing": _lattice_resolving(e)}),
    Rule("spread", Outcome.SPREAD, _spreading, _msg_spread),
    Rule("unwound", Outcome.UNWOUND, lambda e, _: e.charge_lost,
         lambda e: f"charge changed from {e.expected_charge} to {e.hopf_charge:.3f}"),
    Rule("metastable", Outcome.UNBOUNDED, lambda e, _: e.negative_density,
         lambda e: ("this state may be a local minimum, but of an energy that is not "
                    "bounded below: metastable at best, not a stable soliton")),
    Rule("not converged", Outcome.NOT_CONVERGED, lambda e, _: e.status != Outcome.CONVERGED,
         lambda e: ("NOT CONVERGED: the stopping rule was not met; energies are upper "
                    "bounds of an unrelaxed state")),
    Rule("thin core", Outcome.UNDER_RESOLVED, lambda e, _: e.spacing_over_thickness > SPACING_LIMIT * MILD,
         _msg_thin_core, lambda e: {"resolving_spacing": SPACING_LIMIT * e.core_thickness}),
    Rule("box too small", Outcome.BOX_TOO_SMALL, _box_shapes_it, _msg_box),
    Rule("negative Hessian mode", Outcome.SADDLE,
         lambda e, _: e.hessian is not None and e.hessian.get("negative_modes", 0) > 0,
         lambda e: (f"the Hessian has {e.hessian['negative_modes']} clearly negative mode(s): "
                    "a saddle point, not a minimum")),
    Rule("perturbed copy lower", Outcome.SADDLE, lambda e, _: _perturbed_lower(e, SADDLE_DROP), _msg_saddle),
    Rule("stable", Outcome.STABLE, lambda e, _: True),
)

WARNING_RULES: tuple[Rule, ...] = (
    Rule("lattice-sized drop", None, lambda e, v: v == Outcome.STABLE and _perturbed_lower(e, LATTICE_DROP),
         _msg_lattice_drop),
    Rule("negative density", None, lambda e, v: e.negative_density,
         lambda e: ("the energy density takes negative values for some local fields: "
                    "the energy may not be bounded below")),
    Rule("charge off integer", None, lambda e, v: e.charge_off_integer > CHARGE_TOLERANCE,
         lambda e: f"Hopf charge {e.hopf_charge:.4f} is far from an integer: the lattice does not resolve the field"),
    Rule("touches the box", None,
         lambda e, v: e.boundary_energy_fraction > BOUNDARY_FRACTION_LIMIT
         and v not in (Outcome.SPREAD, Outcome.BOX_TOO_SMALL),
         lambda e: (f"{100 * e.boundary_energy_fraction:.2f} % of the energy sits on the two "
                    "outermost layers of sites: the soliton touches the box, which squeezes "
                    f"it; for sub-per-cent energies use {_box_advice(e)}")),
    Rule("virial", None, lambda e, v: abs(e.virial) > VIRIAL_LIMIT,
         lambda e: (f"virial residual {e.virial:+.3f}: not a stationary point of the "
                    "infinite-space energy (box too small, lattice too coarse, or unrelaxed)")),
    Rule("spacing near the limit", None,
         lambda e, v: e.spacing_over_thickness > SPACING_LIMIT and v != Outcome.UNDER_RESOLVED, _msg_spacing),
    Rule("axial caveat", None, lambda e, v: e.axial and v == Outcome.STABLE,
         lambda e: AXIAL_CAVEAT.format(path=e.result_path)),
    Rule("initial charge", None,
         lambda e, v: e.initial_charge is not None
         and abs(e.initial_charge - e.expected_charge) > CHARGE_CHECK * e.expected_charge,
         _msg_initial_charge),
    Rule("wide stretched cells", None, lambda e, v: e.largest_cell is not None and e.largest_cell > STRETCH_CELL_LIMIT,
         lambda e: (f"the outermost cells of the stretched grid are {e.largest_cell:.2f} model lengths wide: a soliton "
                    "that drifts or spreads into them can unwind through the lattice (seen: Q = 1 on 81^3, h = 0.25, "
                    "stretch 2, cells 17.4 wide; held up to 5.3); use a larger stretch or fewer points")),
    Rule("coarse start discarded", None, lambda e, v: e.coarse_discarded is not None,
         lambda e: (f"the coarse start was discarded ({e.coarse_discarded}); "
                    "the run started from the initial data on the fine grid")),
    Rule("energy rule with a large force", None,
         lambda e, v: e.stopped_by == "energy" and e.max_force > ENERGY_STOP_FORCE * e.force_tol, _msg_energy_stop),
    Rule("cut by the box", None, lambda e, v: bool(e.open_chains),
         lambda e: f"{e.open_chains} preimage curves are cut by the box: the soliton touches the border"),
    Rule("linking disagrees", None,
         lambda e, v: e.linking_charge is not None
         and abs(e.linking_charge - e.hopf_charge) > LINKING_DISAGREEMENT * max(1.0, abs(e.hopf_charge)),
         lambda e: (f"the linking number of two preimages ({e.linking_charge:.3f}) disagrees with "
                    f"the Whitehead integral Q = {e.hopf_charge:.4f}: curves under-resolved or field not smooth")),
)


def decide(evidence: Evidence) -> Decision:
    """The verdict of the first verdict rule that applies, then every warning rule's."""
    verdict_rule = next(rule for rule in VERDICT_RULES if rule.applies(evidence, None))
    verdict = verdict_rule.outcome
    fired, warnings, record = [verdict_rule], [], evidence.as_dict()
    fired += [rule for rule in WARNING_RULES if rule.applies(evidence, verdict)]
    for rule in fired:
        if rule.message is not None:
            warnings.append(rule.message(evidence))
        if rule.records is not None:
            record.update(rule.records(evidence))
    return Decision(verdict, tuple(warnings), tuple(rule.name for rule in fired), record)


def bounded_below_notice(probe: dict) -> str | None:
    """The line printed before a run whose density the probe found negative somewhere."""
    if not probe["negative"]:
        return None
    quartic = probe["quartic"]
    return ("WARNING: the energy density is negative for some local fields "
            f"(quartic part a = {quartic['a']:g}, b = {quartic['b']:g}; "
            "bounded needs b >= 0 and a + 4b >= 0): the energy may not be bounded below")
