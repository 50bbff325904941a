"""Nothing lost and nothing wrong under concurrency: a run directory is locked while a run
writes it, a lock left by a dead process is taken over, and two scans into one directory
add their points (named by content), each checked against the same point run alone.
Common practice (advisory file locks; content-addressed outputs); the expected energies
come from single runs of the same configurations."""

import json
import os
import subprocess
import sys

import pytest

from solitons.campaigns.scan import run_scan
from solitons.cli import main
from solitons.io.locks import LOCK_NAME, DirectoryInUse, holding

SLOW = """
[grid]
points = 41
spacing = 0.2
[relax]
max_steps = 400
force_tol = 0.0
energy_tol = 0.0
progress_seconds = 0.0
saddle_check = false
"""

SCAN = """
[grid]
points = 25
spacing = 0.3
[terms.mass]
kind = "potential"
coupling = 1.0
[relax]
max_steps = 60
saddle_check = false
[scan]
parameter = "terms.mass.coupling"
values = VALUES
"""


def test_a_second_run_into_a_directory_in_use_is_refused_naming_the_owner(tmp_path, capsys):
    config = tmp_path / "slow.toml"
    config.write_text(SLOW)
    out = tmp_path / "same"
    first = subprocess.Popen([sys.executable, "-m", "solitons.cli", "relax", str(config), "--out", str(out),
                              "--no-figures"], stderr=subprocess.PIPE, stdout=subprocess.PIPE, text=True, cwd=tmp_path)
    try:
        for line in first.stderr:  # the first run is relaxing: it holds the lock
            if line.startswith("  step"):
                break
        code = main(["relax", str(config), "--out", str(out), "--overwrite", "--quiet", "--no-figures"])
        err = capsys.readouterr().err
        assert code == 2 and "in use by another run" in err and f"pid {first.pid}" in err
        assert len(err.strip().splitlines()) == 1
    finally:
        first.wait(timeout=600)
    assert first.returncode == 1  # force_tol 0: finished (rounding level), not converged
    summary = json.loads((out / "summary.json").read_text())
    assert summary["iterations"] > 20 and len(summary["segments"]) == 1  # the first run's own result


def test_a_lock_left_by_a_dead_process_is_taken_over(tmp_path, capsys):
    """A process killed while holding the lock: the kernel drops its flock; the next run
    takes the lock over and says whose it was (read from the file the dead owner left)."""
    out = tmp_path / "run"
    holder = subprocess.Popen([sys.executable, "-c", "import sys, time; from solitons.io.locks import holding\n"
                               f"with holding({str(out)!r}):\n    print('held', flush=True); time.sleep(600)"],
                              stdout=subprocess.PIPE, text=True)
    assert holder.stdout.readline().strip() == "held"
    with pytest.raises(DirectoryInUse, match=f"pid {holder.pid}"):
        with holding(out):
            pass
    holder.kill()
    holder.wait()
    with holding(out, sys.stderr) as directory:
        assert directory == out
        record = json.loads((out / LOCK_NAME).read_text())
        assert record["pid"] == os.getpid()
    assert f"pid {holder.pid}" in capsys.readouterr().err


def test_two_scans_into_one_directory_add_their_points(tmp_path):
    """Scan A (couplings 0.5, 1.0) and scan B (1.0, 1.5) run at the same time into one
    directory.  Before, both wrote points/000 and points/001, and A printed B's energy for
    its first coupling.  Now every point of each scan carries the energy of that coupling
    run alone, and the catalogue holds the three distinct points."""
    a, b, alone = (tmp_path / name for name in ("a.toml", "b.toml", "alone.toml"))
    a.write_text(SCAN.replace("VALUES", "[0.5, 1.0]"))
    b.write_text(SCAN.replace("VALUES", "[1.0, 1.5]"))
    alone.write_text(SCAN.replace("VALUES", "[0.5, 1.0, 1.5]"))
    out = tmp_path / "shared"
    options = ["--out", str(out), "--scheduler", "inline", "--quiet", "--no-figures"]
    procs = [subprocess.Popen([sys.executable, "-m", "solitons.cli", "scan", str(path)] + options, stdout=subprocess.PIPE,
                              stderr=subprocess.PIPE, text=True, cwd=tmp_path) for path in (a, b)]
    for proc in procs:
        _, err = proc.communicate(timeout=900)
        # a point the other scan is relaxing at that moment is refused by its lock
        # and reported; rerunning picks it up (its result is then read by content)
        if proc.returncode != 0:
            assert "in use by another run" in err, err
    for path in (a, b):  # reruns finish whatever a lock refused, skipping the rest
        rows = run_scan(path, out, stream=None, figures=False, scheduler="inline")
    reference = {row["terms.mass.coupling"]: row["energy"]
                 for row in run_scan(alone, tmp_path / "alone", stream=None, figures=False, scheduler="inline")}
    for path in (a, b):
        rows = run_scan(path, out, stream=None, figures=False, scheduler="inline")
        assert all(row["skipped"] for row in rows)
        for row in rows:
            assert row["energy"] == pytest.approx(reference[row["terms.mass.coupling"]], rel=1e-12)
    import sqlite3

    with sqlite3.connect(out / "catalogue.sqlite") as db:
        (count,) = db.execute("SELECT COUNT(DISTINCT task) FROM runs WHERE status = 'finished'").fetchone()
    assert count == 3
