"""Figures and the XDMF sidecar: files are valid, sized, not blank; isosurface topology."""

import subprocess
import sys
import xml.etree.ElementTree as ET

import h5py
import matplotlib.image
import numpy as np
import pytest

from solitons.config import load
from solitons.io.results import read_result
from solitons.lattice.grid import Grid
from solitons.relaxation.initial import axial_map
from solitons.run import relax
from solitons.views.plots import euler_characteristic, isosurface_mesh, write_figures

SIZES = {"slices.png": (880, 1430), "isosurface.png": (825, 880), "curves.png": (748, 1430),
         "history.png": (880, 1320)}  # (height, width) = figsize * 110 dpi


@pytest.fixture(scope="module")
def relaxed(tmp_path_factory):
    """A Q = 1 soliton relaxed for 150 L-BFGS steps on 41^3, h = 0.2 (close to its minimum:
    the energy changes by less than 1e-4 after that)."""
    out = tmp_path_factory.mktemp("relaxed")
    spec = load(None, ["grid.points=41", "grid.spacing=0.2", "relax.max_steps=150"], text="")
    relax(spec, out, stream=None)
    return out


def test_relaxed_hopf_tube_is_one_torus(relaxed):
    """The level set n3 = -0.8 of a Q = 1 soliton is a tube around one unknotted position
    curve: one closed surface of genus one, Euler characteristic 0 (derived: the Hopf
    soliton's position curve is a circle)."""
    result = read_result(relaxed / "result.h5")
    _, faces, _ = isosurface_mesh(result["field"], result["grid"], -0.8)
    assert euler_characteristic(faces) == (0, True, 1)


def test_axial_charge_two_tube_is_one_torus():
    """W = Z1^2 / Z0 has one position curve (Z0 = 0, a circle): Euler characteristic 0."""
    grid = Grid.centred(48, 0.15, "fixed")
    _, faces, _ = isosurface_mesh(axial_map(grid, 2, 1, 1.0), grid, -0.8)
    assert euler_characteristic(faces) == (0, True, 1)


def test_two_separate_tubes_are_counted():
    """Two solitons far apart: two tori, Euler characteristic 0 + 0, two components."""
    grid = Grid.centred(64, 0.15, "fixed")
    left = axial_map(grid, 1, 1, 0.8, centre=(-2.4, 0, 0))
    right = axial_map(grid, 1, 1, 0.8, centre=(2.4, 0, 0))
    x = grid.mesh()[0]
    field = np.where((x < 0)[..., None], left, right)
    _, faces, _ = isosurface_mesh(field, grid, -0.8)
    assert euler_characteristic(faces) == (0, True, 2)


def test_figures_are_valid_sized_and_not_blank(relaxed, tmp_path):
    paths = write_figures(read_result(relaxed / "result.h5"), tmp_path)
    assert sorted(p.name for p in paths) == sorted(SIZES)
    for path in paths:
        image = matplotlib.image.imread(path)  # raises on an invalid PNG
        assert image.shape[:2] == SIZES[path.name], path.name
        grey = image[..., :3].mean(axis=-1)
        assert grey.std() > 0.05, path.name  # a blank or single-colour figure fails


def test_relax_writes_figures_and_show_command(relaxed, tmp_path):
    config = tmp_path / "c.toml"
    config.write_text("[grid]\npoints = 25\nspacing = 0.32\n[relax]\nmax_steps = 3\n")
    out = tmp_path / "run"
    proc = subprocess.run([sys.executable, "-m", "solitons.cli", "relax", str(config), "--out", str(out),
                           "--quiet"], capture_output=True, text=True, cwd=tmp_path)
    assert proc.returncode == 1, proc.stderr
    assert all((out / name).exists() for name in SIZES)
    shown = tmp_path / "shown"
    proc = subprocess.run([sys.executable, "-m", "solitons.cli", "show", str(relaxed / "result.h5"),
                           "--out", str(shown)], capture_output=True, text=True, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert all((shown / name).exists() for name in SIZES)
    proc = subprocess.run([sys.executable, "-m", "solitons.cli", "gallery", str(relaxed / "result.h5"),
                           str(out / "result.h5"), "--out", str(tmp_path / "g.png")],
                          capture_output=True, text=True, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    gallery = matplotlib.image.imread(tmp_path / "g.png")[..., :3]
    # both panels drawn and the frame filled: phase colours (saturated) in each half of the
    # panel area (left of the colour bar); two results once used only the left 40 %
    spread = gallery.max(axis=-1) - gallery.min(axis=-1)
    coloured_columns = np.flatnonzero((spread > 0.5).any(axis=0)) / gallery.shape[1]
    assert coloured_columns.min() < 0.3 and ((coloured_columns > 0.55) & (coloured_columns < 0.85)).any()
    missing = subprocess.run([sys.executable, "-m", "solitons.cli", "show", str(tmp_path / "nope.h5")],
                             capture_output=True, text=True, cwd=tmp_path)
    assert missing.returncode == 2 and "nope.h5" in missing.stderr


def test_xdmf_sidecar_names_existing_datasets(relaxed):
    """The sidecar is XML (XDMF 3), and every HDF path it names exists with the stated
    dimensions and 8-byte floats."""
    root = ET.parse(relaxed / "result.xdmf").getroot()
    assert root.tag == "Xdmf"
    items = [item for item in root.iter("DataItem") if item.get("Format") == "HDF"]
    assert len(items) == 3
    with h5py.File(relaxed / "result.h5") as h5:
        for item in items:
            file_name, dataset = item.text.strip().split(":")
            assert (relaxed / file_name).exists()
            shape = tuple(int(n) for n in item.get("Dimensions").split())
            assert h5[dataset].shape == shape
            assert h5[dataset].dtype == np.float64 and item.get("Precision") == "8"
        np.testing.assert_allclose(h5["coordinates"][1, 2, 3], [-3.8, -3.6, -3.4])


def test_results_without_a_model_entry_get_it_from_their_config(relaxed, tmp_path):
    """Results written before the summary named the model: the figures' titles read it
    from the stored configuration, in the driver's wording (solitons.run.describe_model)."""
    import json
    import shutil

    from solitons.io.results import model_from_config
    from solitons.run import describe_model, make_model

    result = read_result(relaxed / "result.h5")
    spec = load(None, [], text=result["config"])
    assert model_from_config(result["config"]) == describe_model(make_model(spec, result["grid"]))
    old = tmp_path / "old.h5"
    shutil.copy(relaxed / "result.h5", old)
    with h5py.File(old, "r+") as h5:
        summary = json.loads(h5.attrs["summary"])
        del summary["model"]
        h5.attrs["summary"] = json.dumps(summary)
    assert read_result(old)["summary"]["model"] == result["summary"]["model"]
