"""Which state is the ground state: the ordering of continuum energies with error bars.

Pure (numbers in, numbers out).  Two states are ordered when their intervals
[E - err, E + err] do not overlap; the ground state at a charge is *decided* when the
lowest interval lies wholly below the next lowest one (common practice: a difference is
resolved when it exceeds the sum of the two error bars).  A charge with a candidate that
has no error bar (its continuum limit failed or was not run) is undecided.
"""

from __future__ import annotations

import math


def order_states(states: list[dict]) -> dict:
    """``states``: one dict per candidate with ``name``, ``energy`` (the continuum limit)
    and ``error`` (its error bar, >= 0; None or non-finite when unknown).

    Returns ``decided`` (bool), ``lowest`` and ``next`` (names, ``next`` None with a
    single candidate), ``gap`` (next minus lowest energy), ``errors`` (the two error bars),
    ``separation`` (gap over the sum of the error bars) and ``reason`` (why undecided, or
    the margin by which it is decided)."""
    if not states:
        raise ValueError("no candidate states to order")
    for state in states:
        if state.get("error") is not None and state["error"] < 0:
            raise ValueError(f"{state['name']}: negative error bar {state['error']}")
    known = [s for s in states if _finite(s.get("energy"))]
    if not known:
        return {"decided": False, "lowest": None, "next": None, "gap": None, "errors": None, "separation": None,
                "reason": "no candidate has a continuum energy"}
    ranked = sorted(known, key=lambda s: s["energy"])
    lowest = ranked[0]
    if len(ranked) == 1 and len(states) == 1:
        return {"decided": _finite(lowest.get("error")), "lowest": lowest["name"], "next": None, "gap": None,
                "errors": (lowest.get("error"), None), "separation": None,
                "reason": "a single candidate within the margin" if _finite(lowest.get("error"))
                else "the only candidate has no error bar"}
    if len(ranked) < len(states):
        missing = [s["name"] for s in states if not _finite(s.get("energy"))]
        return {"decided": False, "lowest": lowest["name"], "next": None, "gap": None,
                "errors": (lowest.get("error"), None), "separation": None,
                "reason": f"no continuum energy for {', '.join(missing)}"}
    second = ranked[1]
    gap = second["energy"] - lowest["energy"]
    errors = (lowest.get("error"), second.get("error"))
    if not (_finite(errors[0]) and _finite(errors[1])):
        return {"decided": False, "lowest": lowest["name"], "next": second["name"], "gap": gap, "errors": errors,
                "separation": None, "reason": "an error bar is unknown"}
    bars = errors[0] + errors[1]
    separation = gap / bars if bars > 0 else math.inf
    decided = gap > bars
    reason = (f"gap {gap:.3g} exceeds the error bars {errors[0]:.2g} + {errors[1]:.2g}" if decided
              else f"gap {gap:.3g} within the error bars {errors[0]:.2g} + {errors[1]:.2g}: the intervals overlap")
    return {"decided": decided, "lowest": lowest["name"], "next": second["name"], "gap": gap, "errors": errors,
            "separation": separation, "reason": reason}


def _finite(value) -> bool:
    return value is not None and math.isfinite(value)
