"""Minimisers side by side on the survey's own starts (analysis/survey_q1_16/survey.toml):
steps, gradient evaluations, wall time and final largest / RMS force per method and
start, all in one run.  The stopping rule is the force rule alone (force_tol 1e-3,
energy_tol 0), so every method either meets it or runs out of steps.

    python analysis/bench_minimisers.py > analysis/bench_minimisers.md          # Q = 3, 5, 7
    python analysis/bench_minimisers.py --charges 3 5 7 12 16 > ...             # hours

Wall times are from one process on this project's 2-core machine; compare ratios within
one run (methods run one after another on the same start).
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np

from solitons.assemble import make_grid, make_initial_field, make_model
from solitons.config import load
from solitons.relaxation.minimise import StoppingRule, minimise

HERE = Path(__file__).parent
# The survey's family for each charge (its lowest state where the survey found one; the
# grid side follows the family's box: 81^3 for side 16, 91^3 for 18, 101^3 for 20).
STARTS = {
    3: ('family = "axial"\na = 3\nb = 1\nsize = 1.4', 81),
    5: ('family = "rational"\nalpha = 1\nbeta = 1\nfactors = [[1, 1], [1, 2, -1.0]]\nsize = 1.6', 81),
    7: ('family = "torus_knot"\nalpha = 2\nbeta = 1\na = 3\nb = 2\nsize = 1.8', 81),
    12: ('family = "torus_knot"\nalpha = 1\nbeta = 2\na = 5\nb = 2\nsize = 2.5', 91),
    16: ('family = "rational"\nalpha = 1\nbeta = 1\nfactors = [[2, 4], [2, 4, -1.0]]\nsize = 2.4', 101),
}
METHODS = {"lbfgs m=4, second-order W (before)": ("lbfgs", 4, "laplacian_second"),
           "lbfgs m=4 (default)": ("lbfgs", 4, "laplacian"), "lbfgs m=10": ("lbfgs", 10, "laplacian"),
           "newton_krylov": ("newton_krylov", 4, "laplacian"), "arrested_newton": ("arrested_newton", 4, "laplacian")}


def config(start: str, points: int) -> str:
    return (f"[grid]\npoints = {points}\nspacing = 0.2\n[initial]\n{start}\nnoise = 0.02\nseed = 0\n"
            "[relax]\nforce_tol = 1e-3\nenergy_tol = 0.0\n")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--charges", type=int, nargs="+", default=[3, 5, 7])
    parser.add_argument("--methods", nargs="+", default=list(METHODS))
    parser.add_argument("--max-steps", type=int, default=4000)
    parser.add_argument("--json", default=str(HERE / "bench_minimisers.json"))
    args = parser.parse_args()
    rows = []
    print("| Q | grid | method | status | steps | evaluations | wall s | E | max force | RMS force |")
    print("|---|---|---|---|---|---|---|---|---|---|")
    for q in args.charges:
        start, points = STARTS[q]
        spec = load(None, text=config(start, points))
        grid = make_grid(spec)
        model = make_model(spec, grid)
        field0 = make_initial_field(spec, grid)
        model.evaluate(field0)  # compiled before any timing
        for name in args.methods:
            method, memory, preconditioner = METHODS[name]
            begin = time.perf_counter()
            result = minimise(model, field0, method, StoppingRule(args.max_steps, 1e-3, 0.0, 20),
                              lbfgs_memory=memory, preconditioner=preconditioner)
            wall = time.perf_counter() - begin
            _, gradient = model.evaluate(result.field)
            forces = np.linalg.norm(np.asarray(gradient) / model.site_scale(), axis=-1)[grid.free_mask()[..., 0] > 0]
            row = {"Q": q, "grid": f"{points}^3, h = 0.2", "method": name, "status": str(result.status),
                   "steps": result.steps, "evaluations": result.evaluations, "wall_seconds": round(wall, 1),
                   "energy": result.energy, "max_force": float(forces.max()),
                   "rms_force": float(np.sqrt(np.mean(forces**2)))}
            rows.append(row)
            print(f"| {q} | {row['grid']} | {name} | {row['status']} | {row['steps']} | {row['evaluations']} | "
                  f"{row['wall_seconds']} | {row['energy']:.8f} | {row['max_force']:.2e} | {row['rms_force']:.2e} |",
                  flush=True)
            Path(args.json).write_text(json.dumps(rows, indent=1))
    print(f"\n{sys.version.split()[0]}; rows also in {Path(args.json).name}")


if __name__ == "__main__":
    main()
