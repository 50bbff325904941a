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
    from solitons.driver import make_model
    from solitons.energy import Model

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
