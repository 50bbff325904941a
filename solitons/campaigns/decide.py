"""The survey's deciding stage: after the single-resolution pass, every state within a
margin of the lowest at its charge goes to the continuum command, and each charge is
called `decided` or `undecided` from the intervals (`solitons.measure.ordering`) of its
solution types (candidates with one label are one state, represented by its lowest run).

Configured in the survey file::

    [survey]
    decide = { spacings = [0.2, 0.16, 0.125], margin = 0.015, box_factor = 1.25 }

For each candidate (finished, charge kept, no non-finite, blow-up or unwound verdict,
energy within ``margin`` (relative) of the lowest at its charge) two tasks run:

* ``<run>/continuum``: the continuum levels at ``spacings`` in the survey's box, the first
  started from the single-resolution result (interpolated), each next from the one
  before; the fit gives E_inf and its lattice error bar (`fit_power_limit`).
* ``<run>/box``: the coarsest level once more in a box ``box_factor`` times larger per
  side (same spacing), started from the same result.  The box error is the energy
  difference of the two boxes at that spacing (a larger box lowers a squeezed soliton's
  energy; what is left beyond the larger box is smaller still, so this is a safe side).

The error bar of E_inf is the lattice error plus the box error; a box error above the
lattice error is warned about (the box decides: enlarge it).  Both stages start from the
survey's noisy data, so the saddle check is not repeated (``relax.saddle_check = false``).
Tasks are named by content under the single-resolution run and skipped when finished, so
an interrupted campaign resumes where it stopped.
"""

from __future__ import annotations

import json
import math
import tomllib
from pathlib import Path

import tomli_w

from solitons.campaigns.engine import make_task
from solitons.config import ConfigError, load
from solitons.judge.outcomes import Outcome
from solitons.measure.ordering import order_states
from solitons.run import RESULT, SUMMARY, run_hash

DEFAULT_MARGIN = 0.015
DEFAULT_BOX_FACTOR = 1.25
EXCLUDED = (Outcome.NON_FINITE, Outcome.NUMERICAL_BLOWUP, Outcome.UNWOUND)


def read_decide(source: str, value) -> dict | None:
    """The ``survey.decide`` table, validated: spacings (three or more), margin in (0, 1),
    box_factor > 1.  None when absent."""
    from solitons.campaigns.continuum import validate_spacings

    if value is None:
        return None
    if not isinstance(value, dict):
        raise ConfigError(source, "survey.decide", value,
                          "must be a table such as { spacings = [0.2, 0.16, 0.125], margin = 0.015 }")
    for key in value:
        if key not in ("spacings", "margin", "box_factor"):
            raise ConfigError(source, f"survey.decide.{key}", value[key],
                              "unknown key; expected spacings, margin, box_factor")
    spacings = validate_spacings(source, "survey.decide.spacings", value.get("spacings"))
    margin = value.get("margin", DEFAULT_MARGIN)
    if isinstance(margin, bool) or not isinstance(margin, (int, float)) or not 0 < margin < 1:
        raise ConfigError(source, "survey.decide.margin", margin, "must be a relative margin in (0, 1)")
    factor = value.get("box_factor", DEFAULT_BOX_FACTOR)
    if isinstance(factor, bool) or not isinstance(factor, (int, float)) or not 1 < factor <= 4:
        raise ConfigError(source, "survey.decide.box_factor", factor, "must be a number in (1, 4]")
    return {"spacings": spacings, "margin": float(margin), "box_factor": float(factor)}


def candidates(rows: list[dict], margin: float) -> list[dict]:
    """The rows within ``margin`` (relative) of the lowest energy at their charge, among
    the finished runs that kept their charge and have no excluded verdict."""
    chosen = []
    for q in sorted({r["Q"] for r in rows}):
        keep = [r for r in rows if r["Q"] == q and r.get("energy") is not None
                and abs(r["measured_Q"] - q) < 0.1 and r["verdict"] not in EXCLUDED]
        if not keep:
            continue
        lowest = min(r["energy"] for r in keep)
        chosen += [r for r in keep if r["energy"] <= lowest * (1 + margin)]
    return chosen


def stage_text(text: str, result: Path, grid: dict | None = None) -> str:
    """A run configuration started from ``result`` (its field interpolated onto the grid),
    no noise, no saddle check, with ``grid`` keys replaced."""
    tables = tomllib.loads(text)
    tables["initial"] = {"family": "result", "file": str(result.resolve()), "noise": 0.0, "seed": 0}
    tables.setdefault("relax", {})["saddle_check"] = False
    if grid:
        tables.setdefault("grid", {}).update(grid)
    return tomli_w.dumps(tables)


def stage_tasks(out: Path, chosen: list[dict], specs: dict, decide: dict, base_dir: Path) -> list[dict]:
    """The continuum and box tasks of every candidate; ``specs``: run name -> RunSpec."""
    from solitons.campaigns.continuum import level_specs

    tasks = []
    for row in chosen:
        spec = specs[row["task"]]
        result = out / row["task"] / RESULT
        text = stage_text(spec.text, result)
        _, levels = level_specs(None, text=text, base_dir=base_dir, spacings=decide["spacings"])
        coarsest = levels[0].grid
        points = [round(decide["box_factor"] * (n - 1)) + 1 for n in coarsest.points]
        box_text = stage_text(spec.text, result, {"points": points, "spacing": list(coarsest.spacing)})
        size = int(math.prod(levels[-1].grid.points))
        tasks.append(make_task(out, f"{row['task']}/continuum", text, base_dir, continuum=decide["spacings"],
                               priority=size * 100 + row["Q"], family=row["family"], expected_charge=row["Q"]))
        tasks.append(make_task(out, f"{row['task']}/box", box_text, base_dir,
                               priority=int(math.prod(points)) * 100 + row["Q"], family=row["family"],
                               expected_charge=row["Q"]))
    return tasks


