"""Continuum values: one configuration relaxed at three or more resolutions and
extrapolated to h -> 0 (the I/O edge; the fit itself is `solitons.measure.extrapolation`).

A ``[continuum]`` table in the run configuration lists the centre spacings::

    [continuum]
    spacings = [0.25, 0.2, 0.15]

Every level keeps the base grid's box: the same extent (points - 1) h per axis in the
computational coordinate and the same stretch, so the box error is one and the same at
every level and only the lattice error changes.  The points per axis are rounded and the
spacing adjusted so that the box is exact.  Levels run from the coarsest to the finest;
each starts from the previous result, interpolated (cubic splines).  A level whose
finished summary has the same configuration hash is reused.

Per term, for the total energy and for the virial: a fit Q(h) = Q_inf + c h^p with p the
scheme's order, its limit and error bar (`fit_power_limit`).  Outputs in the output
directory: ``continuum.csv`` (one row per level), ``continuum.md`` (levels and limits),
``continuum.json`` (everything), ``continuum.png`` (E against h^p with the fit) and one
run directory per level.
"""

from __future__ import annotations

import csv
import json
import shutil
import sys
import time
from pathlib import Path
from typing import TextIO

import numpy as np

from solitons.config import ConfigError, RunSpec, load, read_campaign_table
from solitons.io.results import atomic_write_text, read_result, write_json
from solitons.lattice.grid import STENCILS
from solitons.measure.extrapolation import fit_power_limit
from solitons.relaxation.initial import interpolate_field
from solitons.run import RESULT, SUMMARY, make_grid, relax, run_hash

TABLE = "continuum"


def validate_spacings(source: str, key: str, spacings) -> list[float]:
    """Three or more distinct positive spacings, coarsest first; ConfigError otherwise."""
    if (not isinstance(spacings, list) or len(spacings) < 3
            or not all(isinstance(h, (int, float)) and not isinstance(h, bool) and np.isfinite(h) and h > 0
                       for h in spacings)
            or len(set(spacings)) != len(spacings)):
        raise ConfigError(source, key, spacings, "must list three or more distinct positive spacings")
    return sorted((float(h) for h in spacings), reverse=True)


def read_continuum_table(path: str | Path) -> dict:
    """The ``[continuum]`` table: ``spacings``, three or more distinct positive numbers."""
    table = read_campaign_table(path, TABLE, ("spacings",), "a continuum run")
    return {"spacings": validate_spacings(str(path), f"{TABLE}.spacings", table.get("spacings"))}


def level_specs(path, overrides=(), text: str | None = None, base_dir=None,
                spacings: list[float] | None = None) -> tuple[RunSpec, list[RunSpec]]:
    """The base run and one run per spacing, all validated before any work.  ``text`` and
    ``spacings`` (a campaign point) replace the file and its [continuum] table."""
    if spacings is None:
        spacings = read_continuum_table(path)["spacings"]
    base = load(path, list(overrides), text=text, base_dir=base_dir, ignore_tables=(TABLE,))
    extent = [(n - 1) * h for n, h in zip(base.grid.points, base.grid.spacing)]
    specs = []
    for h in spacings:
        points = [max(2, round(e / h)) + 1 for e in extent]
        spacing = [e / (n - 1) for e, n in zip(extent, points)]
        level = list(overrides) + [f"grid.points={json.dumps(points)}", f"grid.spacing={json.dumps(spacing)}"]
        specs.append(load(path, level, text=text, base_dir=base_dir, ignore_tables=(TABLE,)))
    return base, specs


def _finished(out: Path, spec: RunSpec) -> dict | None:
    path = out / SUMMARY
    if not path.exists():
        return None
    summary = json.loads(path.read_text())
    return summary if summary.get("config_hash") == run_hash(spec) else None


