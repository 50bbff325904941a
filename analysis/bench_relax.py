"""Time and evaluations to relax Q = 1 from the Hopf map, every minimiser side by side on
one grid and one stopping rule (max tangent force < 1e-3, Euler-Lagrange units; no
energy-change criterion), with the ratio of wall time to arrested Newton flow on the jax
route (the baseline) and the final energies (which must agree) and charges.  Each
minimiser runs on the jax route and on the fused numba kernel (the flows and scipy call
the kernel through a host callback inside their jitted steps; L-BFGS calls it directly),
and L-BFGS also with the coarse start (relax on spacing 2h, interpolate, finish on h) and
without its shifted-Laplacian preconditioner (``plain``).

    python analysis/bench_relax.py [--points 64] [--spacing 0.125] [--scheme second] [--correction NAME:COUPLING]
        [--user NAME:COUPLING] [--cases ...] > analysis/bench_relax.txt
"""

from __future__ import annotations

import argparse
import time

import numpy as np

import solitons  # noqa: F401
from solitons.lattice.grid import Grid
from solitons.measure.topology import hopf_charge
from solitons.model.energy import Model
from solitons.model.terms import BUILTIN_TERMS, Term
from solitons.relaxation import minimise as minimise_module
from solitons.relaxation.initial import hopf_map, interpolate_field
from solitons.relaxation.minimise import METHODS, StoppingRule, minimise


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--points", type=int, default=64)
    parser.add_argument("--spacing", type=float, default=0.125)
    parser.add_argument("--max-steps", type=int, default=4000)
    parser.add_argument("--shift", type=float, default=None, help="preconditioner shift (default: the tool's)")
    parser.add_argument("--scheme", default="second")
    parser.add_argument("--correction", action="append", default=[],
                        help="NAME:COUPLING, a built-in term added to the plain model (repeatable)")
    parser.add_argument("--user", action="append", default=[],
                        help="NAME:COUPLING, a user-file copy of a built-in term (tests/user_copies.py: log_quartic, "
                             "sextic) added to the plain model (repeatable)")
    parser.add_argument("--cases", default=None,
                        help="comma-separated method:route[:coarse][:f32][:plain] list (f32: L-BFGS history "
                             "stored in float32; plain: L-BFGS without the preconditioner); the first is the baseline "
                             "(default: arrested_newton:jax, then every method on both routes)")
    args = parser.parse_args()
    grid = Grid.centred(args.points, args.spacing, "fixed")
    terms = (Term("dirichlet", BUILTIN_TERMS["dirichlet"]),
             Term("skyrme_faddeev", BUILTIN_TERMS["skyrme_faddeev"]))
    terms += tuple(Term(c.split(":")[0], BUILTIN_TERMS[c.split(":")[0]], float(c.split(":")[1])) for c in args.correction)
    if args.user:
        from pathlib import Path

        from solitons.model.userterms import load_user_term

        copies = Path(__file__).parents[1] / "tests" / "user_copies.py"
        terms += tuple(Term(f"user {c.split(':')[0]}", load_user_term(copies, c.split(":")[0])[0],
                            float(c.split(":")[1])) for c in args.user)
    start_field = hopf_map(grid, 1.0)
    rule = StoppingRule(max_steps=args.max_steps, force_tol=1e-3, energy_tol=0.0)
    print(f"model {' + '.join(f'{t.coupling:g} {t.name}' for t in terms)}"
          + ("; one evaluation before each timed run compiles the route's code" if args.user else ""))
    print(f"grid {args.points}^3, h = {args.spacing}, fixed border, {args.scheme}-order scheme; "
          f"stop at max force < 1e-3 or {args.max_steps} steps; preconditioner shift "
          f"{'default' if args.shift is None else args.shift}")
    if args.cases:
        cases = [(c.split(":")[0], c.split(":")[1], *(flag in c.split(":")[2:] for flag in ("coarse", "f32", "plain")))
                 for c in args.cases.split(",")]
    else:
        cases = [("arrested_newton", "jax", False, False, False)]
        cases += [(m, b, False, False, False) for m in METHODS for b in ("jax", "numba")
                  if (m, b) != ("arrested_newton", "jax")]
        cases += [("lbfgs", "numba", True, False, False), ("lbfgs", "numba", False, True, False),
                  ("lbfgs", "numba", False, False, True)]
    print(f"method            route  coarse hist precond status      steps  evals   wall_s  E               Q          "
          f"time/{cases[0][0]}-{cases[0][1]}")
    baseline = None
    first_energy = None
    for method, backend, coarse, f32, plain in cases:
        preconditioner = "none" if plain else "laplacian"
        minimise_module.HISTORY_DTYPE = np.float32 if f32 else np.float64
        model = Model(terms, grid, args.scheme, backend)
        if args.user:  # compile (or load) the route's code outside the timed part
            model.evaluate(start_field)
        start = time.perf_counter()
        field0, coarse_steps = start_field, 0
        if coarse:
            coarse_grid = grid.coarsened()
            first = minimise(Model(terms, coarse_grid, args.scheme, backend), hopf_map(coarse_grid, 1.0), method, rule,
                             preconditioner=preconditioner, preconditioner_shift=args.shift)
            field0, coarse_steps = interpolate_field(first.field, coarse_grid, grid), first.steps
        result = minimise(model, field0, method, rule, preconditioner=preconditioner,
                          preconditioner_shift=args.shift)
        wall = time.perf_counter() - start
        baseline = baseline or wall
        first_energy = result.energy if first_energy is None else first_energy
        steps = f"{coarse_steps}+{result.steps}" if coarse else str(result.steps)
        shown = ("none" if plain else "lapl") if method == "lbfgs" else "-"
        print(f"{method:16s}  {backend:5s}  {'yes' if coarse else 'no':5s}  {'f32' if f32 else 'f64'}  {shown:6s}  "
              f"{result.status:10s} {steps:>8s} "
              f"{result.evaluations:6d} {wall:8.1f}  {result.energy:.10f}  {hopf_charge(result.field, grid):.6f}  "
              f"{wall / baseline:6.3f}  dE vs first {result.energy - first_energy:+.1e}", flush=True)


if __name__ == "__main__":
    main()
