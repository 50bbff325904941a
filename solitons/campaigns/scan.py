"""Coupling scans: many relaxations of one configuration with one or more entries varied.

A scan file is a run configuration plus a ``[scan]`` table::

    [scan]
    parameter = "terms.extra.coupling"      # a dotted key, or a list of keys varied together
    values = [0.2, 0.1, 0.0, -0.1]          # or start / stop / num for an even range
    continuation = false                    # true: each point starts from the previous result

Each point is relaxed into DIR/points/<run hash>/ (its own result.h5 and summary.json) as a task
on the distributed engine (solitons.campaigns.engine); DIR/catalogue.sqlite records every finished
point, and a point whose summary.json exists for the same configuration is not relaxed
again.  The scan
writes DIR/scan.csv, DIR/scan.png (energy, size, virial against the value) and
DIR/gallery.png (every point's isosurface), and prints a table.
"""

from __future__ import annotations

import csv
import hashlib
import json
import sys
import time
from pathlib import Path
from typing import TextIO

import numpy as np

from solitons.campaigns import catalogue
from solitons.campaigns.engine import make_task, model_text, run_tasks
from solitons.config import ConfigError, _is_real, load, read_campaign_table
from solitons.io.results import read_result
from solitons.judge.outcomes import Outcome
from solitons.run import RESULT, SUMMARY, RunError, relax, run_hash

SCAN_KEYS = ("parameter", "values", "start", "stop", "num", "continuation", "continuum")


def read_scan_table(path: str | Path) -> dict:
    """The validated [scan] table: keys (list), values (list of tuples), continuation."""
    source = str(path)
    table = read_campaign_table(path, "scan", SCAN_KEYS, "a scan")
    keys = table.get("parameter")
    keys = [keys] if isinstance(keys, str) else keys
    if not keys or not all(isinstance(k, str) and "." in k for k in keys):
        raise ConfigError(source, "scan.parameter", table.get("parameter"),
                          "must be a dotted key such as terms.extra.coupling, or a list of them")
    if "values" in table:
        values = table["values"]
        if not isinstance(values, list) or not values:
            raise ConfigError(source, "scan.values", values, "must be a non-empty list")
        if len(keys) == 1:
            values = [[v] for v in values]
        elif not all(isinstance(v, list) and len(v) == len(keys) for v in values):
            raise ConfigError(source, "scan.values", values,
                              f"with {len(keys)} parameters every value must be a list of {len(keys)}")
    else:
        start, stop, num = table.get("start"), table.get("stop"), table.get("num")
        if not (_is_real(start) and _is_real(stop)):
            raise ConfigError(source, "scan.start", start, "give values, or start, stop and num")
        if not isinstance(num, int) or num < 1:
            raise ConfigError(source, "scan.num", num, "must be a positive integer")
        values = [[float(v)] * len(keys) for v in np.linspace(start, stop, num)]
    for point in values:
        for v in point:
            if not (_is_real(v) or isinstance(v, str)):
                raise ConfigError(source, "scan.values", v, "must hold numbers")
    continuation = table.get("continuation", False)
    if not isinstance(continuation, bool):
        raise ConfigError(source, "scan.continuation", continuation, "must be true or false")
    continuum = None
    if "continuum" in table:
        from solitons.campaigns.continuum import validate_spacings

        continuum = validate_spacings(source, "scan.continuum", table["continuum"])
        if continuation:
            raise ConfigError(source, "scan.continuum", table["continuum"],
                              "continuum values per point run as independent tasks: drop continuation = true")
    return {"keys": keys, "values": [tuple(p) for p in values], "continuation": continuation,
            "continuum": continuum}


def _override(key, value):
    return f"{key}={json.dumps(value)}"


def scan_specs(path, overrides=()):
    """Validate every point before any work: (scan table, [(values, RunSpec)])."""
    table = read_scan_table(path)
    specs = []
    for point in table["values"]:
        point_overrides = list(overrides) + [_override(k, v) for k, v in zip(table["keys"], point)]
        specs.append((point, load(path, point_overrides, ignore_tables=("scan",))))
    return table, specs


