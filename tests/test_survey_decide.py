"""The survey's deciding stage on a small Q = 1 case: continuum and box runs of the
candidates, the per-charge decision, resumption, and refused settings.

Physics checked: the box run's energy is not above the same spacing's energy in the
smaller box (exact: a field of the smaller box, extended by the vacuum, is a field of the
larger one with the same lattice energy, so the larger box's minimum is lower or equal;
common practice, the variational argument), and the continuum limit of the sixth-order
scheme lies below every level here (each level errs upwards for the Q = 1 state, measured
in docs/accuracy.md)."""

import json

import pytest

from solitons.campaigns import catalogue
from solitons.campaigns.survey import run_survey
from solitons.config import ConfigError

SURVEY = """
[grid]
points = 21
spacing = 0.45
boundary = "fixed"
[initial]
noise = 0.02
seed = 0
[relax]
max_steps = 600
force_tol = 1e-3
[survey]
charges = [1]
families = [ { family = "axial", a = 1, b = 1, size = 1.0 } ]
"""


def test_deciding_stage_orders_resumes_and_bounds_the_box(tmp_path):
    path = tmp_path / "s.toml"
    path.write_text(SURVEY + "decide = { spacings = [0.45, 0.4, 0.35], box_factor = 1.3 }\n")
    out = tmp_path / "out"
    rows = run_survey(path, out, scheduler="inline", stream=None, figure=True)
    (row,) = rows
    assert (out / "survey.png").stat().st_size > 0
    assert row["candidate"] and row["E_inf"] is not None
    stage = json.loads((out / f"{row['task']}/continuum/summary.json").read_text())["continuum"]
    assert row["E_inf"] < min(stage["energies"])
    assert row["box_energy"] <= stage["energies"][0] + 1e-6
    assert row["box_error"] == pytest.approx(stage["energies"][0] - row["box_energy"], abs=1e-6)
    assert row["E_inf_error"] == pytest.approx(row["lattice_error"] + row["box_error"])
    decisions = json.loads((out / "decisions.json").read_text())
    (d,) = decisions["decisions"]
    assert d["Q"] == 1 and d["decided"] and d["lowest"] == row["task"]
    assert decisions["compute_seconds"] > 0
    text = (out / "survey.md").read_text()
    assert "Ground state per charge" in text and "decided" in text and "Total compute time" in text
    runs = len(catalogue.rows(out / catalogue.CATALOGUE))
    assert runs == 3  # the survey run, its continuum run and its box run
    again = run_survey(path, out, scheduler="inline", stream=None, figure=False)
    assert len(catalogue.rows(out / catalogue.CATALOGUE)) == runs  # resumed: nothing rerun
    assert again[0]["E_inf"] == row["E_inf"]


@pytest.mark.parametrize("table, key", [
    ("{ spacings = [0.4, 0.3] }", "survey.decide.spacings"),
    ("{ spacings = [0.4, 0.3, 0.2], margin = 1.5 }", "survey.decide.margin"),
    ("{ spacings = [0.4, 0.3, 0.2], box_factor = 1.0 }", "survey.decide.box_factor"),
    ("{ spacings = [0.4, 0.3, 0.2], boxes = 2 }", "survey.decide.boxes"),
    ("0.015", "survey.decide"),
])
def test_bad_decide_tables_are_refused_before_any_work(tmp_path, table, key):
    path = tmp_path / "s.toml"
    path.write_text(SURVEY + f"decide = {table}\n")
    with pytest.raises(ConfigError) as error:
        run_survey(path, tmp_path / "out", scheduler="inline", stream=None, figure=False)
    assert error.value.key == key
    assert not (tmp_path / "out").exists()
