"""Energy against charge: relax every family of initial data for each charge in a range,
keep the lowest-energy solution per charge, and set the table next to the known bounds.

A survey file is a run configuration (grid, terms, relax, and [initial] noise / seed
defaults) plus a ``[survey]`` table::

    [survey]
    charges = [1, 2, 3]          # Hopf charges to survey
    seeds = [0]                  # noise seeds per family (with initial.noise > 0)
    families = [                 # optional; default: the built-in list below
      { family = "axial", a = 1, b = 1, size = 1.0 },
      { family = "torus_knot", alpha = 1, beta = 1, a = 3, b = 2, size = 1.6 },
    ]

Each family whose formula gives a charge in ``charges`` is relaxed into
DIR/Q<charge>/<family>-s<seed>/ as one task on the distributed engine (solitons.campaigns.engine);
DIR/catalogue.sqlite records every finished run and a rerun skips them.  The survey writes
DIR/survey.csv, DIR/survey.md (the table, with the grid, spacing and stencil) and
DIR/survey.png (E / Q^(3/4) against Q with Ward's conjectured bound E = Q^(3/4) and the
Vakulenko-Kapitanski type bound E = 0.534 Q^(3/4), docs/references.md [R8, R9]).
"""

from __future__ import annotations

import csv
import json
import re
import sys
from pathlib import Path
from typing import TextIO

import numpy as np

from solitons.campaigns import catalogue
from solitons.campaigns.engine import make_task, run_tasks
from solitons.config import ConfigError, load, read_campaign_table, toml_inline
from solitons.judge.diagnose import ENERGY_STOP_FORCE
from solitons.judge.outcomes import Outcome
from solitons.relaxation.initial import describe
from solitons.io.provenance import physics_hash
from solitons.run import RESULT, SUMMARY, run_hash

SURVEY_KEYS = ("charges", "seeds", "families", "continuum", "decide")

# Ward's conjectured bound E >= Q^(3/4) (Ward, Nonlinearity 12 (1999) 241, memory) and the
# Vakulenko-Kapitanski type bound E >= (3/16)^(3/8) Q^(3/4) (Kundu-Rybakov constant,
# recalled): docs/references.md [R8, R9], in the Battye-Sutcliffe units of solitons.model.energy.
WARD = 1.0
VAKULENKO_KAPITANSKI = (3.0 / 16.0) ** 0.375

# Published minimal energies with their tolerance (docs/references.md [R13, R14], recalled from
# Battye-Sutcliffe 1999 and Sutcliffe 2007): Q -> (E, relative tolerance).
PUBLISHED = {1: (1.22, 0.02), 2: (2.00, 0.03)}

