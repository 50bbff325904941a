"""Verdict logic on constructed cases, and the demo command end to end (tiny budget)."""

import json
import subprocess
import sys
from pathlib import Path

import numpy as np

from solitons.diagnose import assess, boundary_energy_fraction, core_thickness
from solitons.grid import Grid
from solitons.initial import hopf_map

ROOT = Path(__file__).parents[1]
GRID = Grid.centred(33, 0.25, "fixed")


def test_vacuum_after_charge_one_is_unwound():
    vacuum = np.zeros(GRID.shape + (3,))
    vacuum[..., 2] = 1.0
    verdict = assess(vacuum, GRID, np.zeros(GRID.shape), 0.0, 1, 0.0, "converged")
    assert verdict["verdict"] == "unwound"


def test_warnings_for_box_contact_and_off_integer_charge():
    density = np.zeros(GRID.shape)
    density[16, 16, 16] = 0.99
    density[0, 16, 16] = 0.01  # 1 % of the energy on the border
    verdict = assess(hopf_map(GRID, 1.0), GRID, density, 0.8, 1, -0.2, "converged")
    text = " ".join(verdict["warnings"])
    assert "touches the box" in text and "far from an integer" in text and "virial" in text
    assert abs(boundary_energy_fraction(density, GRID) - 0.01) < 1e-12
    density[0, 16, 16] = 0.2  # a sixth of the energy on the border: spread
    assert assess(hopf_map(GRID, 1.0), GRID, density, 1.0, 1, 0.0, "converged")["verdict"] == "spread"


def test_core_thickness_of_a_linear_twist():
    """n turning at a constant rate k about e2 has |grad n| = k, so thickness pi / k
    (derived)."""
    grid = Grid.centred(16, 0.1, "periodic")
    x, _, _ = grid.mesh()
    k = 2 * np.pi / grid.side[0]
    field = np.stack((np.sin(k * x), np.zeros_like(x), np.cos(k * x)), -1)
    # forward differences read 2 sin(k h / 2) / h instead of k
    expected = np.pi / (2 * np.sin(k * 0.1 / 2) / 0.1)
    assert abs(core_thickness(field, grid) - expected) < 1e-12


def test_demo_command_runs(tmp_path):
    out = tmp_path / "demo"
    proc = subprocess.run([sys.executable, "-m", "solitons.cli", "demo", "--out", str(out), "--quiet",
                           "grid.points=41", "relax.max_steps=5"],
                          capture_output=True, text=True, cwd=ROOT)
    assert proc.returncode == 1  # five steps cannot converge, and the run says so
    assert "NOT CONVERGED" in proc.stdout and proc.stderr == ""
    summary = json.loads((out / "summary.json").read_text())
    assert summary["grid"]["scheme"] == "sixth" and summary["iterations"] == 5