def run_continuum(path, out_dir, overrides=(), stream: TextIO | None = sys.stderr, text: str | None = None,
                  base_dir=None, spacings: list[float] | None = None, publish: bool = False) -> dict:
    """Relax every level, fit the limits, write the outputs; returns the report.

    ``publish`` (a scan or survey point): also place the finest level's result.h5 and
    summary.json in ``out_dir``, the summary extended by ``continuum`` (the limits, their
    error bars, the verdict of every level and the warnings), so that the campaign reads
    the point like a single run."""
    out = Path(out_dir)
    base, specs = level_specs(path, overrides, text=text, base_dir=base_dir, spacings=spacings)
    order = STENCILS[base.grid.scheme].order
    out.mkdir(parents=True, exist_ok=True)
    start = time.perf_counter()
    rows, previous = [], None
    for index, spec in enumerate(specs):
        grid = make_grid(spec)
        level_dir = out / f"level{index}_h{grid.spacing[0]:.4g}"
        if stream is not None:
            print(f"level {index + 1}/{len(specs)}: {'x'.join(map(str, grid.shape))}, h = {grid.spacing[0]:.5g}",
                  file=stream, flush=True)
        summary = _finished(level_dir, spec)
        if summary is None:
            start_field = None if previous is None else interpolate_field(*previous, grid)
            # the saddle check runs on the first level only: on the finest it cost about
            # eight times the level's relaxation (151^3: 800 tight steps against ~100); the
            # table marks the levels without it
            summary = relax(spec, level_dir, overwrite=True, stream=stream, initial_field=start_field,
                            symmetric_start=spec.initial.noise == 0.0 and previous is None)
        result = read_result(level_dir / "result.h5")
        previous = (result["field"], result["grid"])
        rows.append({"level": index, "spacing": grid.spacing[0], "points": grid.shape[0],
                     "box_side": grid.side[0], "energy": summary["energy"], "terms": summary["terms"],
                     "virial": summary["virial"], "hopf_charge": summary["hopf_charge"],
                     "verdict": summary["verdict"], "converged": summary["converged"],
                     "iterations": summary["iterations"], "wall_seconds": summary["wall_seconds"],
                     "boundary_energy_fraction": summary["evidence"]["boundary_energy_fraction"],
                     "saddle_checked": "saddle_check" in summary["evidence"],
                     "path": str(level_dir.resolve())})
    report = summarise(rows, order, base)
    report["wall_seconds"] = time.perf_counter() - start
    write_outputs(report, out)
    if publish:
        publish_finest(report, out, run_hash(base))
    return report


def publish_finest(report: dict, out: Path, point_hash: str) -> None:
    finest = Path(report["levels"][-1]["path"])
    summary = json.loads((finest / SUMMARY).read_text())
    summary["continuum"] = {"order": report["order"], "warnings": report["warnings"],
                            "verdicts": [r["verdict"] for r in report["levels"]],
                            "spacings": [r["spacing"] for r in report["levels"]],
                            "energies": [r["energy"] for r in report["levels"]],
                            **{f"{name}_limit": fit["limit"] for name, fit in report["fits"].items()},
                            **{f"{name}_error": fit["error"] for name, fit in report["fits"].items()}}
    summary["warnings"] = list(summary["warnings"]) + report["warnings"]
    summary["config_hash"] = point_hash  # the point's, so that a rerun skips it
    tmp = out / f".{RESULT}.tmp"
    shutil.copyfile(finest / RESULT, tmp)
    tmp.replace(out / RESULT)
    write_json(out / SUMMARY, summary)