# Built-in families: the axial maps, the torus-knot maps W = Z1^alpha Z0^beta / (Z1^a + Z0^b)
# and link maps with several torus-curve factors (solitons.relaxation.initial), at sizes that fit the
# relaxed soliton roughly (about Q^0.3) and, from Q = 9 on, with the box side ("box") they
# need: a survey on a smaller uniform box adds sites at its spacing (`family_overrides`).
# Literature picture (Sutcliffe 2007; Harland, Speight & Sutcliffe 2011): axial up to 4,
# links at 5 and 6, a trefoil at 7; knots and links compete above (which wins at each
# charge is what a survey measures).
DEFAULT_FAMILIES = (
    {"family": "axial", "a": 1, "b": 1, "size": 1.0},
    {"family": "axial", "a": 2, "b": 1, "size": 1.2},
    {"family": "axial", "a": 3, "b": 1, "size": 1.4},
    {"family": "axial", "a": 2, "b": 2, "size": 1.4},
    {"family": "axial", "a": 4, "b": 1, "size": 1.5},
    {"family": "torus_knot", "alpha": 1, "beta": 1, "a": 3, "b": 2, "size": 1.6},
    {"family": "rational", "alpha": 1, "beta": 1, "factors": [[1, 1], [1, 2, -1.0]], "size": 1.6},
    {"family": "axial", "a": 3, "b": 2, "size": 1.6},
    {"family": "rational", "alpha": 1, "beta": 1, "factors": [[1, 2], [1, 2, -1.0]], "size": 1.7},
    {"family": "torus_knot", "alpha": 2, "beta": 1, "a": 3, "b": 2, "size": 1.8},
    {"family": "torus_knot", "alpha": 1, "beta": 2, "a": 2, "b": 3, "size": 1.8},
    {"family": "rational", "alpha": 1, "beta": 1, "factors": [[1, 2], [1, 3, -1.0]], "size": 1.8},
    {"family": "torus_knot", "alpha": 1, "beta": 2, "a": 3, "b": 2, "size": 1.9},
    {"family": "axial", "a": 4, "b": 2, "size": 1.8},
    {"family": "rational", "alpha": 1, "beta": 1, "factors": [[1, 3], [1, 3, -1.0]], "size": 1.9},
    # Q = 9 .. 16: torus knots (3, 2), (4, 3), (5, 2) with their numerators, links, axial.
    # Knot maps with large numerator powers need size / h of 20-25 before the lattice
    # carries their charge; the sizes below are those at which the initial data reads at
    # least 0.86 of its charge at h = 0.2 on the family's box (tests/test_families.py; a
    # (3,1;3,2) map read 8.03 of 9 and relaxed to a Q = 9.0000 trefoil, a (5,2;3,2) map read
    # 5.7 of 16 and collapsed).  Left out for that reason, read at h = 0.2 and size 3 on a
    # box of 24: (5,1;3,2) 11.0 of 13, (4,2;3,2) 11.1 of 14, (3,3;3,2) 10.5 of 15,
    # (5,2;3,2) 9.3 of 16.
    {"family": "torus_knot", "alpha": 3, "beta": 1, "a": 3, "b": 2, "size": 1.9, "box": 18.0},
    {"family": "torus_knot", "alpha": 2, "beta": 1, "a": 5, "b": 2, "size": 1.9, "box": 18.0},
    {"family": "rational", "alpha": 1, "beta": 1, "factors": [[1, 3], [2, 3, -1.0]], "size": 1.9, "box": 18.0},
    {"family": "torus_knot", "alpha": 2, "beta": 2, "a": 3, "b": 2, "size": 2.4, "box": 18.0},
    {"family": "torus_knot", "alpha": 2, "beta": 1, "a": 4, "b": 3, "size": 2.0, "box": 18.0},
    {"family": "rational", "alpha": 1, "beta": 1, "factors": [[2, 3], [2, 3, -1.0]], "size": 2.0, "box": 18.0},
    {"family": "torus_knot", "alpha": 3, "beta": 1, "a": 5, "b": 2, "size": 2.1, "box": 18.0},
    {"family": "torus_knot", "alpha": 1, "beta": 2, "a": 4, "b": 3, "size": 2.1, "box": 18.0},
    {"family": "rational", "alpha": 1, "beta": 1, "factors": [[2, 3], [2, 4, -1.0]], "size": 2.1, "box": 18.0},
    {"family": "torus_knot", "alpha": 3, "beta": 2, "a": 3, "b": 2, "size": 2.6, "box": 18.0},
    {"family": "torus_knot", "alpha": 1, "beta": 2, "a": 5, "b": 2, "size": 2.5, "box": 18.0},
    {"family": "rational", "alpha": 1, "beta": 1, "factors": [[2, 4], [2, 4, -1.0]], "size": 2.1, "box": 18.0},
    {"family": "torus_knot", "alpha": 4, "beta": 1, "a": 5, "b": 2, "size": 2.5, "box": 20.0},
    {"family": "torus_knot", "alpha": 3, "beta": 1, "a": 4, "b": 3, "size": 2.2, "box": 20.0},
    {"family": "rational", "alpha": 1, "beta": 1, "factors": [[2, 4], [3, 4, -1.0]], "size": 2.2, "box": 20.0},
    {"family": "torus_knot", "alpha": 2, "beta": 2, "a": 4, "b": 3, "size": 2.3, "box": 20.0},
    {"family": "rational", "alpha": 1, "beta": 1, "factors": [[3, 4], [3, 4, -1.0]], "size": 2.2, "box": 20.0},
    {"family": "torus_knot", "alpha": 1, "beta": 3, "a": 4, "b": 3, "size": 2.7, "box": 20.0},
    {"family": "axial", "a": 5, "b": 3, "size": 2.3, "box": 20.0},
    {"family": "rational", "alpha": 1, "beta": 1, "factors": [[3, 4], [3, 5, -1.0]], "size": 2.3, "box": 20.0},
    {"family": "torus_knot", "alpha": 4, "beta": 1, "a": 4, "b": 3, "size": 2.8, "box": 20.0},
    {"family": "torus_knot", "alpha": 3, "beta": 2, "a": 5, "b": 2, "size": 2.8, "box": 20.0},
    {"family": "axial", "a": 4, "b": 4, "size": 2.3, "box": 20.0},
    {"family": "rational", "alpha": 1, "beta": 1, "factors": [[3, 5], [3, 5, -1.0]], "size": 2.3, "box": 20.0},
)


