"""Three points of the axial extended-quartic scan (b = 0, 0.1, 0.3) relaxed in 3D on
the same stretched box (x = 2 sinh(xi / 2), xi in [-6, 6], side 40.07) at h = 0.2 and
0.125 at the centre, sixth-order scheme, noise-free axial start, no saddle check; the
two levels extrapolated with h^6 (the order of the scheme; analysis/continuum).

    python analysis/axial/scan_vs_3d.py > analysis/axial/scan_vs_3d.md

Reads the axial values from runs/axial_scan/scan.csv (solitons scan
analysis/axial/scan_extended_quartic.toml --out runs/axial_scan)."""

import csv
import time

import solitons

LEVELS = ((61, 0.2), (97, 0.125))


def main() -> None:
    with open("runs/axial_scan/scan.csv") as handle:
        axial = {round(float(r["terms.extended.coupling"]), 6): float(r["energy"]) for r in csv.DictReader(handle)}
    print("| b | E axial (h = 0.1) | E 3D h = 0.2 | E 3D h = 0.125 | 3D extrapolated (h^6) | axial / 3D - 1 | 3D wall |")
    print("| --- | --- | --- | --- | --- | --- | --- |")
    for b in (0.0, 0.1, 0.3):
        energies, wall = [], 0.0
        for points, h in LEVELS:
            start = time.perf_counter()
            run = solitons.relax(None, grid={"points": points, "spacing": h, "stretch": 2.0, "scheme": "sixth"},
                                 terms={"dirichlet": {}, "skyrme_faddeev": {},
                                        "extended": {"kind": "dirichlet_squared", "coupling": b}},
                                 relax={"force_tol": 2e-4, "saddle_check": False})
            wall += time.perf_counter() - start
            assert abs(run.charge - 1.0) < 1e-3 and run.verdict == "stable", (b, h, run.verdict)
            energies.append(run.energy)
        ratio = (LEVELS[0][1] / LEVELS[1][1]) ** 6
        limit = energies[1] + (energies[1] - energies[0]) / (ratio - 1.0)
        print(f"| {b:g} | {axial[b]:.6f} | {energies[0]:.6f} | {energies[1]:.6f} | {limit:.6f} | "
              f"{axial[b] / limit - 1:+.1e} | {wall:.0f} s |", flush=True)


if __name__ == "__main__":
    main()
