"""Start fields of other origin (solitons.io.fields): a formula in a Python file and an
array in an NPY or HDF5 file, each validated, interpolated onto the run's grid when it
was given on another, and checked against the Hopf charge it should carry."""

import textwrap

import h5py
import numpy as np
import pytest

import solitons
from solitons.assemble import make_grid, make_initial_field
from solitons.config import ConfigError, load
from solitons.measure.topology import hopf_charge
from solitons.run import RunError

# The Hopf map written out by hand from its textbook definition (common practice): the
# point x of R^3 goes to (Z1, Z0) on S^3 with Z1 = (x + i y) sin f / r, Z0 = cos f + i z sin f / r
# for a profile f falling from pi at r = 0 to 0, and then to S^2 by the Hopf fibration
# n1 + i n2 = 2 Z1 conj(Z0), n3 = |Z0|^2 - |Z1|^2.  The profile is the built-in family's, as
# its docstring states it: f = pi (1 - r / R)^2 inside R = size / (1 - 1 / sqrt 2).
HOPF_BY_HAND = textwrap.dedent("""
    import numpy as np

    def field(x, y, z, size=1.0):
        R = size / (1.0 - 1.0 / np.sqrt(2.0))
        r = np.sqrt(x * x + y * y + z * z)
        f = np.where(r < R, np.pi * (1.0 - np.minimum(r, R) / R) ** 2, 0.0)
        s = np.where(r > 0, np.sin(f) / np.where(r > 0, r, 1.0), 2.0 * np.pi / R)
        z1 = (x + 1j * y) * s
        z0 = np.cos(f) + 1j * z * s
        w = 2.0 * z1 * np.conj(z0)
        return np.stack([w.real, w.imag, abs(z0) ** 2 - abs(z1) ** 2], axis=-1)

    def stereographic(x, y, z, size=1.0):
        n = field(x, y, z, size)
        return (n[..., 0] + 1j * n[..., 1]) / (1.0 + n[..., 2])   # W of n (n3 = -1 nowhere on these grids)

    def upside_down(x, y, z):
        return -field(x, y, z)
""")

GRID = ["grid.points=33", "grid.spacing=0.3"]


@pytest.fixture()
def formula(tmp_path):
    path = tmp_path / "hopf.py"
    path.write_text(HOPF_BY_HAND)
    return path


def _start(items):
    spec = load(None, GRID + items, text="")
    return spec, make_initial_field(spec, make_grid(spec))


def test_formula_hopf_map_equals_the_built_in_family(formula):
    for size in (1.0, 1.3):
        _, built_in = _start([f"initial.size={size}"])
        spec, mine = _start(["initial.family=formula", f"initial.file={formula}", "initial.charge=1",
                             f"initial.parameters={{size = {size}}}"])
        np.testing.assert_allclose(mine, built_in, atol=1e-12, rtol=0)
        assert spec.initial.expected_charge == 1 and spec.initial.description == "formula(hopf.py:field)"
    # the same map given as its stereographic coordinate W
    _, from_w = _start(["initial.family=formula", f"initial.file={formula}", "initial.charge=1",
                        "initial.function=stereographic"])
    np.testing.assert_allclose(from_w, _start([])[1], atol=1e-9, rtol=0)