def family_overrides(family: dict, grid) -> tuple[list[str], list[str]]:
    """(initial overrides, grid overrides) of a family table: every key but ``box`` goes to
    [initial]; ``box`` (the side the family needs) enlarges a smaller uniform fixed box at
    its spacing, to an odd number of sites (a stretched grid reaches far already)."""
    initial = [f"initial.{k}={toml_inline(v)}" for k, v in family.items() if k != "box"]
    box = family.get("box")
    if box is None or any(s > 0 for s in grid.stretch) or grid.boundary != "fixed":
        return initial, []
    points = []
    for n, h in zip(grid.points, grid.spacing):
        need = int(np.ceil(float(box) / h - 1e-9)) + 1
        need += 1 - need % 2
        points.append(max(n, need))
    if list(points) == list(grid.points):
        return initial, []
    return initial, [f"grid.points={toml_inline(points)}"]


def axial_families(charges) -> list[dict]:
    """The axial mode's default: every axial map A_{a,b} with a b = Q for each charge
    (the other families are not axially symmetric), size 1 + 0.1 (Q - 1)."""
    return [{"family": "axial", "a": a, "b": q // a, "size": round(1.0 + 0.1 * (q - 1), 2)}
            for q in charges for a in range(1, q + 1) if q % a == 0]


def read_survey(path: str | Path, overrides=()) -> tuple[dict, list]:
    """Validate the [survey] table and every task's configuration before any work:
    (table, [(charge, family dict, seed, RunSpec)])."""
    source = str(path)
    table = read_campaign_table(path, "survey", SURVEY_KEYS, "a survey")
    charges = table.get("charges", list(range(1, 9)))
    if (not isinstance(charges, list) or not charges
            or not all(isinstance(q, int) and not isinstance(q, bool) and q >= 1 for q in charges)):
        raise ConfigError(source, "survey.charges", charges, "must be a non-empty list of positive integers")
    seeds = table.get("seeds", [0])
    if (not isinstance(seeds, list) or not seeds
            or not all(isinstance(s, int) and not isinstance(s, bool) and s >= 0 for s in seeds)):
        raise ConfigError(source, "survey.seeds", seeds, "must be a non-empty list of integers >= 0")
    families = table.get("families", [dict(f) for f in DEFAULT_FAMILIES])
    if not isinstance(families, list) or not all(isinstance(f, dict) for f in families):
        raise ConfigError(source, "survey.families", families, "must be a list of tables such as "
                          "{ family = \"axial\", a = 1, b = 1, size = 1.0 }")
    base = load(path, overrides, ignore_tables=("survey",))
    if base.grid.symmetry == "axial" and "families" not in table:
        families = axial_families(charges)
    if len(seeds) > 1 and base.initial.noise == 0:
        raise ConfigError(source, "survey.seeds", seeds, "several seeds need initial.noise > 0 "
                          "(without noise every seed relaxes the same field)")
    tasks = []
    for index, family in enumerate(families):
        box = family.get("box")
        if box is not None and (isinstance(box, bool) or not isinstance(box, (int, float)) or not box > 0):
            raise ConfigError(source, f"survey.families[{index}].box", box, "must be a box side > 0")
        initial_f, grid_f = family_overrides(family, base.grid)
        overrides_f = initial_f + grid_f
        try:
            probe = load(path, list(overrides) + overrides_f, ignore_tables=("survey",))
        except ConfigError as error:
            raise ConfigError(source, f"survey.families[{index}].{error.key.split('.', 1)[-1]}",
                              error.value, error.problem) from None
        q = probe.initial.expected_charge
        if q not in charges:
            continue
        for seed in seeds:
            spec = load(path, list(overrides) + overrides_f + [f"initial.seed={seed}"], ignore_tables=("survey",))
            tasks.append((q, probe.initial.part, seed, spec))
    found = {q for q, *_ in tasks}
    missing = [q for q in charges if q not in found]
    if missing:
        raise ConfigError(source, "survey.families", "(list)",
                          f"no family gives the charges {missing}; add families for them")
    tasks.sort(key=lambda item: (item[0], describe(item[1]), item[2]))
    continuum = None
    if "continuum" in table:
        from solitons.campaigns.continuum import validate_spacings

        continuum = validate_spacings(source, "survey.continuum", table["continuum"])
    from solitons.campaigns.decide import read_decide

    decide = read_decide(source, table.get("decide"))
    return {"charges": charges, "seeds": seeds, "spec": base, "continuum": continuum, "decide": decide}, tasks


def task_priority(charge: int, spec) -> int:
    """The engine's start order, largest first: grid sites (the cost of one step), then
    charge (more steps to converge)."""
    return int(np.prod(spec.grid.points)) * 100 + min(charge, 99)


def _slug(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9]+", "-", text).strip("-")


def run_survey(path, out_dir, overrides=(), scheduler: str | None = None, workers: int | None = None,
               stream: TextIO | None = sys.stderr, figure: bool = True, table_only: bool = False) -> list[dict]:
    """Relax every task of the survey in ``path`` (skipping those already in the
    catalogue with the same configuration) and write survey.csv, survey.md, survey.png.
    ``table_only``: relax nothing, tabulate what the catalogue holds (the others are
    listed as not run), e.g. while a long survey is still going."""
    table, entries = read_survey(path, overrides)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    done = catalogue.finished(out / catalogue.CATALOGUE)
    base_dir = Path(path).resolve().parent
    tasks, names = [], []
    for q, part, seed, spec in entries:
        # named by content: what defines the field (grid, terms, every initial-data key, seed),
        # so families that differ in any key never share a run, and a rerun with other [relax]
        # settings continues the same run from its checkpoint
        name = f"Q{q}/{_slug(describe(part))}-s{seed}-{physics_hash(spec.text)[:10]}"
        names.append(name)
        previous = done.get(name)
        if (previous and previous["config_hash"] == run_hash(spec)
                and (out / name / RESULT).exists() and (out / name / SUMMARY).exists()):
            continue  # finished before with the same configuration
        tasks.append(make_task(out, name, spec.text, base_dir, continuum=table["continuum"],
                               priority=task_priority(q, spec), family=describe(part), expected_charge=q))
    if stream is not None:
        g = table["spec"].grid
        print(f"survey: {len(entries)} runs for Q = {table['charges']} ({len(entries) - len(tasks)} finished "
              f"before); grid {'x'.join(map(str, g.points))}, h = {g.spacing[0]:g}, {g.boundary} boundary, "
              f"{g.scheme}-order stencil", file=stream, flush=True)
    if not table_only:
        run_tasks(tasks, scheduler=scheduler, workers=workers, stream=stream,
                  describe=lambda row: f"{row['task']} {row.get('verdict') or row.get('status')}")
    recorded = {row["task"]: row for row in catalogue.rows(out / catalogue.CATALOGUE)}
    rows = []
    for (q, part, seed, spec), name in zip(entries, names):
        row = recorded.get(name, {"status": "not run"})
        if row.get("status") == "finished" and row.get("config_hash") != run_hash(spec):
            row = {"status": "not run", "error": "the catalogue holds a run of another configuration"}
        entry = {"Q": q, "family": describe(part), "seed": seed, "task": name, "status": row.get("status"),
                 "error": row.get("error") or "", "grid": grid_text(spec)}
        if row.get("status") == "finished":
            summary = json.loads((out / name / SUMMARY).read_text())
            entry.update(label=summary["label"], energy=summary["energy"],
                         energy_per_q34=summary["energy"] / q**0.75, virial=summary["virial"],
                         measured_Q=summary["hopf_charge"], verdict=summary["verdict"],
                         converged=summary["converged"],
                         stopped_by=summary.get("stopped_by"),  # as the minimiser recorded it
                         max_force=summary["max_force"], iterations=summary["iterations"],
                         wall_seconds=summary["wall_seconds"], warnings=" | ".join(summary["warnings"]))
            if "continuum" in summary:  # the limit h -> 0 of this run, with its error bar
                entry.update(E_inf=summary["continuum"]["energy_limit"],
                             E_inf_error=summary["continuum"]["energy_error"])
        rows.append(entry)
    mark_lowest(rows)
    found = None
    if table["decide"]:
        found = deciding_stage(rows, entries, names, table, out, base_dir, scheduler, workers, stream, table_only)
    write_table_files(rows, out, table["spec"], found, catalogue_seconds(out))
    if figure:
        plot_survey(rows, out / "survey.png", table["spec"])
    return rows


def deciding_stage(rows, entries, names, table, out: Path, base_dir: Path, scheduler, workers, stream,
                   table_only: bool) -> list[dict]:
    """`solitons.campaigns.decide`: the continuum and box runs of the candidates, then the
    ordering per charge.  Returns the per-charge decisions."""
    from solitons.campaigns import decide as stage

    settings = table["decide"]
    chosen = stage.candidates(rows, settings["margin"])
    specs = {name: spec for (_, _, _, spec), name in zip(entries, names)}
    tasks = stage.stage_tasks(out, chosen, specs, settings, base_dir)
    done = catalogue.finished(out / catalogue.CATALOGUE)
    todo = [t for t in tasks if not (done.get(t["task"]) and (out / t["task"] / SUMMARY).exists()
                                     and done[t["task"]]["config_hash"] == run_hash(load(None, text=t["text"],
                                                                                         base_dir=base_dir)))]
    if stream is not None:
        print(f"survey, deciding stage: {len(chosen)} states within {100 * settings['margin']:g} % of the lowest "
              f"at their charge; {len(todo)} of {len(tasks)} continuum and box runs to do (h = "
              f"{', '.join(f'{h:g}' for h in settings['spacings'])}; box x {settings['box_factor']:g})",
              file=stream, flush=True)
    if not table_only and todo:
        run_tasks(todo, scheduler=scheduler, workers=workers, stream=stream,
                  describe=lambda row: f"{row['task']} {row.get('verdict') or row.get('status')}")
    stage.attach(out, chosen, tasks, base_dir)
    found = stage.decisions(rows)
    if stream is not None:
        for d in found:
            print(f"  Q = {d['Q']}: {'decided' if d['decided'] else 'UNDECIDED'} ({d['reason']})",
                  file=stream, flush=True)
    return found


def catalogue_seconds(out: Path) -> float:
    """The summed wall time of every run the catalogue holds (all stages, all invocations)."""
    return float(sum(row.get("wall_seconds") or 0.0 for row in catalogue.rows(out / catalogue.CATALOGUE)))


def mark_lowest(rows: list[dict]) -> None:
    """Flag per charge the lowest-energy run whose relaxed charge is still that charge."""
    for row in rows:
        row["lowest"] = False
    for q in {r["Q"] for r in rows}:
        keep = [r for r in rows if r["Q"] == q and r.get("energy") is not None
                and abs(r["measured_Q"] - q) < 0.1 and r["verdict"] not in (Outcome.NON_FINITE, Outcome.UNWOUND)]
        if keep:
            min(keep, key=lambda r: r["energy"])["lowest"] = True


def grid_text(spec) -> str:
    """A run's grid as the table's last column: sites and box side (a family's ``box`` may
    enlarge the survey's grid)."""
    g = spec.grid
    side = (g.points[0] - 1) * g.spacing[0]
    return f"{'x'.join(map(str, g.points))}, box {side:g}"


def resolution_text(spec) -> str:
    g = spec.grid
    side = [(n - 1) * h for n, h in zip(g.points, g.spacing)]
    return (f"grid {'x'.join(map(str, g.points))}, spacing h = {g.spacing[0]:g}, box side {side[0]:g}, "
            f"{g.boundary} boundary, {g.scheme}-order stencil; relax {spec.relax.method}, force_tol "
            f"{spec.relax.force_tol:g}, energy_tol {spec.relax.energy_tol:g}, max_steps {spec.relax.max_steps}")


def markdown_table(rows: list[dict], spec) -> str:
    model = " + ".join(f"{t.coupling:g} {t.name}" for t in spec.terms)
    lines = [f"Energy against charge ({resolution_text(spec)}). Model: {model}. E in the normalisation of "
             "Battye & Sutcliffe (the plain model's Q = 1 minimum is about 1.22); * marks the lowest energy "
             "per charge; the last column is each run's grid (a family's box key enlarges the survey's).", "",
             "| Q | family | label found | E | E/Q^(3/4) | virial | measured Q | verdict | converged | grid |",
             "|---|---|---|---|---|---|---|---|---|---|"]
    for r in rows:
        if r["status"] != "finished":
            what = "NOT RUN" if r["status"] == "not run" else f"FAILED: {r['error']}"
            lines.append(f"| {r['Q']} | {r['family']} | {what} | | | | | | | {r['grid']} |")
            continue
        star = " *" if r["lowest"] else ""
        lines.append(f"| {r['Q']}{star} | {r['family']} | {r['label']} | {r['energy']:.4f} | "
                     f"{r['energy_per_q34']:.4f} | {r['virial']:+.4f} | {r['measured_Q']:.4f} | "
                     f"{r['verdict']} | {converged_text(r, spec.relax.force_tol)} | {r['grid']} |")
    return "\n".join(lines) + "\n"


def converged_text(row: dict, force_tol: float) -> str:
    """'yes', 'energy rule, F = ...' (stopped by the energy rule with the force above
    ENERGY_STOP_FORCE times force_tol, as `solitons.judge.diagnose.stopping_record` warns) or 'NO'."""
    if not row["converged"]:
        return "NO"
    if row.get("stopped_by") == "energy" and row["max_force"] > ENERGY_STOP_FORCE * force_tol:
        return f"energy rule, F = {row['max_force']:.1e}"
    return "yes"


def write_table_files(rows: list[dict], out: Path, spec, decisions: list[dict] | None = None,
                      seconds: float | None = None) -> None:
    """survey.csv, survey.md and, with a deciding stage, decisions.json (per charge)."""
    fields = ["Q", "family", "seed", "label", "energy", "energy_per_q34", "virial", "measured_Q", "verdict",
              "converged", "stopped_by", "max_force", "lowest", "iterations", "wall_seconds", "grid", "status",
              "error", "warnings", "task"]
    if decisions is not None:
        fields += ["candidate", "E_inf", "lattice_error", "box_error", "E_inf_error", "decide_notes"]
    tmp = out / ".survey.csv.tmp"
    with open(tmp, "w", newline="") as handle:
        writer = csv.DictWriter(handle, fieldnames=fields, extrasaction="ignore")
        writer.writeheader()
        writer.writerows(rows)
    tmp.replace(out / "survey.csv")
    text = markdown_table(rows, spec)
    if decisions is not None:
        from solitons.campaigns.decide import decisions_markdown

        text += decisions_markdown(decisions, rows, seconds or 0.0)
        tmp = out / ".decisions.json.tmp"
        tmp.write_text(json.dumps({"decisions": decisions, "compute_seconds": seconds}, indent=2, default=str))
        tmp.replace(out / "decisions.json")
    tmp = out / ".survey.md.tmp"
    tmp.write_text(text)
    tmp.replace(out / "survey.md")


def plot_survey(rows: list[dict], path: Path, spec) -> Path:
    """E / Q^(3/4) against Q: every run, the lowest per charge, the continuum limits of
    the deciding stage with their error bars, the two bounds and the published Q = 1, 2
    values."""
    from solitons.views.plots import plt, save_figure

    fig, ax = plt.subplots(figsize=(7.5, 5), dpi=120, constrained_layout=True)
    done = [r for r in rows if r["status"] == "finished"]
    qs = np.array([r["Q"] for r in done], float)
    ratio = np.array([r["energy_per_q34"] for r in done])
    ax.scatter(qs, ratio, color="0.6", s=25, label="all runs", zorder=2)
    best = [r for r in done if r["lowest"]]
    if best:
        ax.plot([r["Q"] for r in best], [r["energy_per_q34"] for r in best], "o-", color="tab:blue",
                ms=7, label="lowest per charge", zorder=3)
        for r in best:
            ax.annotate(r["label"].split(" (")[0], (r["Q"], r["energy_per_q34"]), textcoords="offset points",
                        xytext=(4, 6), fontsize=7, rotation=30)
    limits = [r for r in done if r.get("E_inf") is not None]
    if limits:  # the deciding stage: continuum limits with their error bars (lattice + box)
        ax.errorbar([r["Q"] + 0.12 for r in limits], [r["E_inf"] / r["Q"] ** 0.75 for r in limits],
                    yerr=[(r.get("E_inf_error") or 0.0) / r["Q"] ** 0.75 for r in limits], fmt="D",
                    color="tab:purple", ms=4, capsize=3, label="continuum limit E_inf (lattice + box error)",
                    zorder=5)
    q_line = np.linspace(0.8, max([r["Q"] for r in rows]) + 0.2, 2)
    ax.plot(q_line, [WARD] * 2, "k--", lw=1, label="Ward's conjectured bound, E = Q^(3/4)")
    ax.plot(q_line, [VAKULENKO_KAPITANSKI] * 2, "k:", lw=1,
            label=f"Vakulenko-Kapitanski type bound, {VAKULENKO_KAPITANSKI:.3f} Q^(3/4)")
    for q, (energy, tol) in PUBLISHED.items():
        if q <= q_line[-1]:
            ax.errorbar([q], [energy / q**0.75], yerr=[tol * energy / q**0.75], fmt="s", color="tab:red",
                        ms=5, capsize=3, label="published (memory)" if q == 1 else None, zorder=4)
    ax.set_xlabel("Hopf charge Q")
    ax.set_ylabel("E / Q^(3/4)")
    ax.set_ylim(0.45, max(1.6, float(ratio.max()) + 0.05 if len(ratio) else 1.6))
    title = resolution_text(spec).split(";")[0]
    grids = sorted({r["grid"] for r in rows if "grid" in r}, key=lambda g: int(g.split("x")[0]))
    if len(grids) > 1:  # families with a box key ran on larger grids
        title = title.split(", box side")[0] + f"; grids {grids[0]} to {grids[-1]} (per run: survey.md)"
    ax.set_title(title, fontsize=8)
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7, loc="lower right")
    return save_figure(fig, path)


def summary_lines(rows: list[dict]) -> str:
    """The table as printed by the command; * marks the lowest energy per charge."""
    lines = []
    for r in rows:
        head = f"Q {r['Q']}{'*' if r['lowest'] else ' '} {r['family']:34s} "
        if r["status"] != "finished":
            lines.append(head + ("NOT RUN" if r["status"] == "not run" else f"FAILED {r['error']}"))
            continue
        lines.append(head + f"{r['label']:32s} E {r['energy']:.4f}  E/Q^(3/4) {r['energy_per_q34']:.4f}  "
                     f"Q {r['measured_Q']:.3f}  {r['verdict']}{'' if r['converged'] else ' (NOT converged)'}"
                     f"{' (energy rule, F = %.1e)' % r['max_force'] if r.get('stopped_by') == 'energy' else ''}")
    return "\n".join(lines)
