"""Energy error against grid points, uniform against stretched grids (Q = 1 of the
Skyrme-Faddeev model, fourth-order scheme, fixed vacuum border, L-BFGS on the numba kernel).

A stretched grid (solitons.lattice.grid: x = s sinh(xi / s) per axis) keeps the spacing h at the
centre and reaches further out with the same number of points.  Every case relaxes the
Hopf map (size 1) to max force < FORCE_TOL (Euler-Lagrange units) or a relative energy
change below 1e-11 for 20 steps.  The reference energy is the continuum limit estimated
from the largest stretched runs at two centre spacings, E(h) = E_inf + c h^4 (the scheme is
fourth order; the residual box error of those runs is read off the stretch series).

    python analysis/stretched_grid_study.py > analysis/stretched_grid_study.txt

Prints one row per case as it finishes, then the reference and the error table, and draws
analysis/figures/stretched_grid_study.png.  Measured rows are in stretched_grid_study.txt.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import solitons  # noqa: F401
from solitons.lattice.grid import Grid
from solitons.measure.topology import hopf_charge
from solitons.model.energy import Model
from solitons.model.terms import BUILTIN_TERMS, Term
from solitons.relaxation.initial import hopf_map
from solitons.relaxation.minimise import StoppingRule, minimise

FORCE_TOL = 2e-4
HERE = Path(__file__).parent
# (points, centre spacing, stretch); stretch 0 = uniform
STUDY = [(n, h, s) for n in (41, 61, 81) for h in (0.2, 0.25) for s in (0.0, 2.0, 3.0, 5.0)]
REFERENCES = [(121, 0.2, 3.0), (121, 0.15, 3.0)]


def relax(points: int, spacing: float, stretch: float) -> dict:
    grid = Grid.centred(points, spacing, "fixed", stretch)
    terms = (Term("dirichlet", BUILTIN_TERMS["dirichlet"]), Term("skyrme_faddeev", BUILTIN_TERMS["skyrme_faddeev"]))
    model = Model(terms, grid, "fourth", "numba")
    start = time.perf_counter()
    result = minimise(model, hopf_map(grid, 1.0), "lbfgs", StoppingRule(8000, FORCE_TOL, 1e-11, 20))
    wall = time.perf_counter() - start
    energies = model.energies(result.field)
    return {"points": points, "spacing": spacing, "stretch": stretch, "side": grid.side[0],
            "energy": result.energy, "e2": energies["dirichlet"], "e4": energies["skyrme_faddeev"],
            "virial": model.virial(result.field)["total"], "charge": hopf_charge(result.field, grid),
            "status": result.status, "steps": result.steps, "force": result.max_force, "wall": wall}


def row(r: dict) -> str:
    return (f"{r['points']:4d} {r['spacing']:5.3f} {r['stretch']:4.1f} {r['side']:7.2f} {r['energy']:.6f} "
            f"{r['e2']:.5f} {r['e4']:.5f} {r['virial']:+.4f} {r['charge']:.5f} {r['status']:>10s} "
            f"{r['steps']:5d} {r['force']:.1e} {r['wall']:7.1f}")


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--quick", action="store_true", help="only N = 41 and one reference (a smoke run)")
    parser.add_argument("--json", default=str(HERE / "stretched_grid_study.json"),
                        help="rows are written here; rows already in it are reused (delete it to rerun all)")
    args = parser.parse_args()
    done = {}
    if Path(args.json).exists():
        done = {(r["points"], r["spacing"], r["stretch"]): r for r in json.loads(Path(args.json).read_text())}
    study = [c for c in STUDY if c[0] == 41] if args.quick else STUDY
    references = REFERENCES[:1] if args.quick else REFERENCES
    print(f"Q = 1 from the Hopf map, fourth-order scheme, fixed border, L-BFGS (numba kernel); stop at max force "
          f"< {FORCE_TOL:g} or |dE/E| < 1e-11 for 20 steps; stretch s: x = s sinh(xi / s) per axis, 0 = uniform")
    print("   N     h    s    side  E         E2      E4      virial  Q          status steps force   wall_s")
    rows = []
    for case in references + study:
        rows.append(done.get(case) or relax(*case))
        print(row(rows[-1]) + ("  (reused)" if case in done else ""), flush=True)
        done[case] = rows[-1]
        Path(args.json).write_text(json.dumps(list(done.values()), indent=1) + "\n")
    refs = {r["spacing"]: r["energy"] for r in rows[:len(references)]}
    if len(refs) == 2:
        (h1, e1), (h2, e2) = sorted(refs.items())
        coefficient = (e2 - e1) / (h2**4 - h1**4)
        e_inf = e1 - coefficient * h1**4
        print(f"\nreference: E(121^3, s = 3) = {refs[0.2]:.6f} at h = 0.2 and {refs[0.15]:.6f} at h = 0.15; "
              f"E(h) = E_inf + c h^4 gives E_inf = {e_inf:.6f}, c = {coefficient:+.4f}")
    else:
        e_inf, coefficient = refs[0.2], 0.0
        print(f"\nreference (quick run): E(121^3, s = 3, h = 0.2) = {e_inf:.6f}")
    print("box error: E - E(h) with E(h) = E_inf + c h^4 (the same spacing in an unbounded box); "
          "total error: E - E_inf")
    print("\n   N  points     h    s    side  E         box error           total error         steps  wall_s")
    for r in rows[len(references):]:
        box = r["energy"] - (e_inf + coefficient * r["spacing"] ** 4)
        total = r["energy"] - e_inf
        print(f"{r['points']:4d} {r['points']**3:7d} {r['spacing']:5.3f} {r['stretch']:4.1f} {r['side']:7.2f} "
              f"{r['energy']:.6f} {box:+.2e} ({box / e_inf:+.1e})  {total:+.2e} ({total / e_inf:+.1e})  "
              f"{r['steps']:5d} {r['wall']:7.1f}"
              + (f"  UNWOUND (Q = {r['charge']:.3f})" if abs(r["charge"] - 1) > 0.5 else ""))
    figure(rows[len(references):], e_inf, coefficient, HERE / "figures" / "stretched_grid_study.png")


def figure(rows, e_inf, coefficient, path) -> None:
    import matplotlib

    rows = [r for r in rows if abs(r["charge"] - 1) < 0.5]  # unwound runs have no error to plot
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, axes = plt.subplots(1, 2, figsize=(11, 4.5), dpi=120, constrained_layout=True)
    for spacing, marker in ((0.2, "o"), (0.25, "s")):
        reference = e_inf + coefficient * spacing**4
        for label, pick in (("uniform", lambda r: r["stretch"] == 0.0),
                            ("best stretched", lambda r: r["stretch"] > 0.0)):
            points, box_errors, total_errors = [], [], []
            for n in sorted({r["points"] for r in rows}):
                chosen = [r for r in rows if r["points"] == n and r["spacing"] == spacing and pick(r)]
                if chosen:
                    best = min(chosen, key=lambda r: abs(r["energy"] - reference))
                    points.append(n**3)
                    box_errors.append(abs(best["energy"] - reference) / e_inf)
                    total_errors.append(min(abs(r["energy"] - e_inf) for r in chosen) / e_inf)
            style = "-" if label == "uniform" else "--"
            axes[0].loglog(points, box_errors, marker=marker, linestyle=style, label=f"{label}, h = {spacing}")
            axes[1].loglog(points, total_errors, marker=marker, linestyle=style, label=f"{label}, h = {spacing}")
    axes[0].set_ylabel("|E - E(h)| / E_inf   (box error)")
    axes[1].set_ylabel("|E - E_inf| / E_inf   (total error)")
    for ax in axes:
        ax.set_xlabel("grid points (cost of one evaluation)")
        ax.legend(fontsize=8)
    fig.suptitle("Q = 1, fourth-order scheme, uniform against stretched grids (x = s sinh(xi / s))")
    path.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(path)
    print(f"figure: {path}", file=sys.stderr)


if __name__ == "__main__":
    main()
