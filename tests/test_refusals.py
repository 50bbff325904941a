"""Bad input is refused before any work, with the file, key and value at fault, and nothing
is lost or half-written (the command's contract, common practice for scientific CLIs).
The command runs in this process (solitons.cli.main) so that each case costs milliseconds."""

import os
import stat
from pathlib import Path

import numpy as np
import pytest

from solitons.cli import main
from solitons.config import ConfigError, load
from solitons.io.results import FILE_MODE, stale_temporaries

TINY = """
[grid]
points = 21
spacing = 0.3
[relax]
max_steps = 3
saddle_check = false
"""


def run(argv, capsys):
    code = main([str(a) for a in argv])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_config_that_is_not_utf8_names_the_byte(tmp_path, capsys):
    path = tmp_path / "latin1.toml"
    path.write_bytes("[grid]\n# r\u00e9sum\u00e9\npoints = 21\n".encode("latin-1"))
    code, out, err = run(["relax", path, "--out", tmp_path / "out"], capsys)
    assert code == 2
    assert str(path) in err and "not UTF-8" in err and "line 2" in err and "0xe9" in err
    assert not (tmp_path / "out").exists()


def test_out_naming_a_file_or_an_unwritable_place_is_refused(tmp_path, capsys):
    config = tmp_path / "tiny.toml"
    config.write_text(TINY)
    existing = tmp_path / "a_file"
    existing.write_text("keep me")
    code, _, err = run(["relax", config, "--out", existing], capsys)
    assert code == 2 and "not a directory" in err and existing.read_text() == "keep me"
    code, _, err = run(["relax", config, "--out", existing / "below"], capsys)
    assert code == 2 and "is a file" in err
    code, _, err = run(["relax", config, "--out", "/proc/solitons-cannot-write-here"], capsys)
    assert code == 2 and "/proc/solitons-cannot-write-here" in err and "Traceback" not in err


def test_grid_too_large_for_any_memory_is_refused_without_overflow(tmp_path, capsys):
    # 4611686018427387904^3 overflows a 64-bit product (np.prod gave a negative count)
    code, _, err = run(["demo", "--out", tmp_path / "huge", "grid.points=4611686018427387904"], capsys)
    assert code == 2 and "GiB" in err and not (tmp_path / "huge").exists()


def test_argument_prefixes_are_not_taken_for_options(tmp_path, capsys):
    with pytest.raises(SystemExit) as stop:
        main(["demo", "--out", str(tmp_path / "d"), "--resum"])
    assert stop.value.code == 2 and "--resum" in capsys.readouterr().err


@pytest.mark.parametrize("overrides, key, problem", [
    (["terms.dirichlet.coupling=0", "terms.skyrme_faddeev.coupling=0"], "terms.dirichlet.coupling",
     "every coupling is zero"),
    (["initial.centre=[0, 0, 9]"], "initial.centre", "outside the box"),
    (["initial.size=4.5"], "initial.size", "reaches the border"),
    (["initial.centre=[2.5, 0, 0]"], "initial.size", "reaches the border"),
])
def test_physically_empty_or_misplaced_runs_are_refused(overrides, key, problem):
    # box of side 6 (21 points, h = 0.3, fixed): half side 3
    with pytest.raises(ConfigError) as error:
        load(None, overrides, text=TINY)
    assert error.value.key == key and problem in str(error.value)


def test_stretched_box_reach_is_used_for_the_placement_check():
    # x = s sinh(xi / s): 21 points, h = 0.3, s = 1 reach sinh(3) = 10.0, so a centre at 7 fits
    spec = load(None, ["grid.stretch=1.0", "initial.centre=[7, 0, 0]", "initial.size=1"], text=TINY)
    assert spec.initial.part["centre"] == (7.0, 0.0, 0.0)
    with pytest.raises(ConfigError, match="reaches the border"):
        load(None, ["grid.stretch=1.0", "initial.centre=[9.5, 0, 0]"], text=TINY)


def test_user_term_not_zero_in_the_vacuum_is_refused(tmp_path):
    from solitons.model.userterms import UserTermError, load_user_term

    path = tmp_path / "offset.py"
    path.write_text("import jax.numpy as jnp\n\ndef density(n, d, lap=None):\n"
                    "    return 1.0 + 0.0 * n[..., 2] + jnp.sum(d * d, axis=(-2, -1))\n")
    with pytest.raises(UserTermError, match="in the vacuum"):
        load_user_term(path, "density")


def test_non_finite_start_names_the_term_and_site_and_writes_nothing(tmp_path):
    """A term finite on the random local fields of the load check but overflowing on the
    steep initial data: the run stops before the first step, naming the term and a site."""
    from solitons.run import RunError, relax

    path = tmp_path / "steep.py"
    path.write_text("import jax.numpy as jnp\nfrom solitons.model.terms import dirichlet_sum\n\n"
                    "def density(n, d, lap=None):\n    return jnp.expm1(0.5 * dirichlet_sum(d) ** 2)\n")
    text = TINY + f'[terms.steep]\nkind = "user"\nfile = "{path}"\ncoupling = 1e-3\n' \
        "[initial]\nsize = 0.3\n"
    spec = load(None, text=text)
    out = tmp_path / "out"
    with pytest.raises(RunError) as error:
        relax(spec, out, stream=None)
    message = str(error.value)
    assert "non-finite" in message and "'steep'" in message and "site (" in message
    assert "nothing was relaxed or written" in message
    assert not (out / "result.h5").exists() and not (out / "summary.json").exists()


