"""Result files (round trip, atomic writes), CLI smoke runs, checkpoints and resume."""

import json
import os
import signal
import subprocess
import sys

import h5py
import numpy as np
import pytest

from solitons.config import load
from solitons.io.results import read_checkpoint, read_result, write_checkpoint, write_result
from solitons.lattice.grid import Grid
from solitons.relaxation.minimise import History
from solitons.run import relax

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

    state = {"method": "lbfgs", "memory": 4, "value": 1.25, "order": np.array([2, 0]), "sy": rng.random((4, 4))}
    write_checkpoint(tmp_path / "checkpoint.h5", field, grid, 7, history.as_arrays(), "cfg", state,
                     {"segments": [{"from_step": 0}]})
    saved = read_checkpoint(tmp_path / "checkpoint.h5")
    assert saved["step"] == 7 and saved["grid"] == grid and saved["config"] == "cfg"
    assert saved["record"] == {"segments": [{"from_step": 0}]}
    assert saved["state"]["method"] == "lbfgs" and saved["state"]["memory"] == 4 and saved["state"]["value"] == 1.25
    np.testing.assert_array_equal(saved["state"]["order"], [2, 0])
    np.testing.assert_array_equal(saved["state"]["sy"], state["sy"])


def test_cli_smoke_run(tmp_path):
    config = tmp_path / "small.toml"
    config.write_text(SMALL)
    out = tmp_path / "run"
    proc = subprocess.run([sys.executable, "-m", "solitons.cli", "relax", str(config), "--out", str(out),
                           "relax.max_steps=30"], capture_output=True, text=True, cwd=tmp_path)
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
    # the stored field, evaluated again on the jax reference route (not the run's numba kernel)
    from solitons.model.energy import Model
    from solitons.run import make_model

    spec = load(config, ["relax.max_steps=30"])
    kernel_model = make_model(spec, read_result(out / "result.h5")["grid"])
    reference = Model(kernel_model.terms, kernel_model.grid, kernel_model.scheme, "jax")
    field = read_result(out / "result.h5")["field"]
    assert abs(float(reference.energy(field)) - summary["energy"]) < 1e-10 * summary["energy"]
    with h5py.File(out / "result.h5") as h5:
        assert h5["field"].shape == (41, 41, 41, 3)
        np.testing.assert_allclose(h5["field"].attrs["spacing"], [0.2] * 3)
        np.testing.assert_allclose(h5["field"].attrs["origin"], [-4.0] * 3)
        assert "[grid]" in h5.attrs["config"]
    # a run max_steps stopped keeps its checkpoint (issue: it used to be deleted, so
    # --resume could not continue it) and says how to continue
    assert (out / "checkpoint.h5").exists() and summary["stopped_by"] == "max_steps"
    assert "--resume relax.max_steps=" in summary["continue_with"] and "continue" in proc.stdout
    # a second run into the same directory refuses to overwrite without --overwrite
    again = subprocess.run([sys.executable, "-m", "solitons.cli", "relax", str(config), "--out", str(out)],
                           capture_output=True, text=True, cwd=tmp_path)
    assert again.returncode == 2 and "--overwrite" in again.stderr


class _SignalAtStep:
    """A progress stream that sends this process a real signal when the progress line of
    ``step`` arrives (progress_seconds = 0 prints every step)."""

    def __init__(self, step, signum=signal.SIGINT):
        self.mark, self.signum, self.sent = f"step {step:6d} ", signum, False

    def write(self, text):
        if self.mark in text and not self.sent:
            self.sent = True
            os.kill(os.getpid(), self.signum)

    def flush(self):
        pass