def _summary(out: Path, name: str, text: str, base_dir: Path) -> dict | None:
    """A finished stage task's summary, read back only when it belongs to this task's
    configuration (the run hash)."""
    path = out / name / SUMMARY
    if not path.exists():
        return None
    summary = json.loads(path.read_text())
    expected = run_hash(load(None, text=text, base_dir=base_dir))
    return summary if summary.get("config_hash") == expected else None


def attach(out: Path, chosen: list[dict], tasks: list[dict], base_dir: Path) -> None:
    """Add E_inf, its lattice, box and total error bars and the stage's warnings to each
    candidate row (None where a stage is not finished)."""
    by_name = {task["task"]: task for task in tasks}
    for row in chosen:
        row["candidate"] = True
        cont = _summary(out, f"{row['task']}/continuum", by_name[f"{row['task']}/continuum"]["text"], base_dir)
        box = _summary(out, f"{row['task']}/box", by_name[f"{row['task']}/box"]["text"], base_dir)
        row.update(E_inf=None, lattice_error=None, box_error=None, E_inf_error=None, decide_notes="")
        notes = []
        if cont is None:
            notes.append("continuum stage not finished")
        else:
            c = cont["continuum"]
            row.update(E_inf=c["energy_limit"], lattice_error=c["energy_error"],
                       decide_levels=len(c["spacings"]), decide_max_force=cont["max_force"],
                       decide_converged=all(v == Outcome.STABLE for v in c["verdicts"]))
            notes += c["warnings"]
            if box is None:
                notes.append("box stage not finished")
            else:
                coarse_energy = c["energies"][0]
                row["box_error"] = abs(coarse_energy - box["energy"])
                row["box_energy"] = box["energy"]
                row["E_inf_error"] = row["lattice_error"] + row["box_error"]
                if row["box_error"] > row["lattice_error"]:
                    notes.append(f"BOX ERROR {row['box_error']:.2e} above the lattice error "
                                 f"{row['lattice_error']:.2e}: the box decides; enlarge it")
        row["decide_notes"] = " | ".join(notes)


def decisions(rows: list[dict]) -> list[dict]:
    """Per charge with candidates: the ordering of their continuum intervals."""
    found = []
    for q in sorted({r["Q"] for r in rows if r.get("candidate")}):
        group = [r for r in rows if r["Q"] == q and r.get("candidate")]
        # runs that reached one solution type (the same label) are one state: its best run
        # stands for it, so two seeds of one knot never make a charge undecided
        best: dict[str, dict] = {}
        for r in group:
            known = r.get("E_inf") is not None
            held = best.get(r["label"])
            if held is None or (known and (held.get("E_inf") is None or r["E_inf"] < held["E_inf"])):
                best[r["label"]] = r
        states = [{"name": r["task"], "energy": r.get("E_inf"), "error": r.get("E_inf_error")}
                  for r in best.values()]
        verdict = order_states(states)
        names = {r["task"]: r for r in group}
        lowest = names.get(verdict["lowest"]) if verdict["lowest"] else None
        second = names.get(verdict["next"]) if verdict["next"] else None
        found.append({"Q": q, "candidates": len(group), "states": len(best), **verdict,
                      "lowest_label": lowest["label"] if lowest else None,
                      "lowest_family": lowest["family"] if lowest else None,
                      "E_inf": lowest.get("E_inf") if lowest else None,
                      "E_inf_error": lowest.get("E_inf_error") if lowest else None,
                      "next_label": second["label"] if second else None,
                      "next_E_inf": second.get("E_inf") if second else None})
    return found


def decisions_markdown(found: list[dict], rows: list[dict], seconds: float) -> str:
    """The deciding stage's tables: every candidate's continuum energy with its error bars,
    then the decision per charge, and the campaign's total compute time."""
    lines = ["", "## Continuum limits of the candidates", "",
             "| Q | family | label | E (survey grid) | E_inf | lattice error | box error | error bar | notes |",
             "| --- | --- | --- | --- | --- | --- | --- | --- | --- |"]
    for r in rows:
        if not r.get("candidate"):
            continue
        lines.append(f"| {r['Q']} | {r['family']} | {r['label']} | {r['energy']:.5f} | {_num(r['E_inf'], '.6f')} | "
                     f"{_num(r['lattice_error'], '.1e')} | {_num(r['box_error'], '.1e')} | "
                     f"{_num(r['E_inf_error'], '.1e')} | {r['decide_notes']} |")
    lines += ["", "## Ground state per charge", "",
              "| Q | ground state | E_inf | error | next | E_inf next | gap | decision |",
              "| --- | --- | --- | --- | --- | --- | --- | --- |"]
    for d in found:
        word = "decided" if d["decided"] else "UNDECIDED"
        lines.append(f"| {d['Q']} | {d['lowest_label'] or '-'} ({d['lowest_family'] or '-'}) | "
                     f"{_num(d['E_inf'], '.6f')} | {_num(d['E_inf_error'], '.1e')} | {d['next_label'] or '-'} | "
                     f"{_num(d.get('next_E_inf'), '.6f')} | {_num(d['gap'], '.2e')} | {word}: {d['reason']} |")
    lines += ["", (f"Total compute time of the campaign (every run, both stages, all invocations): "
                   f"{seconds / 3600:.2f} h ({seconds:.0f} s, the runs' wall times summed).")]
    return "\n".join(lines) + "\n"


def _num(value, form: str) -> str:
    return "-" if value is None else format(value, form)
