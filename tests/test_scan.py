"""Coupling scans end to end on a coarse grid: table, CSV, figure, rerun skips.

Mechanics only (common practice for campaign tools); the physics of the verdicts is
checked in test_verdicts.py with its sources."""

import csv
import subprocess
import sys

import matplotlib.image
import pytest

from solitons.campaigns.scan import read_scan_table, run_scan
from solitons.config import ConfigError

SCAN = """
[grid]
points = 33
spacing = 0.25
[terms.dirichlet]
[terms.skyrme_faddeev]
[terms.mass]
kind = "potential"
coupling = 0.0
[relax]
max_steps = 15
checkpoint_every = 0
[scan]
parameter = "terms.mass.coupling"
values = [0.0, 0.5]
continuation = CONT
"""


@pytest.mark.parametrize("continuation", ["false", "true"])
def test_scan_writes_table_and_skips_finished_points(tmp_path, continuation):
    config = tmp_path / "scan.toml"
    config.write_text(SCAN.replace("CONT", continuation))
    rows = run_scan(config, tmp_path / "out", stream=None)
    assert [r["terms.mass.coupling"] for r in rows] == [0.0, 0.5]
    assert rows[0]["E[mass]"] == 0.0 and rows[1]["E[mass]"] > 0
    assert not any(r["skipped"] for r in rows)
    with open(tmp_path / "out" / "scan.csv") as handle:
        table = list(csv.DictReader(handle))
    assert len(table) == 2 and {"energy", "hopf_charge", "virial", "size", "verdict"} <= set(table[0])
    assert matplotlib.image.imread(tmp_path / "out" / "scan.png")[..., :3].std() > 0.05
    assert matplotlib.image.imread(tmp_path / "out" / "gallery.png")[..., :3].std() > 0.01
    again = run_scan(config, tmp_path / "out", stream=None)
    assert all(r["skipped"] for r in again)
    assert [r["energy"] for r in again] == [r["energy"] for r in rows]


def test_scan_table_errors(tmp_path):
    config = tmp_path / "bad.toml"
    config.write_text("[scan]\nparameter = \"terms.mass.coupling\"\nvalues = []\n")
    with pytest.raises(ConfigError, match="non-empty"):
        read_scan_table(config)
    config.write_text("[scan]\nparameter = \"terms.x.coupling\"\nstart = 0.0\nstop = 1.0\nnum = 3\n")
    assert read_scan_table(config)["values"] == [(0.0,), (0.5,), (1.0,)]


@pytest.mark.slow  # 108 s in a cold CI run (three relaxations in a subprocess); run with -m slow
def test_scan_command_prints_table(tmp_path):
    config = tmp_path / "scan.toml"
    config.write_text(SCAN.replace("CONT", "false").replace("[0.0, 0.5]", "[0.25]"))
    proc = subprocess.run([sys.executable, "-m", "solitons.cli", "scan", str(config), "--out",
                           str(tmp_path / "o"), "--quiet", "--no-figures"],
                          capture_output=True, text=True, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert "terms.mass.coupling | E" in proc.stdout and "scan.csv" in proc.stdout


def test_changed_user_file_is_recomputed_and_recorded(tmp_path):
    """A rerun skips a point only when nothing that decides its numbers changed: editing
    the user-term file makes the point run again, and the result holds the file's content
    and hash, the library versions, and a catalogue path relative to the catalogue."""
    import hashlib
    import json
    import sqlite3
    from pathlib import Path

    import h5py

    term = tmp_path / "mass.py"
    term.write_text("def density(n, d, lap=None, m=1.0):\n    return m * (1.0 - n[..., 2])\n")
    config = tmp_path / "scan.toml"
    config.write_text(SCAN.replace("CONT", "true").replace('kind = "potential"', 'kind = "user"\nfile = "mass.py"')
                      .replace("values = [0.0, 0.5]", "values = [0.5]"))
    out = tmp_path / "out"
    first = run_scan(config, out, stream=None, figures=False)
    assert run_scan(config, out, stream=None, figures=False)[0]["skipped"]
    term.write_text("def density(n, d, lap=None, m=1.0):\n    return 2.0 * m * (1.0 - n[..., 2])\n")
    edited = run_scan(config, out, stream=None, figures=False)
    assert not edited[0]["skipped"]
    # the edited file is the built-in potential at twice the coupling: the same 15 steps
    builtin = tmp_path / "builtin.toml"
    builtin.write_text(SCAN.replace("CONT", "true").replace("values = [0.0, 0.5]", "values = [1.0]"))
    reference = run_scan(builtin, tmp_path / "reference", stream=None, figures=False)
    assert edited[0]["energy"] == pytest.approx(reference[0]["energy"], rel=1e-10)
    assert abs(edited[0]["energy"] - first[0]["energy"]) > 1e-3
    # points are named by content: the edited file's run has a directory of its own
    point = Path(edited[0]["path"]).relative_to(out)
    assert point != Path(first[0]["path"]).relative_to(out)
    with h5py.File(out / point / "result.h5") as h5:
        record = json.loads(h5.attrs["provenance"])
    (entry,) = record["user_terms"]
    assert entry["sha256"] == hashlib.sha256(term.read_bytes()).hexdigest() and "2.0 * m" in entry["content"]
    assert {"jax", "numba", "numpy", "scipy"} <= set(record["libraries"]) and record["libraries"]["numpy"]
    with sqlite3.connect(out / "catalogue.sqlite") as db:
        path, provenance = db.execute("SELECT path, provenance FROM runs WHERE path = ?", (str(point),)).fetchone()
    assert (out / path / "result.h5").exists()
    assert json.loads(provenance)["user_terms"][0]["sha256"] == entry["sha256"]