@pytest.mark.parametrize("method", ["lbfgs", "arrested_newton"])
def test_interrupted_run_resumes_exactly(tmp_path, method):
    """Exact resume (the issue's requirement, common practice for checkpointed solvers): a
    run stopped by a real SIGINT at step 17 and resumed from its checkpoint takes the same
    steps, energies and evaluations as a run never stopped, to 1e-12."""
    from solitons import interrupts

    text = SMALL.replace("max_steps = 40", "max_steps = 45") + f'method = "{method}"\n'
    spec = load(None, text=text)
    straight = relax(spec, tmp_path / "straight", stream=None)
    out = tmp_path / "stopped"
    with interrupts.handling(), pytest.raises(interrupts.Interrupted) as stop:
        relax(spec, out, stream=_SignalAtStep(17))
    assert stop.value.exit_code == 130 and stop.value.step == 17
    assert not (out / "result.h5").exists() and (out / "checkpoint.h5").exists()
    assert read_checkpoint(out / "checkpoint.h5")["step"] == 17
    resumed = relax(spec, out, resume=True, stream=None)
    assert resumed["iterations"] == straight["iterations"] == 45
    assert abs(resumed["energy"] - straight["energy"]) <= 1e-12 * straight["energy"]
    a, b = read_result(tmp_path / "straight" / "result.h5")["history"], read_result(out / "result.h5")["history"]
    np.testing.assert_array_equal(a["step"], b["step"])
    np.testing.assert_allclose(b["energy"], a["energy"], rtol=1e-12, atol=0)
    assert resumed["evaluations"] == straight["evaluations"]
    assert [seg["ended"] for seg in resumed["segments"]] == ["interrupted", "max_steps"]
    assert [(seg["from_step"], seg["to_step"]) for seg in resumed["segments"]] == [(0, 17), (17, 45)]
    assert resumed["wall_seconds"] == pytest.approx(sum(seg["wall_seconds"] for seg in resumed["segments"]))
    # it ended on max_steps again: the checkpoint of step 45 is kept for a further --resume
    assert read_checkpoint(out / "checkpoint.h5")["step"] == 45 and resumed["stopped_by"] == "max_steps"

    other = load(None, text=text + "", overrides=["grid.spacing=0.21"])
    with interrupts.handling(), pytest.raises(interrupts.Interrupted):
        relax(spec, out, overwrite=True, stream=_SignalAtStep(3))
    from solitons.run import RunError
    with pytest.raises(RunError, match="different configuration"):
        relax(other, out, resume=True, stream=None)


def test_sigterm_ends_the_command_with_143_a_message_and_a_checkpoint(tmp_path):
    """SIGTERM during the relaxation: exit 128 + 15 (the shell's convention), one line
    naming the checkpoint; --resume then finishes the run."""
    config = tmp_path / "small.toml"
    config.write_text(SMALL.replace("max_steps = 40", "max_steps = 400"))
    out = tmp_path / "run"
    command = [sys.executable, "-m", "solitons.cli", "relax", str(config), "--out", str(out), "--no-figures"]
    proc = subprocess.Popen(command, stderr=subprocess.PIPE, stdout=subprocess.PIPE, text=True, cwd=tmp_path)
    for line in proc.stderr:
        if line.startswith("  step") and int(line.split()[1]) >= 5:
            proc.send_signal(signal.SIGTERM)
            break
    rest = proc.stderr.read()
    assert proc.wait(timeout=120) == 143, rest
    assert "interrupted by SIGTERM" in rest and "--resume" in rest and "Traceback" not in rest
    assert (out / "checkpoint.h5").exists() and not (out / "result.h5").exists()
    again = subprocess.run(command, capture_output=True, text=True, cwd=tmp_path)
    assert again.returncode == 2 and "--resume" in again.stderr  # the checkpoint is not overwritten
    finished = subprocess.run(command + ["--resume", "--quiet"], capture_output=True, text=True, cwd=tmp_path)
    assert finished.returncode in (0, 1), finished.stderr
    summary = json.loads((out / "summary.json").read_text())
    assert summary["segments"][0]["ended"] == "interrupted" and len(summary["segments"]) == 2


def test_grid_too_large_for_memory_is_refused_before_any_output(tmp_path):
    out = tmp_path / "huge"
    proc = subprocess.run([sys.executable, "-m", "solitons.cli", "demo", "--out", str(out),
                           "grid.points=3000"], capture_output=True, text=True, cwd=tmp_path)
    assert proc.returncode == 2
    assert "GiB" in proc.stderr and "available" in proc.stderr
    assert not out.exists()


def test_summary_json_is_strict(tmp_path):
    from solitons.io.results import write_json

    write_json(tmp_path / "s.json", {"a": float("inf"), "b": [float("nan"), 1.0]})
    assert json.loads((tmp_path / "s.json").read_text()) == {"a": None, "b": [None, 1.0]}
