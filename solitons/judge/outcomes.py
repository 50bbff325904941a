"""The names of how a relaxation ended and of what the relaxed state is: one vocabulary
shared by the minimisers (`MinimiseResult.status`), the verdicts (`solitons.judge.diagnose`),
the result files, the catalogue and the command's exit codes.

`Outcome` is a `str` enum, so a value read back from a JSON summary or an HDF5
attribute compares equal to its member (``Outcome.NON_FINITE == "non-finite"``).
"""

from __future__ import annotations

from enum import StrEnum


class Outcome(StrEnum):
    # how the minimiser stopped
    CONVERGED = "converged"            # the stopping rule was met
    MAX_STEPS = "max_steps"            # step limit (or line-search floor) reached first
    NON_FINITE = "non-finite"          # the energy or force became NaN/Inf
    RUNAWAY = "runaway"                # the energy fell far below its start: unbounded
    INTERRUPTED = "interrupted"        # SIGINT / SIGTERM: state checkpointed, no verdict
    NUMERICAL_BLOWUP = "numerical blow-up"  # a flow's step kept raising the energy: not physics
    # verdicts on the relaxed state (solitons.judge.diagnose documents each)
    STABLE = "stable"
    COLLAPSED = "collapsed"
    UNDER_RESOLVED = "under-resolved"
    SPREAD = "spread"
    BOX_TOO_SMALL = "box too small"
    UNWOUND = "unwound"
    UNBOUNDED = "unbounded"
    SADDLE = "saddle"
    NOT_CONVERGED = "not converged"


STATUSES = (Outcome.CONVERGED, Outcome.MAX_STEPS, Outcome.NON_FINITE, Outcome.RUNAWAY, Outcome.INTERRUPTED,
            Outcome.NUMERICAL_BLOWUP)
VERDICTS = (Outcome.STABLE, Outcome.COLLAPSED, Outcome.UNDER_RESOLVED, Outcome.SPREAD, Outcome.BOX_TOO_SMALL,
            Outcome.UNWOUND, Outcome.UNBOUNDED, Outcome.SADDLE, Outcome.NOT_CONVERGED, Outcome.NON_FINITE,
            Outcome.NUMERICAL_BLOWUP)
