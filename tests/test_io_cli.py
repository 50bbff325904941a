"""Result files (round trip, atomic writes), CLI smoke runs, checkpoints and resume."""

import json
import subprocess
import sys
from pathlib import Path

import h5py
import numpy as np
import pytest

from solitons.config import load
from solitons.driver import relax
from solitons.grid import Grid
from solitons.io import read_checkpoint, read_result, write_checkpoint, write_result
from solitons.minimise import History

ROOT = Path(__file__).parents[1]

SMALL = """
[grid]
points = 41
spacing = 0.2

[relax]
max_steps = 40
checkpoint_every = 10
progress_seconds = 0.0
"""


def test_hdf5_round_trip(tmp_path, rng):
    grid = Grid((6, 7, 8), (0.1, 0.2, 0.3), (-1.0, -2.0, -3.0), "periodic")
    field = rng.standard_normal(grid.shape + (3,))
    density = rng.random(grid.shape)
    history = History([1, 2], [2.0, 1.5], [0.3, 0.1], [0.5, 1.0])
    summary = {"terms": {"dirichlet": 0.4, "skyrme_faddeev": 0.6}, "normalisation": "n",
               "energy": 1.0, "hopf_charge": 1.0, "virial": 0.01, "virial_per_axis": [0.0, 0.0, 0.01],
               "status": "converged", "verdict": "stable"}
    path = tmp_path / "result.h5"
    write_result(path, field, grid, density, summary, history.as_arrays(), "[grid]\n", "9.9")
    back = read_result(path)
    np.testing.assert_array_equal(back["field"], field)
    np.testing.assert_array_equal(back["energy_density"], density)
    assert back["grid"] == grid
    assert back["terms"] == summary["terms"]
    assert back["summary"] == summary
    assert back["config"] == "[grid]\n" and back["version"] == "9.9"
    assert History.from_arrays(back["history"]) == history
    assert [p.name for p in tmp_path.iterdir()] == ["result.h5"]  # no temporary left behind

    write_checkpoint(tmp_path / "checkpoint.h5", field, grid, 7, history.as_arrays(), "cfg")
    saved = read_checkpoint(tmp_path / "checkpoint.h5")
    assert saved["step"] == 7 and saved["grid"] == grid and saved["config"] == "cfg"


def test_cli_smoke_run(tmp_path):
    config = tmp_path / "small.toml"
    config.write_text(SMALL)
    out = tmp_path / "run"
    proc = subprocess.run([sys.executable, "-m", "solitons.cli", "relax", str(config), "--out", str(out),
                           "relax.max_steps=30"], capture_output=True, text=True, cwd=ROOT)
    assert proc.returncode == 1, proc.stderr  # 30 steps do not converge: exit 1, said loudly
    assert "NOT CONVERGED" in proc.stdout
    assert "step" in proc.stderr  # progress lines
    summary = json.loads((out / "summary.json").read_text())
    for key in ("energy", "terms", "hopf_charge", "virial", "converged", "iterations", "grid",
                "verdict", "wall_seconds"):
        assert key in summary
    assert summary["iterations"] == 30 and summary["converged"] is False
    assert summary["verdict"] == "not converged"
    assert abs(summary["hopf_charge"] - 1) < 1e-3
    assert abs(summary["energy"] - sum(summary["terms"].values())) < 1e-12
    with h5py.File(out / "result.h5") as h5:
        assert h5["field"].shape == (41, 41, 41, 3)
        np.testing.assert_allclose(h5["field"].attrs["spacing"], [0.2] * 3)
        np.testing.assert_allclose(h5["field"].attrs["origin"], [-4.0] * 3)
        assert "[grid]" in h5.attrs["config"]
    assert not (out / "checkpoint.h5").exists()
    # a second run into the same directory refuses to overwrite without --overwrite
    again = subprocess.run([sys.executable, "-m", "solitons.cli", "relax", str(config), "--out", str(out)],
                           capture_output=True, text=True, cwd=ROOT)
    assert again.returncode == 2 and "--overwrite" in again.stderr


def test_checkpoint_and_resume_continue_the_run(tmp_path):
    """A run stopped after its checkpoint resumes from it: the step count continues and the
    result equals an uninterrupted run with the same number of steps."""
    spec = load(None, ["relax.max_steps=20"], text=SMALL)
    out = tmp_path / "interrupted"
    relax(spec, out, stream=None)
    # simulate a kill after step 20 by keeping a checkpoint written at step 20
    result = read_result(out / "result.h5")
    write_checkpoint(out / "checkpoint.h5", result["field"], result["grid"], 20,
                     result["history"], spec.text)
    (out / "result.h5").unlink()
    resumed = relax(spec, out, resume=True, stream=None)
    assert resumed["iterations"] == 40
    history = read_result(out / "result.h5")["history"]
    np.testing.assert_array_equal(history["step"], np.arange(1, 41))
    assert np.all(np.diff(history["energy"]) <= 1e-12)

    other = load(None, ["relax.max_steps=20", "grid.spacing=0.21"], text=SMALL)
    write_checkpoint(out / "checkpoint.h5", result["field"], result["grid"], 20,
                     result["history"], spec.text)
    from solitons.driver import RunError
    with pytest.raises(RunError, match="different configuration"):
        relax(other, out, resume=True, stream=None)


def test_grid_too_large_for_memory_is_refused_before_any_output(tmp_path):
    out = tmp_path / "huge"
    proc = subprocess.run([sys.executable, "-m", "solitons.cli", "demo", "--out", str(out),
                           "grid.points=3000"], capture_output=True, text=True, cwd=ROOT)
    assert proc.returncode == 2
    assert "GiB" in proc.stderr and "available" in proc.stderr
    assert not out.exists()


def test_summary_json_is_strict(tmp_path):
    from solitons.io import write_json

    write_json(tmp_path / "s.json", {"a": float("inf"), "b": [float("nan"), 1.0]})
    assert json.loads((tmp_path / "s.json").read_text()) == {"a": None, "b": [None, 1.0]}