def test_array_on_another_grid_is_interpolated_and_keeps_its_charge(tmp_path):
    """An axial(2,1) start (Q = 2) stored on 49^3, h = 0.2 is read from NPY and from HDF5
    and splined onto a finer grid (61^3, h = 0.16) and a coarser one (33^3, h = 0.3).  On the
    finer one its charge is 2 within 1e-3 (measured 1.99999); on the coarser one it equals
    the charge of the built-in family sampled there (1.9768, the coarse grid's own reading)
    within 0.005 (measured 1.9796).  The values agree with the built-in family on each grid
    within 0.02 (the cubic spline's error at h = 0.2, measured 0.011)."""
    fine = load(None, ["grid.points=49", "grid.spacing=0.2", "initial.a=2"], text="")
    field = make_initial_field(fine, make_grid(fine))
    np.save(tmp_path / "n.npy", field)
    with h5py.File(tmp_path / "n.h5", "w") as h5:
        h5["fields/n"] = field
        h5["notes"] = np.arange(3)
    for target, tolerance in ((["grid.points=61", "grid.spacing=0.16"], 1e-3), (GRID, 0.005)):
        direct_spec = load(None, target + ["initial.a=2"], text="")
        grid = make_grid(direct_spec)
        direct = make_initial_field(direct_spec, grid)
        expected = 2.0 if tolerance == 1e-3 else hopf_charge(direct, grid)
        for source in ([f"initial.file={tmp_path / 'n.npy'}"],
                       [f"initial.file={tmp_path / 'n.h5'}", "initial.dataset=fields/n"]):
            spec = load(None, target + ["initial.family=array", "initial.charge=2", "initial.spacing=0.2"] + source,
                        text="")
            start = make_initial_field(spec, make_grid(spec))
            assert hopf_charge(start, grid) == pytest.approx(expected, abs=tolerance)
            assert np.max(np.abs(start - direct)) < 0.02
    with pytest.raises(RunError, match="2 datasets.*initial.dataset"):
        _start(["initial.family=array", "initial.charge=2", "initial.spacing=0.2", f"initial.file={tmp_path / 'n.h5'}"])


def test_a_formula_start_relaxes_like_the_built_in_one(formula):
    """The same start gives the same run.  The two starts differ by rounding (below 1e-12),
    which 30 L-BFGS steps amplify to a few 1e-11 relative (measured 2.6e-11), so the energies
    after 30 steps agree to 1e-9."""
    common = {"grid": {"points": 33, "spacing": 0.3}, "relax": {"max_steps": 30}}
    built_in = solitons.relax(None, **common)
    mine = solitons.relax(None, initial={"family": "formula", "file": str(formula), "charge": 1}, **common)
    assert mine.energy == pytest.approx(built_in.energy, rel=1e-9, abs=0)
    assert mine.summary["family"] == "formula(hopf.py:field)"


def test_bad_field_files_are_refused_by_name(formula, tmp_path):
    with pytest.raises(ConfigError, match="initial.charge"):
        load(None, GRID + ["initial.family=formula", f"initial.file={formula}"], text="")
    with pytest.raises(ConfigError, match="initial.file.*no such file"):
        load(None, GRID + ["initial.family=formula", "initial.file=nowhere.py", "initial.charge=1"], text="")
    with pytest.raises(ConfigError, match="initial.dataset.*not used by the formula"):
        load(None, GRID + ["initial.family=formula", f"initial.file={formula}", "initial.charge=1",
                           "initial.dataset=x"], text="")
    with pytest.raises(ConfigError, match="initial.charge.*only by the formula and array"):
        load(None, GRID + ["initial.charge=3"], text="")
    with pytest.raises(RunError, match="initial.charge = 2.*Hopf charge 1.0"):
        _start(["initial.family=formula", f"initial.file={formula}", "initial.charge=2"])
    with pytest.raises(RunError, match="upside_down: the field is not near the vacuum"):
        _start(["initial.family=formula", f"initial.file={formula}", "initial.charge=1", "initial.function=upside_down"])
    with pytest.raises(RunError, match="no function named 'missing'"):
        _start(["initial.family=formula", f"initial.file={formula}", "initial.charge=1", "initial.function=missing"])
    np.save(tmp_path / "flat.npy", np.zeros((5, 5)))
    with pytest.raises(RunError, match="flat.npy: has shape \\(5, 5\\)"):
        _start(["initial.family=array", "initial.charge=1", f"initial.file={tmp_path / 'flat.npy'}"])
    bad = np.zeros((9, 9, 9, 3))
    bad[..., 2] = 1.0
    bad[4, 4, 4] = np.nan
    np.save(tmp_path / "nan.npy", bad)
    with pytest.raises(RunError, match="non-finite values at 1 site \\(the first at index \\(4, 4, 4\\)"):
        _start(["initial.family=array", "initial.charge=1", f"initial.file={tmp_path / 'nan.npy'}"])
