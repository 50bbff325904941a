"""How the charge-1 Skyrme-Faddeev energy and virial depend on box side and spacing.

Relaxes the Hopf map (size 1) with L-BFGS on fixed-boundary boxes for a set of box sides
and spacings, both lattice schemes, and prints one row per run: scheme, box side, spacing,
points, E, E2, E4, virial, Q, max force, steps, wall seconds.  Usage:

    python analysis/q1_box_and_spacing.py [--quick] > analysis/q1_box_and_spacing.txt
"""

from __future__ import annotations

import argparse
import time

import solitons  # noqa: F401  (enables float64)
from solitons.lattice.grid import Grid
from solitons.measure.topology import hopf_charge
from solitons.model.energy import Model
from solitons.model.terms import BUILTIN_TERMS, Term
from solitons.relaxation.initial import hopf_map
from solitons.relaxation.minimise import StoppingRule, minimise

TERMS = (Term("dirichlet", BUILTIN_TERMS["dirichlet"]),
         Term("skyrme_faddeev", BUILTIN_TERMS["skyrme_faddeev"]))


def run(scheme: str, side: float, spacing: float, rule: StoppingRule):
    points = int(round(side / spacing)) + 1
    grid = Grid.centred(points, spacing, "fixed")
    model = Model(TERMS, grid, scheme)
    start = time.perf_counter()
    result = minimise(model, hopf_map(grid, 1.0), "lbfgs", rule)
    parts = model.energies(result.field)
    virial = model.virial(result.field)["total"]
    charge = hopf_charge(result.field, grid)
    print(f"{scheme:7s} {grid.side[0]:6.2f} {spacing:6.3f} {points:4d} {result.energy:.5f} "
          f"{parts['dirichlet']:.5f} {parts['skyrme_faddeev']:.5f} {virial:+.4f} {charge:.6f} "
          f"{result.max_force:.1e} {result.steps:5d} {time.perf_counter() - start:7.1f}", flush=True)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--schemes", default="second,fourth")
    args = parser.parse_args()
    rule = StoppingRule(max_steps=3000, force_tol=1e-3, energy_tol=1e-10, patience=20)
    print("scheme   side      h    N  E        E2       E4       virial  Q        force    steps  wall_s")
    boxes = [(8, 0.2), (12, 0.2), (16, 0.2), (20, 0.2)]
    spacings = [(12, 0.25), (12, 0.15), (12, 0.12)]
    if args.quick:
        boxes, spacings = boxes[:2], spacings[:1]
    for scheme in args.schemes.split(","):
        for side, h in boxes + spacings:
            run(scheme, side, h, rule)


if __name__ == "__main__":
    main()