LEGEND = {
    Outcome.STABLE: ("o", "tab:green", "stable soliton"),
    Outcome.COLLAPSED: ("v", "tab:red", "shrank to the lattice"),
    Outcome.UNDER_RESOLVED: ("1", "tab:red", "smaller than the lattice resolves"),
    Outcome.SPREAD: ("^", "tab:orange", "grew to fill the box"),
    Outcome.BOX_TOO_SMALL: ("2", "tab:orange", "converged, touches the box"),
    Outcome.UNWOUND: ("x", "tab:purple", "charge lost"),
    Outcome.UNBOUNDED: ("D", "black", "energy not bounded below"),
    Outcome.SADDLE: ("s", "tab:blue", "saddle (negative mode)"),
    Outcome.NOT_CONVERGED: ("P", "tab:gray", "not converged"),
    Outcome.NON_FINITE: ("*", "tab:brown", "non-finite energy"),
    Outcome.NUMERICAL_BLOWUP: ("X", "tab:brown", "flow blew up (numerics)"),
}


def point_names(specs, continuation: bool) -> list[str]:
    """The run directory of each point, named by its content: the run hash of its
    configuration (with continuation, of the chain of configurations up to it, since each
    point starts from the previous result).  Two scans into one directory therefore add
    their points, and a point is never read back from a run of another configuration."""
    names, chain = [], hashlib.sha256()
    for spec in specs:
        digest = run_hash(spec)
        if continuation:
            chain.update(digest.encode())
            digest = chain.hexdigest()[:16]
        names.append(f"points/{digest}")
    return names


def _finished_summary(point_dir: Path, spec) -> dict | None:
    summary_path = point_dir / SUMMARY
    if summary_path.exists() and (point_dir / RESULT).exists():
        saved = json.loads(summary_path.read_text())
        if saved.get("config_hash") == run_hash(spec):
            return saved
    return None


def run_scan(path, out_dir, overrides=(), stream: TextIO | None = sys.stderr, figures: bool = True,
             scheduler: str | None = None, workers: int | None = None) -> list[dict]:
    """Relax every point of the scan in ``path``; write scan.csv (and scan.png).

    Points are independent tasks on the distributed engine (solitons.campaigns.engine: a local
    cluster by default, ``scheduler`` an address or "inline"); with continuation they run
    one after another in this process, each from the previous result.  Every finished
    point is recorded in DIR/catalogue.sqlite; finished points are skipped on a rerun."""
    table, specs = scan_specs(path, overrides)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    names = point_names([spec for _, spec in specs], table["continuation"])
    summaries = [_finished_summary(out / name, spec) for name, (_, spec) in zip(names, specs)]
    skipped = [s is not None for s in summaries]
    base_dir = Path(path).resolve().parent
    if table["continuation"]:
        from tqdm import tqdm

        bar = tqdm(total=len(specs), desc="scan points", unit="point", file=stream or sys.stderr,
                   disable=stream is None)
        previous_field = None
        for index, (name, (_, spec)) in enumerate(zip(names, specs)):
            if summaries[index] is None:
                start = time.perf_counter()
                summaries[index] = relax(spec, out / name, overwrite=True, stream=None,
                                         initial_field=previous_field)
                catalogue.record(out / catalogue.CATALOGUE, {
                    "task": name, "config_hash": run_hash(spec), "model": model_text(spec),
                    "provenance": json.dumps(summaries[index]["provenance"]),
                    "family": spec.initial.description, "expected_charge": spec.initial.expected_charge,
                    "hopf_charge": summaries[index]["hopf_charge"], "energy": summaries[index]["energy"],
                    "label": summaries[index]["label"], "verdict": summaries[index]["verdict"],
                    "converged": int(summaries[index]["converged"]), "status": "finished",
                    "path": name, "wall_seconds": time.perf_counter() - start,
                    "finished_at": time.time()})
            previous_field = read_result(out / name / RESULT)["field"]
            bar.update(1)
            bar.set_postfix_str(summaries[index]["verdict"])
        bar.close()
    else:
        tasks = [make_task(out, name, spec.text, base_dir, continuum=table["continuum"]) for name, (_, spec), summary
                 in zip(names, specs, summaries) if summary is None]
        failed = [row for row in run_tasks(tasks, scheduler=scheduler, workers=workers, stream=stream,
                                           describe=lambda row: row.get("verdict") or row["status"])
                  if row["status"] == "failed"]
        if failed:
            raise RunError("scan points failed: " + "; ".join(f"{r['task']}: {r['error']}" for r in failed))
        summaries = [_finished_summary(out / name, spec) for name, (_, spec) in zip(names, specs)]
        missing = [name for name, summary in zip(names, summaries) if summary is None]
        if missing:  # read back by content: a point's summary must carry its own configuration's hash
            raise RunError(f"scan points without a result of their configuration: {', '.join(missing)}")
    rows = []
    for index, ((point, _), summary) in enumerate(zip(specs, summaries)):
        row = {"index": index}
        row.update({k: v for k, v in zip(table["keys"], point)})
        row.update({"energy": summary["energy"]})
        if "continuum" in summary:  # the limit h -> 0 of this point, with its error bar
            limits = summary["continuum"]
            row.update({"E_inf": limits["energy_limit"], "E_inf_error": limits["energy_error"],
                        "virial_inf": limits["virial_limit"], "verdicts": ";".join(limits["verdicts"])})
        row.update({f"E[{k}]": v for k, v in summary["terms"].items()})
        e = summary["evidence"]
        row.update({"hopf_charge": summary["hopf_charge"], "virial": summary["virial"],
                    "size": e["size"], "core_thickness": e["core_thickness"],
                    "boundary_fraction": e["boundary_energy_fraction"], "verdict": summary["verdict"],
                    "label": summary.get("label", ""),
                    "converged": summary["converged"], "iterations": summary["iterations"],
                    "skipped": skipped[index], "path": str(out / names[index])})
        rows.append(row)
    write_csv(out / "scan.csv", rows)
    if figures:
        plot_scan(rows, table["keys"][0], out / "scan.png")
        write_gallery(rows, table["keys"][0], out / "gallery.png")
    return rows


