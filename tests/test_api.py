"""The Python API (solitons.relax, solitons.load, Result): the README's example runs as
written, and its numbers agree with the command's files and with the jax reference
(an independent evaluation route); the exported density carries the normalisation of
docs/references.md [R1].  Mechanics otherwise (common practice)."""

import re
from pathlib import Path

import numpy as np
import pytest

import solitons
from solitons.config import ConfigError

README = Path(__file__).parents[1] / "README.md"


def readme_example() -> str:
    section = README.read_text().split("## Python\n", 1)[1]
    return re.search(r"```python\n(.*?)```", section, re.S).group(1)


def test_readme_example_runs_as_written(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    namespace: dict = {}
    exec(compile(readme_example(), "README.md", "exec"), namespace)
    result = namespace["result"]
    assert (tmp_path / "isosurface.png").stat().st_size > 10_000
    assert set(namespace["figures"]) == {"slices", "isosurface", "curves", "history"}
    assert result.path is None and sorted(p.name for p in tmp_path.iterdir()) == ["isosurface.png"]
    # independent of the run's numba route: the field re-evaluated by jax autodiff's model
    from solitons.model.energy import Model
    from solitons.run import make_model

    spec = solitons.api._spec(None, {"grid": {"points": 33, "spacing": 0.3},
                                     "terms": {"mass": {"kind": "potential", "coupling": 0.5}}})
    kernel_model = make_model(spec, result.grid)
    reference = Model(kernel_model.terms, kernel_model.grid, kernel_model.scheme, "jax")
    assert float(reference.energy(result.field)) == pytest.approx(result.energy, rel=1e-10)
    assert abs(result.charge - 1) < 0.05 and set(result.terms) == {"dirichlet", "skyrme_faddeev", "mass"}


def test_written_result_loads_back_and_config_forms_agree(tmp_path):
    text = "[grid]\npoints = 21\nspacing = 0.3\n[relax]\nmax_steps = 3\nsaddle_check = false\n"
    (tmp_path / "run.toml").write_text(text)
    from_file = solitons.relax(tmp_path / "run.toml", out=tmp_path / "out")
    from_text = solitons.relax(text)
    from_dict = solitons.relax({"grid": {"points": 21, "spacing": 0.3}, "relax": {"max_steps": 3,
                                                                                  "saddle_check": False}})
    assert from_file.energy == from_text.energy == from_dict.energy  # the same three steps
    loaded = solitons.load(tmp_path / "out")
    assert loaded.path == tmp_path / "out" and loaded.energy == from_file.energy
    np.testing.assert_array_equal(loaded.field, from_file.field)
    assert not loaded.converged and loaded.verdict == "not converged"
    with pytest.raises(ConfigError, match="grid.pointz"):
        solitons.relax(text, grid={"pointz": 3})


def test_xarray_export_carries_coordinates_units_and_the_energy(tmp_path):
    """The Dataset's energy density is energy per unit volume: its sum times the cell
    volume is the reported energy (uniform grid; [R1] normalisation), and its
    coordinates are the site positions."""
    result = solitons.relax("[grid]\npoints = 21\nspacing = 0.3\n[relax]\nmax_steps = 3\n"
                            "saddle_check = false\n")
    ds = result.to_xarray()
    assert ds["n"].dims == ("x", "y", "z", "component") and ds.x.attrs["units"] == "model length"
    np.testing.assert_array_equal(ds["n"].values, result.field)
    np.testing.assert_allclose(ds.x.values, np.linspace(-3.0, 3.0, 21), atol=1e-12)
    assert float(ds["energy_density"].sum()) * 0.3**3 == pytest.approx(result.energy, rel=1e-12)
    assert ds.attrs["verdict"] == result.verdict and "[grid]" in ds.attrs["config"]


SCAN_TABLES = {
    "grid": {"points": 25, "spacing": 0.32},
    "terms": {"dirichlet": {}, "skyrme_faddeev": {}, "mass": {"kind": "user", "file": "mass.py", "coupling": 0.0}},
    "relax": {"max_steps": 8, "checkpoint_every": 0, "saddle_check": False},
    "scan": {"parameter": "terms.mass.coupling", "values": [0.25, 0.5]},
}


def test_scan_returns_the_commands_table(tmp_path, monkeypatch):
    """`solitons.scan` gives the rows of scan.csv as a DataFrame; a dict with a relative
    user-term file finds it from the working directory, and the user copy of the
    potential gives the built-in potential's energies to 1e-8 (an independent route for
    the term: jax autodiff against the numba kernel; their rounding differs, and eight
    L-BFGS steps carry it to 8.7e-10 relative, measured)."""
    import csv

    monkeypatch.chdir(tmp_path)
    (tmp_path / "mass.py").write_text("def density(n, d, lap=None):\n    return 1.0 - n[..., 2]\n")
    table = solitons.scan(SCAN_TABLES, out=tmp_path / "out", figures=False)
    assert list(table["terms.mass.coupling"]) == [0.25, 0.5]
    with open(tmp_path / "out" / "scan.csv") as handle:
        written = list(csv.DictReader(handle))
    assert [float(r["energy"]) for r in written] == list(table["energy"])
    assert {"energy", "E[mass]", "hopf_charge", "virial", "verdict", "skipped"} <= set(table.columns)
    builtin = {**SCAN_TABLES, "terms": {**SCAN_TABLES["terms"], "mass": {"kind": "potential", "coupling": 0.0}}}
    reference = solitons.scan(builtin)  # no out: nothing written, the table kept
    assert "path" not in reference.columns and sorted(p.name for p in tmp_path.iterdir()) == ["mass.py", "out"]
    np.testing.assert_allclose(table["energy"], reference["energy"], rtol=1e-8)
    again = solitons.scan(SCAN_TABLES, out=tmp_path / "out", figures=False)
    assert again["skipped"].all() and list(again["energy"]) == list(table["energy"])


def test_survey_returns_a_table_and_the_gallery_and_page_take_results(tmp_path):
    text = ("[grid]\npoints = 25\nspacing = 0.32\n[relax]\nmax_steps = 5\ncheckpoint_every = 0\n"
            "saddle_check = false\n[survey]\ncharges = [1]\n")
    table = solitons.survey(text, out=tmp_path / "s", figures=False)
    assert list(table["Q"]) == [1] and table["status"].tolist() == ["finished"]
    assert table["energy_per_q34"].iloc[0] == pytest.approx(table["energy"].iloc[0])  # Q^(3/4) = 1
    result = solitons.load(tmp_path / "s" / table["task"].iloc[0])
    assert result.energy == table["energy"].iloc[0]
    figure = solitons.gallery([result, tmp_path / "s" / table["task"].iloc[0]])
    assert len([ax for ax in figure.axes if ax.name == "3d"]) == 2
    page = result.to_html()
    assert "Plotly.newPlot" in page and f"{result.energy:.6f}" in page
    assert result.to_html(tmp_path / "v.html") == tmp_path / "v.html" and (tmp_path / "v.html").stat().st_size > 1e6
