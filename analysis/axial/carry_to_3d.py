"""Each axial result of this folder relaxed again in 3D, started from the axial field
rotated out onto the 3D grid (initial.family = "result"), once as it is (the saddle
check then perturbs the relaxed state and relaxes again) and once with 2 % noise.

    python analysis/axial/carry_to_3d.py > analysis/axial/carry_to_3d.md

Needs runs/axial_NAME from the axial configurations here.  3D grid: 81^3, h = 0.2 at
the centre, x = 3 sinh(xi / 3) (box side 43), sixth-order scheme, L-BFGS to 1e-3.
"""

import time
from pathlib import Path

import solitons

GRID = {"points": 81, "spacing": 0.2, "stretch": 3.0, "scheme": "sixth"}
NAMES = ("a11", "a12", "a31", "a22")


def main() -> None:
    print("| axial | E axial (h = 0.05) | Q | 3D start | E 3D | Q 3D | label 3D | verdict 3D | 3D wall |")
    print("| --- | --- | --- | --- | --- | --- | --- | --- | --- |")
    for name in NAMES:
        axial = solitons.load(Path("runs") / f"axial_{name}")
        for noise in (0.0, 0.02):
            if name == "a11" and noise:
                continue  # A_{1,1}: the calibration of the 3D lattice only
            start = time.perf_counter()
            run = solitons.relax(None, out=Path("runs") / f"axial_{name}_3d_noise{noise:g}", overwrite=True,
                                 grid=GRID, terms={"dirichlet": {}, "skyrme_faddeev": {}},
                                 initial={"family": "result", "file": str(axial.path), "noise": noise})
            wall = time.perf_counter() - start
            print(f"| {axial.summary['family']} | {axial.energy:.6f} | {axial.charge:.4f} | "
                  f"{'rotated out' if not noise else 'rotated out + 2 % noise'} | {run.energy:.6f} | "
                  f"{run.charge:.4f} | {run.summary['label']} | {run.verdict} | {wall:.0f} s |", flush=True)


if __name__ == "__main__":
    main()