def summarise(rows: list[dict], order: int, base: RunSpec | None = None) -> dict:
    """Fits of the total, every term and the virial; warnings where the levels disagree."""
    spacings = [r["spacing"] for r in rows]
    fits = {"energy": fit_power_limit(spacings, [r["energy"] for r in rows], order),
            "virial": fit_power_limit(spacings, [r["virial"] for r in rows], order)}
    for name in rows[0]["terms"]:
        fits[f"terms.{name}"] = fit_power_limit(spacings, [r["terms"][name] for r in rows], order)
    warnings = []
    verdicts = [r["verdict"] for r in rows]
    if len(set(verdicts)) > 1:
        warnings.append("VERDICTS DIFFER between resolutions: " + ", ".join(
            f"h = {r['spacing']:.4g}: {r['verdict']}" for r in rows) + "; the lattice decides at the coarser ones")
    charges = [r["hopf_charge"] for r in rows]
    if max(charges) - min(charges) > 0.5:
        warnings.append("the Hopf charge differs between resolutions: " + ", ".join(f"{q:.3f}" for q in charges))
    if not all(r["converged"] for r in rows):
        warnings.append("NOT CONVERGED at " + ", ".join(f"h = {r['spacing']:.4g}" for r in rows if not r["converged"])
                        + ": the limit is built on unrelaxed values")
    energy = fits["energy"]
    # the levels should fall on the fit: a large drop means h is not yet asymptotic
    if energy["drop_coarsest"] > max(10 * energy["fit_error"], 1e-6 * abs(energy["limit"])):
        warnings.append(f"dropping the coarsest level moves the limit by {energy['drop_coarsest']:.2e}: the "
                            "coarsest spacing is outside the h^p regime; add a finer level")
    report = {"order": order, "levels": rows, "fits": fits, "warnings": warnings}
    if base is not None:
        report["config"] = base.text
    return report


def format_markdown(report: dict) -> str:
    rows, fits, order = report["levels"], report["fits"], report["order"]
    title = (f"Continuum limit: fit E(h) = E_inf + c h^{order} over {len(rows)} levels "
             f"(box side {rows[0]['box_side']:.4g}, the same at every level)")
    lines = [title, "",
             "| h | points | E | virial | Q | verdict | steps | seconds |",
             "| --- | --- | --- | --- | --- | --- | --- | --- |"]
    for r in rows:
        # a stable verdict without the saddle check is marked: its state came from the level before
        checked = "" if r.get("saddle_checked", True) or r["verdict"] != "stable" else " (no saddle check)"
        lines.append(f"| {r['spacing']:.5g} | {r['points']} | {r['energy']:.8f} | {r['virial']:+.5f} | "
                     f"{r['hopf_charge']:.5f} | {r['verdict']}{checked} | {r['iterations']} | "
                     f"{r['wall_seconds']:.0f} |")
    lines += ["", "| quantity | limit h -> 0 | error bar | relative | fit error | drop coarsest |",
              "| --- | --- | --- | --- | --- | --- |"]
    for name, fit in fits.items():
        relative = fit["error"] / abs(fit["limit"]) if fit["limit"] else float("nan")
        lines.append(f"| {name} | {fit['limit']:.8f} | {fit['error']:.2e} | {relative:.1e} | "
                     f"{fit['fit_error']:.2e} | {fit['drop_coarsest']:.2e} |")
    for warning in report["warnings"]:
        lines += ["", f"WARNING: {warning}"]
    return "\n".join(lines) + "\n"


def write_outputs(report: dict, out: Path) -> None:
    rows = report["levels"]
    names = list(rows[0]["terms"])
    with open(out / "continuum.csv.tmp", "w", newline="") as handle:
        writer = csv.writer(handle)
        writer.writerow(["spacing", "points", "box_side", "energy", *names, "virial", "hopf_charge", "verdict",
                         "converged", "iterations", "wall_seconds"])
        for r in rows:
            writer.writerow([r["spacing"], r["points"], r["box_side"], r["energy"],
                             *(r["terms"][n] for n in names), r["virial"], r["hopf_charge"], r["verdict"],
                             r["converged"], r["iterations"], r["wall_seconds"]])
    (out / "continuum.csv.tmp").replace(out / "continuum.csv")
    atomic_write_text(out / "continuum.md", format_markdown(report))
    write_json(out / "continuum.json", report)
    from solitons.views.plots import plot_continuum

    plot_continuum(report, out / "continuum.png")
