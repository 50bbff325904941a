"""The axial mode end to end (grid.symmetry = "axial"): files every reader takes, the
refusals, carrying the result into 3D, and a scan.  Mechanics (common practice); the
physics of the axial energy is in test_axial.py."""

import numpy as np
import pytest

import solitons
from solitons.axial.model import AxialModel, to_3d
from solitons.io.results import read_axial
from solitons.campaigns.scan import run_scan
from solitons.config import ConfigError, load
from solitons.run import RunError, make_grid, make_terms

SMALL = {"grid": {"points": 51, "spacing": 0.2, "symmetry": "axial"},
         "relax": {"max_steps": 400}}


@pytest.fixture(scope="module")
def axial_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("axial")
    return solitons.relax(SMALL, out=out / "run"), out / "run"


def test_axial_run_writes_files_every_reader_takes(axial_run):
    result, path = axial_run
    assert result.summary["symmetry"] == "axial" and result.verdict == "stable"
    assert result.charge == pytest.approx(1.0, abs=1e-9)
    assert any("may be a saddle" in w for w in result.warnings)
    assert result.field.shape == (51, 51, 51, 3)  # rotated out onto the configuration's 3D grid
    half = read_axial(path)
    assert half["field"].shape == (25, 51, 3) and half["grid"].winding == 1
    # the reported energy is the axial lattice energy of the stored half-plane field
    spec = load(None, [], text=result.config)
    model = AxialModel(make_terms(spec), half["grid"], spec.grid.scheme)
    assert float(model.energy(half["field"])) == pytest.approx(result.energy, rel=1e-12)
    np.testing.assert_allclose(result.field, to_3d(half["field"], half["grid"], make_grid(spec)), atol=1e-12)
    # the interpolated density integrates to the energy within the interpolation's error
    volume = 0.2**3
    assert float(result.energy_density.sum()) * volume == pytest.approx(result.energy, rel=0.02)
    figures = result.figures()
    assert set(figures) == {"slices", "isosurface", "curves", "history"}


def test_axial_result_seeds_a_3d_run(axial_run, tmp_path):
    """initial.family = "result" rotates the axial field out onto the 3D grid, plus noise;
    the expected charge comes from the file."""
    _, path = axial_run
    spec = load(None, ["grid.points=51", "grid.spacing=0.2", f"initial.file={path}", "initial.family=result",
                       "relax.max_steps=2"], text="")
    assert spec.initial.expected_charge == 1 and spec.initial.description == f"result({path.name})"
    from solitons.run import make_initial_field

    half = read_axial(path)
    np.testing.assert_allclose(make_initial_field(spec, make_grid(spec)),
                               to_3d(half["field"], half["grid"], make_grid(spec)), atol=1e-12)
    run = solitons.relax(None, grid={"points": 51, "spacing": 0.2},
                         initial={"family": "result", "file": str(path), "noise": 0.02},
                         relax={"max_steps": 300})
    assert run.charge == pytest.approx(1.0, abs=0.02) and "symmetry" not in run.summary


def test_axial_mode_refusals(tmp_path):
    with pytest.raises(ConfigError, match="initial.family.*axial mode"):
        load(None, ["grid.symmetry=axial", "initial.family=torus_knot", "initial.a=3", "initial.b=2"], text="")
    with pytest.raises(ConfigError, match="initial.centre.*axis"):
        load(None, ["grid.symmetry=axial", "initial.centre=[1.0, 0.0, 0.0]"], text="")
    with pytest.raises(ConfigError, match="grid.symmetry"):
        load(None, ["grid.symmetry=cylinder"], text="")
    with pytest.raises(ConfigError, match="initial.file"):
        load(None, ["initial.family=result", f"initial.file={tmp_path / 'none.h5'}"], text="")
    with pytest.raises(RunError, match="chiral.*not invariant"):
        solitons.relax({**SMALL, "initial": {"a": 2}, "terms": {"dirichlet": {}, "skyrme_faddeev": {},
                                                                "twist": {"kind": "chiral", "coupling": 0.1}}})


def test_scan_in_the_axial_mode(tmp_path):
    config = tmp_path / "scan.toml"
    config.write_text("[grid]\npoints = 33\nspacing = 0.3\nsymmetry = \"axial\"\n[terms.dirichlet]\n"
                      "[terms.skyrme_faddeev]\n[terms.mass]\nkind = \"potential\"\ncoupling = 0.0\n"
                      "[relax]\nmax_steps = 300\n[scan]\nparameter = \"terms.mass.coupling\"\n"
                      "values = [0.5, 1.0]\n")
    rows = run_scan(config, tmp_path / "out", stream=None, figures=False, scheduler="inline")
    assert [r["terms.mass.coupling"] for r in rows] == [0.5, 1.0]
    # Hellmann-Feynman sign: a larger positive coupling of a positive term raises the minimum
    assert rows[1]["energy"] > rows[0]["energy"] and all(abs(r["hopf_charge"] - 1) < 1e-9 for r in rows)


def test_a_lattice_minimum_of_an_unbounded_model_is_not_called_stable():
    """b (dn . dn)^2 with b < 0 makes the energy unbounded below (derived, docs/
    references.md [R19]); at b = -0.01 the axial lattice still holds a local minimum,
    which must be reported as unbounded/metastable, never as stable (as in 3D)."""
    result = solitons.relax({**SMALL, "terms": {"dirichlet": {}, "skyrme_faddeev": {},
                                                "extended": {"kind": "dirichlet_squared", "coupling": -0.01}}})
    assert result.verdict == "unbounded" and result.summary["bounded_below_probe"]["negative"]
    assert any("not bounded below" in w for w in result.warnings)


def test_survey_in_the_axial_mode_takes_every_axial_map(tmp_path):
    """With no families given, the axial survey relaxes every A_{a,b} with a b = Q; at
    Q = 2, A_{2,1} lies below A_{1,2} (Hietarinta & Salo, PRD 62 (2000) 081701; Sutcliffe
    2007: A_{2,1} is the charge-2 minimum; from memory)."""
    text = ("[grid]\npoints = 51\nspacing = 0.2\nsymmetry = \"axial\"\n[relax]\nmax_steps = 600\n"
            "[survey]\ncharges = [1, 2]\n")
    table = solitons.survey(text, out=tmp_path / "s", figures=False)
    assert sorted(table["family"]) == ["axial(1,1)", "axial(1,2)", "axial(2,1)"]
    q2 = table[table["Q"] == 2].set_index("family")
    assert q2.loc["axial(2,1)", "energy"] < q2.loc["axial(1,2)", "energy"]
    assert bool(q2.loc["axial(2,1)", "lowest"])
