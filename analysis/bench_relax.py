"""Time and evaluations to relax Q = 1 from the Hopf map, every minimiser side by side on
one grid and one stopping rule (max tangent force < 1e-3, Euler-Lagrange units; no
energy-change criterion), with the ratio of wall time to arrested Newton flow and the
final energies (which must agree) and charges.

    python analysis/bench_relax.py [--points 64] [--spacing 0.125] > analysis/bench_relax.txt
"""

from __future__ import annotations

import argparse
import time

import solitons  # noqa: F401
from solitons.energy import Model
from solitons.grid import Grid
from solitons.initial import hopf_map
from solitons.minimise import METHODS, StoppingRule, minimise
from solitons.terms import BUILTIN_TERMS, Term
from solitons.topology import hopf_charge


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--points", type=int, default=64)
    parser.add_argument("--spacing", type=float, default=0.125)
    parser.add_argument("--max-steps", type=int, default=4000)
    args = parser.parse_args()
    grid = Grid.centred(args.points, args.spacing, "fixed")
    terms = (Term("dirichlet", BUILTIN_TERMS["dirichlet"]),
             Term("skyrme_faddeev", BUILTIN_TERMS["skyrme_faddeev"]))
    model = Model(terms, grid)
    start_field = hopf_map(grid, 1.0)
    rule = StoppingRule(max_steps=args.max_steps, force_tol=1e-3, energy_tol=0.0)
    print(f"grid {args.points}^3, h = {args.spacing}, fixed border, second-order scheme; "
          f"stop at max force < 1e-3 or {args.max_steps} steps")
    print("method            status      steps  evals   wall_s  E               Q          time/ANF")
    rows = {}
    for method in ("arrested_newton",) + tuple(m for m in METHODS if m != "arrested_newton"):
        start = time.perf_counter()
        result = minimise(model, start_field, method, rule)
        wall = time.perf_counter() - start
        rows[method] = wall
        print(f"{method:16s}  {result.status:10s} {result.steps:6d} {result.evaluations:6d} {wall:8.1f}  "
              f"{result.energy:.10f}  {hopf_charge(result.field, grid):.6f}  {wall / rows['arrested_newton']:6.2f}",
              flush=True)


if __name__ == "__main__":
    main()
