"""The distributed engine and the SQLite catalogue: concurrent writers, failed tasks,
reruns.  Mechanics (common practice for campaign tools; SQLite's WAL mode and immediate
transactions serialise writers, sqlite.org documentation)."""

import json
import sqlite3
import sys

import cloudpickle
import pytest

from solitons.campaigns import catalogue
from solitons.campaigns.engine import execute, make_task, run_tasks

ROWS_PER_TASK = 10


def write_rows(task):
    """A task that records ROWS_PER_TASK rows of its own, as fast as it can."""
    import os

    from solitons.campaigns import catalogue as cat

    for k in range(ROWS_PER_TASK):
        cat.record(f"{task['root']}/{cat.CATALOGUE}", {
            "task": f"{task['task']}/{k}", "status": "finished", "energy": float(k),
            "worker": str(os.getpid())})
    return {"task": task["task"], "status": "finished"}


@pytest.fixture(scope="module")
def by_value():
    # the test module is not importable in the workers: ship the task function by value
    cloudpickle.register_pickle_by_value(sys.modules[__name__])
    yield
    cloudpickle.unregister_pickle_by_value(sys.modules[__name__])


def test_catalogue_survives_concurrent_writers_on_a_local_cluster(tmp_path, by_value):
    tasks = [make_task(tmp_path, f"t{index:02d}", "", tmp_path) for index in range(24)]
    results = run_tasks(tasks, workers=2, stream=None, function=write_rows)
    assert [r["task"] for r in results] == [t["task"] for t in tasks]
    rows = catalogue.rows(tmp_path / catalogue.CATALOGUE)
    names = [r["task"] for r in rows]
    assert len(names) == 24 * ROWS_PER_TASK and len(set(names)) == len(names)
    assert len({r["worker"] for r in rows}) == 2  # both workers wrote
    with sqlite3.connect(tmp_path / catalogue.CATALOGUE) as connection:
        assert connection.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
        assert connection.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    # a rerun replaces rows instead of adding them
    run_tasks(tasks[:3], workers=2, stream=None, function=write_rows)
    assert len(catalogue.rows(tmp_path / catalogue.CATALOGUE)) == 24 * ROWS_PER_TASK


def record_start(task):
    """A task that records when it started."""
    import time

    from solitons.campaigns import catalogue as cat

    cat.record(f"{task['root']}/{cat.CATALOGUE}", {"task": task["task"], "status": "finished",
                                                   "energy": float(time.time_ns())})
    return {"task": task["task"], "status": "finished"}


def test_tasks_start_largest_priority_first(tmp_path, by_value):
    """A survey ranks its tasks by cost; on one worker they start in that order (and the
    results still come back in the order given)."""
    tasks = [make_task(tmp_path, f"t{index:02d}", "", tmp_path, priority=(index * 7) % 12) for index in range(12)]
    results = run_tasks(tasks, workers=1, stream=None, function=record_start)
    assert [r["task"] for r in results] == [t["task"] for t in tasks]
    started = sorted(catalogue.rows(tmp_path / catalogue.CATALOGUE), key=lambda row: row["energy"])
    ranks = {t["task"]: t["priority"] for t in tasks}
    assert [ranks[row["task"]] for row in started] == sorted(ranks.values(), reverse=True)


GOOD = """
[grid]
points = 21
spacing = 0.4
[relax]
max_steps = 5
checkpoint_every = 0
"""


def test_a_failed_task_is_reported_and_the_others_finish(tmp_path):
    tasks = [make_task(tmp_path, "good", GOOD, tmp_path),
             make_task(tmp_path, "bad", GOOD.replace("points = 21", "points = -3"), tmp_path)]
    rows = run_tasks(tasks, scheduler="inline", stream=None)
    assert rows[0]["status"] == "finished" and rows[0]["energy"] > 0
    assert rows[1]["status"] == "failed" and "grid.points" in rows[1]["error"]
    recorded = {r["task"]: r for r in catalogue.rows(tmp_path / catalogue.CATALOGUE)}
    assert recorded["bad"]["status"] == "failed" and "grid.points" in recorded["bad"]["error"]
    assert recorded["good"]["label"] == rows[0]["label"]
    assert (tmp_path / "good" / "result.h5").exists() and not (tmp_path / "bad").exists()
    assert execute(tasks[1])["status"] == "failed"


def test_an_interrupted_task_continues_from_its_checkpoint(tmp_path):
    """A campaign killed mid-run leaves checkpoint.h5; the rerun of that task continues the
    step count instead of starting again (mechanics)."""
    from solitons.config import load
    from solitons.io.results import write_checkpoint
    from solitons.relaxation.minimise import History
    from solitons.run import make_grid, make_initial_field

    spec = load(None, text=GOOD)
    grid = make_grid(spec)
    history = History()
    for step in range(1, 8):
        history.append(step, 1.0, 1.0, 0.1 * step)
    (tmp_path / "run").mkdir()
    write_checkpoint(tmp_path / "run" / "checkpoint.h5", make_initial_field(spec, grid), grid, 7,
                     history.as_arrays(), spec.text)
    # max_steps counts the steps of every segment: 7 before the interruption, 5 more now
    row = execute(make_task(tmp_path, "run", GOOD.replace("max_steps = 5", "max_steps = 12"), tmp_path))
    assert row["status"] == "finished" and row.get("resumed")
    summary = json.loads((tmp_path / "run" / "summary.json").read_text())
    assert summary["iterations"] == 12
    assert [(seg["from_step"], seg["to_step"]) for seg in summary["segments"]] == [(7, 12)]
    # stopped by max_steps again: its checkpoint (step 12) stays for a later continuation
    assert summary["stopped_by"] == "max_steps" and "continue_with" in summary
    assert (tmp_path / "run" / "checkpoint.h5").exists()
