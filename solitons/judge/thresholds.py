"""Every number a verdict or a warning compares with, in one place.

The measuring pass (`solitons.judge.evidence`) and the decision table
(`solitons.judge.rules`) read these; nothing else holds a threshold of its own.  Each is
in the units of the quantity it bounds (lengths in model units, fractions of the energy,
relative energies) and says where its value came from.
"""

from __future__ import annotations

# --- the charge -------------------------------------------------------------------------
CHARGE_TOLERANCE = 0.05  # |Q - round(Q)| beyond this is flagged (lattice does not resolve the field)
CHARGE_LOST = 0.5        # |Q - Q_expected| beyond this: the charge changed (unwound)
# Relative tolerance of the check of the initial data's charge against its family formula.
CHARGE_CHECK = 0.02
# The linking number of two preimages disagreeing with the Whitehead integral by more than
# this (relative to max(1, |Q|)) says the curves or the field are under-resolved.
LINKING_DISAGREEMENT = 0.1

# --- the box ----------------------------------------------------------------------------
BOUNDARY_FRACTION_LIMIT = 1e-3  # energy share on the two outermost layers: the soliton touches the box
BOX_VERDICT_FRACTION = 5e-3     # above this, converged and no longer growing: `box too small`
BOUNDARY_SPREAD = 0.05          # above this, while growing with no balance in sight: `spread`
SPREAD_FRACTION = 0.45          # size above this fraction of the half side (still growing): `spread`
SPREAD_VIRIAL = 0.5  # a state squeezed this far from balance by its box is no soliton held by it
# energy outside the box half side that a "needed box side" aims at (a proxy of the box
# error, which is of this order for a soliton squeezed by a fixed border)
OUTSIDE_TARGET = 1e-4
# model lengths: wider border cells on a stretched grid are warned about (analysis/
# stretched_grid_study.txt: Q = 1 held with cells up to 5.3 wide, unwound with 17.4)
STRETCH_CELL_LIMIT = 8.0

# --- Derrick balance and the lattice ----------------------------------------------------
VIRIAL_LIMIT = 0.05    # |virial residual| beyond this is warned about
SPACING_LIMIT = 0.3    # largest spacing / core thickness beyond this: `under-resolved`
COLLAPSE_CELLS = 2.0   # a core thinned to this many spacings has reached the lattice scale
TREND_CHANGE = 0.05    # the virial must move this much towards balance to count as a trend
THINNING = 0.9         # the core counts as thinning when its last thickness is below this x its first
GROWN = 1.1            # the soliton counts as grown when its last size is above this x its first ...
STILL_GROWING = 1.02   # ... and as still growing when above this x the size two monitors before
FALLING_STEPS = 10     # the energy counts as falling when below its value this many steps before

# A measured value within this band above a verdict's threshold keeps the milder verdict
# and gets a warning naming the value and the threshold (no knife edge: spacing / core 0.302
# against 0.3 was `under-resolved`, exit 1, for a run that was converged and sound).
VERDICT_MARGIN = 0.1

# --- saddles ----------------------------------------------------------------------------
# A perturbed copy that relaxes lower than the state (relaxed alike) by more than
# SADDLE_DROP (relative) shows a descent direction: the state is a saddle.  Smaller drops
# come from the lattice itself: the axial Q = 2 state, a minimum (docs/references.md
# [R14]), gave perturbed copies 1.3e-4 lower at h = 0.2 (61^3, box 12) and 4.8e-5 lower at
# h = 0.15 (81^3), a cubic lattice preferring some orientations, shrinking with h
# (measured).  The axial Q = 3 saddle gave 6.8e-3 to 9.3e-3 (measured; [R17]).  Drops
# above LATTICE_DROP but below SADDLE_DROP are reported with a warning, not a verdict.
SADDLE_DROP = 1e-3
LATTICE_DROP = 1e-5

# --- the stopping rule ------------------------------------------------------------------
# a run the energy rule stopped with max force above this x force_tol is flagged (measured:
# every run but Q = 1 of analysis/survey_q1_16 at h = 0.2 stopped so, with max force
# 0.006-0.19 against force_tol 1e-3; the Q = 13 one, continued 2000 steps, fell a further
# 6e-6 relative with the force still at 0.012)
ENERGY_STOP_FORCE = 10.0
