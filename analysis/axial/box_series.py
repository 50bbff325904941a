"""A_{1,1} of the Skyrme-Faddeev model on growing half planes (the box error of the
massless soliton), fitted by E(R) = E_inf + c / R^3 through the two largest.

    python analysis/axial/box_series.py > analysis/axial/box_series.txt

h = 0.08, x = 2 sinh(xi / 2) with xi up to 6, 7, 8, 9.5 (cylinders of radius R = 20 to
114 and height 2R), sixth-order scheme, L-BFGS to max force 1e-6 (a run that stops at
the rounding level of E first is marked)."""

import time

from solitons.axial.model import AxialGrid, AxialModel, axial_initial, hopf_charge
from solitons.model.terms import BUILTIN_TERMS, Term
from solitons.relaxation.minimise import StoppingRule, minimise

TERMS = (Term("dirichlet", BUILTIN_TERMS["dirichlet"], 1.0), Term("skyrme_faddeev", BUILTIN_TERMS["skyrme_faddeev"], 1.0))
# 3D, analysis/continuum: the h -> 0 limits in cubes of side 40.07 and 81.87
CUBES = ((20.04, 1.2252259), (40.94, 1.2249663))


def main() -> None:
    rows = []
    print("| xi max | R (rho reach) | sites | E | virial | status | steps | seconds |")
    print("| --- | --- | --- | --- | --- | --- | --- | --- |")
    for xi in (6.0, 7.0, 8.0, 9.5):
        grid = AxialGrid.covering(xi, xi, 0.08, 1, (2.0, 2.0))
        model = AxialModel(TERMS, grid, "sixth")
        start = time.perf_counter()
        run = minimise(model, axial_initial(grid, 1, 1.0), "lbfgs",
                       StoppingRule(max_steps=20000, force_tol=1e-6, energy_tol=0.0), lbfgs_memory=8)
        radius = float(grid.axes()[0][-1])
        rows.append((radius, run.energy))
        assert abs(hopf_charge(run.field, grid) - 1.0) < 1e-9
        print(f"| {xi:g} | {radius:.2f} | {grid.shape[0]}x{grid.shape[1]} | {run.energy:.8f} | "
              f"{model.virial(run.field)['total']:+.2e} | {run.status} | {run.steps} | "
              f"{time.perf_counter() - start:.0f} |", flush=True)
    (r1, e1), (r2, e2) = rows[-2:]
    c = (e1 - e2) / (r1**-3 - r2**-3)
    limit = e2 - c * r2**-3
    print(f"\naxial: E_inf = {limit:.7f} (c = {c:.3f}); residuals of the smaller ones: "
          + ", ".join(f"{e - (limit + c * r**-3):+.1e}" for r, e in rows[:-2]))
    (a1, f1), (a2, f2) = CUBES
    c3 = (f1 - f2) / (a1**-3 - a2**-3)
    limit3 = f2 - c3 * a2**-3
    print(f"3D cubes (half sides {a1}, {a2}): E_inf = {limit3:.7f} (c = {c3:.3f}); "
          f"relative difference {(limit - limit3) / limit3:+.1e}")


if __name__ == "__main__":
    main()