def write_gallery(rows: list[dict], key: str, path: Path) -> Path:
    """Isosurfaces of every point in one figure, titled with the value, verdict, Q, E."""
    from solitons.views.plots import plot_gallery

    entries = []
    for row in rows:
        result = read_result(Path(row["path"]) / RESULT)
        entries.append({"field": result["field"], "grid": result["grid"],
                        "label": f"{key.split('.')[-2]} = {row[key]:g}, {row['verdict']}",
                        "hopf_charge": row["hopf_charge"], "energy": row["energy"]})
    return plot_gallery(entries, path, columns=min(4, len(entries)))


def write_csv(path: Path, rows: list[dict]) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.tmp")
    fields = list(dict.fromkeys(k for row in rows for k in row))
    with open(tmp, "w", newline="") as handle:
        writer = csv.DictWriter(handle, fieldnames=fields)
        writer.writeheader()
        writer.writerows(rows)
    tmp.replace(path)


def format_table(rows: list[dict], key: str) -> str:
    terms = [k for k in rows[0] if k.startswith("E[")]
    header = [key, "E"] + terms + ["Q", "virial", "size", "verdict"]
    lines = [" | ".join(header), " | ".join("---" for _ in header)]
    for row in rows:
        cells = [f"{row[key]:g}" if isinstance(row[key], float) else str(row[key]), f"{row['energy']:.5f}"]
        cells += [f"{row[t]:.5f}" for t in terms]
        cells += [f"{row['hopf_charge']:.4f}", f"{row['virial']:+.4f}", f"{row['size']:.3f}", row["verdict"]]
        lines.append(" | ".join(cells))
    return "\n".join(lines)


def plot_scan(rows: list[dict], key: str, path: Path) -> Path:
    """Energy, size and virial against the scanned value; marker by verdict."""
    from solitons.views.plots import plt, save_figure  # plots selects the Agg backend

    x = np.array([float(r[key]) for r in rows])
    fig, axes = plt.subplots(1, 3, figsize=(15, 4.6), dpi=110, constrained_layout=True)
    panels = (("energy", "energy E"), ("size", "size (RMS radius of the energy)"),
              ("virial", "virial residual"))
    for ax, (column, label) in zip(axes, panels):
        y = np.array([float(r[column]) for r in rows])
        ax.plot(x, y, color="0.7", lw=1, zorder=1)
        for verdict, (marker, colour, text) in LEGEND.items():
            chosen = [i for i, r in enumerate(rows) if r["verdict"] == verdict]
            if chosen:
                ax.scatter(x[chosen], y[chosen], marker=marker, color=colour, s=60, zorder=2, label=text)
        ax.set_xlabel(key)
        ax.set_title(label)
        ax.grid(alpha=0.3)
    axes[2].axhline(0, color="k", lw=0.6)
    axes[0].legend(fontsize=8)
    return save_figure(fig, path)
