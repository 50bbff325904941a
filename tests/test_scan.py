"""Coupling scans end to end on a coarse grid: table, CSV, figure, rerun skips.

Mechanics only (common practice for campaign tools); the physics of the verdicts is
checked in test_verdicts.py with its sources."""

import csv
import subprocess
import sys
from pathlib import Path

import matplotlib.image
import pytest

from solitons.campaigns import read_scan_table, run_scan
from solitons.config import ConfigError

ROOT = Path(__file__).parents[1]

SCAN = """
[grid]
points = 33
spacing = 0.25
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
                          capture_output=True, text=True, cwd=ROOT)
    assert proc.returncode == 0, proc.stderr
    assert "terms.mass.coupling | E" in proc.stdout and "scan.csv" in proc.stdout
