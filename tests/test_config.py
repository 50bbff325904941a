"""Configuration errors stop before any work with one line naming file, key and value.

No physics values are checked here; the expected behaviour is the issue's specification
(common practice for command-line tools: one line, exit code 2, nothing written)."""

import subprocess
import sys
import tomllib

import pytest

from solitons.config import ConfigError, dumps, load, parse_override

GOOD = """
[grid]
points = 24
spacing = 0.3

[initial]
a = 1
b = 2
"""


def write(tmp_path, text, name="run.toml"):
    path = tmp_path / name
    path.write_text(text)
    return path


def test_defaults_and_layering(tmp_path):
    spec = load(write(tmp_path, GOOD), ["grid.spacing=0.25", "terms.skyrme_faddeev.coupling=2"])
    assert spec.grid.points == (24, 24, 24)
    assert spec.grid.spacing == (0.25, 0.25, 0.25)
    assert spec.initial.expected_charge == 2
    assert [(t.name, t.coupling) for t in spec.terms] == [("dirichlet", 1.0), ("skyrme_faddeev", 2.0)]
    # the merged text reads back to the same spec
    again = load(None, text=spec.text)
    assert again == spec


BAD_CASES = [
    ("[grid]\npointz = 24\n", [], "grid.pointz", "unknown key"),
    ("[grdi]\npoints = 24\n", [], "grdi", "unknown table"),
    ("[grid]\nspacing = -0.1\n", [], "grid.spacing", "must be positive"),
    ("[grid]\nspacing = \"fine\"\n", [], "grid.spacing", "finite numbers"),
    ("[grid]\npoints = 4\n", [], "grid.points", "stencils need at least 11"),
    ("[grid]\npoints = 10\nscheme = \"sixth\"\n", [], "grid.points", "at least 11"),
    ("[grid]\nboundary = \"open\"\n", [], "grid.boundary", "must be one of"),
    ("[initial]\na = 1.5\n", [], "initial.a", "must be an integer"),
    ("[initial]\nb = 0\n", [], "initial.b", "at least 1"),
    ("[terms.mystery]\ncoupling = 1.0\n", [], "terms.mystery", "unknown term kind"),
    ("[terms.dirichlet]\ncoupling = \"one\"\n", [], "terms.dirichlet.coupling", "finite number"),
    ("[terms.dirichlet]\nweight = 1.0\n", [], "terms.dirichlet.weight", "unknown key"),
    ("[terms.log_quartic]\ncoupling = 0.1\ndelta = 0.0\n", [], "terms.log_quartic.delta", "must be positive"),
    ("[relax]\nmethod = \"newton\"\n", [], "relax.method", "must be one of"),
    ("[relax]\nmax_steps = 0\n", [], "relax.max_steps", "at least 1"),
    ("", ["grid.points=x"], "grid.points", "integers"),
    ("", ["relax.bogus=1"], "relax.bogus", "unknown key"),
    ("[grid\n", [], "(syntax)", "not valid TOML"),
]


@pytest.mark.parametrize("text, overrides, key, problem", BAD_CASES)
def test_each_error_names_file_key_and_value(tmp_path, text, overrides, key, problem):
    path = write(tmp_path, text)
    with pytest.raises(ConfigError) as info:
        load(path, overrides)
    message = str(info.value)
    assert info.value.key == key
    assert problem in message
    expected_source = "command line" if overrides else str(path)
    assert message.startswith(expected_source)


def test_missing_file(tmp_path):
    with pytest.raises(ConfigError) as info:
        load(tmp_path / "absent.toml")
    assert "cannot be read" in str(info.value)


def test_override_values_are_read_as_toml():
    assert parse_override("grid.points=[20, 22, 24]") == ("grid.points", [20, 22, 24])
    assert parse_override("relax.method=arrested_newton") == ("relax.method", "arrested_newton")
    assert parse_override("grid.spacing=0.2") == ("grid.spacing", 0.2)


def test_merged_config_round_trips_awkward_strings():
    # TOML 1.0 (toml.io): basic strings escape quote, backslash and control characters;
    # the reader is the standard library's tomllib, independent of the writer.
    awkward = 'a"b\\c\nd\te'
    merged = {"grid": {"boundary": awkward, "points": [8, 9, 10]}, "initial": {"parts": [{"family": "axial"}]},
              "relax": {}, "terms": {"my term": {"kind": "user", "parameters": {"x": 1.5}}}}
    assert tomllib.loads(dumps(merged)) == merged


def test_cli_config_error_exits_2_and_writes_nothing(tmp_path):
    path = write(tmp_path, "[grid]\nspacing = -0.2\n")
    out = tmp_path / "out"
    proc = subprocess.run([sys.executable, "-m", "solitons.cli", "relax", str(path), "--out", str(out)],
                          capture_output=True, text=True, cwd=tmp_path)
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1
    assert str(path) in lines[0] and "grid.spacing" in lines[0] and "-0.2" in lines[0]
    assert not out.exists()


FAMILY_ERRORS = [
    ('family = "torus_knot"\nalpha = 0', "initial.alpha", "at least 1"),
    ('family = "rational"', "initial.factors", "needs factors"),
    ('family = "rational"\nfactors = [[1, 0]]', "initial.factors", "a, b >= 1"),
    ('family = "rational"\nfactors = [[1, 1, 0.0]]', "initial.factors", "must not be zero"),
    ('family = "rational"\nfactors = [[1, 1], [1, 1, 1.0]]', "initial.factors", "must differ"),
    ('family = "several"\nparts = [{family = "axial"}]', "initial.parts", "at least two"),
    ('family = "several"\nparts = [{family = "axial"}, {family = "axial", colour = 1}]',
     "initial.parts[1].colour", "unknown key"),
    ('family = "several"\nparts = [{family = "axial"}, {family = "several"}]', "initial.parts[1].family",
     "must be one of"),
    ('orientation = [1, 2]', "initial.orientation", "three"),
]


@pytest.mark.parametrize("text, key, problem", FAMILY_ERRORS)
def test_initial_family_errors_name_the_key(tmp_path, text, key, problem):
    with pytest.raises(ConfigError) as info:
        load(write(tmp_path, f"[initial]\n{text}\n"))
    assert info.value.key == key and problem in info.value.problem


def test_family_descriptions_read_back(tmp_path):
    """Every family survives the round trip through the merged TOML text, with its charge."""
    text = """[initial]
family = "several"
parts = [
  {family = "torus_knot", alpha = 1, beta = 1, a = 3, b = 2, size = 1.5, centre = [-3, 0, 0]},
  {family = "rational", alpha = 1, beta = 1, factors = [[1, 1], [1, 2, -1.0, 0.5]], centre = [3, 0, 0]},
]
"""
    spec = load(write(tmp_path, text))
    assert spec.initial.expected_charge == 5 + 5
    assert spec.initial.part["parts"][1]["factors"][1] == [1, 2, complex(-1.0, 0.5)]
    assert load(None, text=spec.text) == spec
    assert spec.initial.description == "knot(1,1;3,2) + rational(1,1;[1,1],[1,2,-1+0.5j])"
