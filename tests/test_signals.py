"""Ctrl-C and SIGTERM at awkward moments end the command with 128 + signal, one message
and no traceback (the shell's convention for a process ended by a signal,
common practice; docs/references.md [R22]).  Each test sends a real signal to a real command."""

import os
import signal
import subprocess
import sys
import time

TINY = """
[grid]
points = 21
spacing = 0.3
[relax]
max_steps = 5
"""

SURVEY = """
[grid]
points = 41
spacing = 0.2
[relax]
max_steps = 3000
force_tol = 1e-9
energy_tol = 0.0
checkpoint_every = 0
[survey]
charges = [1, 2]
"""


def test_ctrl_c_during_start_up_is_not_swallowed(tmp_path):
    """A SIGINT 0.3 s after launch arrives while jax is being imported, which used to
    swallow it (the run then went on to the end)."""
    config = tmp_path / "tiny.toml"
    config.write_text(TINY)
    out = tmp_path / "out"
    proc = subprocess.Popen([sys.executable, "-m", "solitons.cli", "relax", str(config), "--out", str(out)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=tmp_path)
    time.sleep(0.3)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    assert "interrupted by SIGINT" in err and "Traceback" not in err
    assert not (out / "result.h5").exists()


def test_ctrl_c_in_a_survey_stops_workers_and_keeps_the_catalogue(tmp_path):
    """Ctrl-C in a terminal signals the whole process group, the worker processes of the
    local cluster included: one message, exit 130, no traceback from any process."""
    config = tmp_path / "survey.toml"
    config.write_text(SURVEY)
    out = tmp_path / "out"
    proc = subprocess.Popen([sys.executable, "-m", "solitons.cli", "survey", str(config), "--out", str(out),
                             "--workers", "2", "--no-figures"], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True, cwd=tmp_path, start_new_session=True)
    deadline = time.time() + 120
    while time.time() < deadline and not (out / "Q1").exists():  # a worker has started its run
        time.sleep(0.2)
    time.sleep(1.0)
    os.killpg(proc.pid, signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    assert "interrupted by SIGINT" in err and "rerun the same command" in err
    assert "Traceback" not in err and "KeyboardInterrupt" not in err