def test_rerun_keeps_results_and_cleans_half_written_files(tmp_path, capsys):
    """demo refuses to replace its result without --overwrite; a temporary file left by a
    killed writer is removed at the next start; files get the usual permissions."""
    out = tmp_path / "demo"
    argv = ["demo", "--out", out, "--quiet", "--no-figures", "grid.points=21", "grid.spacing=0.3",
            "relax.max_steps=2", "relax.saddle_check=false"]
    code, _, _ = run(argv, capsys)
    assert code == 1  # two steps cannot converge
    first = (out / "result.h5").read_bytes()
    code, _, err = run(argv, capsys)
    assert code == 2 and "--overwrite" in err and (out / "result.h5").read_bytes() == first
    assert stat.S_IMODE(os.stat(out / "result.h5").st_mode) == FILE_MODE
    stale = out / ".checkpoint.h5.x1y2z3.tmp"
    stale.write_bytes(b"half")
    assert stale_temporaries(out) == [stale]
    code, _, _ = run(argv + ["--overwrite"], capsys)
    assert code == 1 and not stale.exists()
    assert np.isfinite(float(__import__("json").loads((out / "summary.json").read_text())["energy"]))


def test_file_mode_follows_the_umask():
    mask = os.umask(0)
    os.umask(mask)
    assert FILE_MODE == 0o666 & ~mask and Path(__file__).exists()


# --- refused at once (issue: each of these gave a traceback, a hang, an empty output
# directory, library warnings, or was accepted) ---

@pytest.mark.parametrize("override", ["terms.dirichlet.coupling=" + "9" * 300, "grid.spacing=" + "9" * 300,
                                      "initial.size=" + "9" * 300, "terms.dirichlet.coupling=1e308"])
def test_numbers_beyond_any_physical_value_are_refused(tmp_path, capsys, recwarn, override):
    code, out, err = run(["demo", "--out", tmp_path / "out", override], capsys)
    key = override.split("=")[0]
    assert code == 2 and key in err and "magnitude at most 1e12" in err and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1 and len(err) < 300  # one line; the value shortened
    assert not (tmp_path / "out").exists()
    assert not [w for w in recwarn if issubclass(w.category, RuntimeWarning)]


@pytest.mark.parametrize("argv, named", [
    (["--workers", "-3"], "--workers -3"), (["--workers", "0"], "--workers 0"),
    (["--scheduler", "tcp://127.0.0.1:1"], "no dask scheduler answers"),
    (["--scheduler", "127.0.0.1:8786"], "expected tcp://host:port"),
])
def test_campaign_options_that_cannot_work_are_refused(tmp_path, capsys, argv, named):
    """Before: --workers -3 hung at 0 % and left an empty out/; --workers 0 was accepted;
    an address nothing answers at raised a traceback after 30 s (now: a 5 s probe)."""
    config = tmp_path / "scan.toml"
    config.write_text(TINY + "[scan]\nparameter = \"terms.dirichlet.coupling\"\nvalues = [1.0, 1.1]\n")
    for command in ("scan", "survey"):
        code, _, err = run([command, config, "--out", tmp_path / "out"] + argv, capsys)
        assert code == 2 and named in err and "Traceback" not in err
        assert not (tmp_path / "out").exists()


def test_resume_with_overwrite_and_bad_levels_are_refused(tmp_path, capsys):
    config = tmp_path / "tiny.toml"
    config.write_text(TINY)
    code, _, err = run(["relax", config, "--out", tmp_path / "out", "--resume", "--overwrite"], capsys)
    assert code == 2 and "--resume and --overwrite" in err and not (tmp_path / "out").exists()
    for level in ("5", "nan", "-1"):
        code, _, err = run(["show", tmp_path / "none.h5", f"--level={level}"], capsys)
        assert code == 2 and f"--level {float(level)}" in err


def test_exit_codes_follow_the_table():
    """0 for a converged run whatever its verdict, distinct codes for not converged (1),
    non-finite or blown up (3) and charge lost (4) (README, exit codes)."""
    from solitons.cli import exit_code

    base = {"status": "converged", "converged": True, "hopf_charge": 1.0, "expected_charge": 1, "verdict": "stable"}
    assert exit_code(base) == 0
    assert exit_code({**base, "verdict": "under-resolved"}) == 0
    assert exit_code({**base, "verdict": "box too small"}) == 0
    assert exit_code({**base, "status": "max_steps", "converged": False, "verdict": "not converged"}) == 1
    assert exit_code({**base, "hopf_charge": 0.02, "verdict": "unwound"}) == 4
    assert exit_code({**base, "status": "non-finite", "converged": False}) == 3
    assert exit_code({**base, "status": "numerical blow-up", "converged": False}) == 3
