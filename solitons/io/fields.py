"""Start fields of other origin: a formula in a Python file, or an array in an NPY or HDF5 file.

A field enters as unit vectors n (an array of shape (Nx, Ny, Nz, 3)) or as the complex
stereographic coordinate W (shape (Nx, Ny, Nz)), with the convention of the built-in
families, n = (2 Re W, 2 Im W, 1 - |W|^2) / (1 + |W|^2), so W = 0 is the vacuum
n = (0, 0, 1) (solitons.relaxation.initial).  Vectors are normalised to unit length.

* ``initial.family = "formula"``: ``initial.function`` (default ``field``) of the Python
  file ``initial.file`` is called as ``f(x, y, z, **initial.parameters)`` with the physical
  coordinates of every site (arrays of the grid's shape; stretched grids included) and
  returns n or W on those sites.
* ``initial.family = "array"``: the array of ``initial.file`` (``.npy``, or ``.h5`` /
  ``.hdf5`` with the dataset ``initial.dataset``, which may be left out when the file holds
  one dataset) on a uniform box centred on the origin with spacing ``initial.spacing``
  (default: the run's).  On another grid it is interpolated with cubic splines
  (solitons.relaxation.initial.interpolate_field).

Both are validated as user terms are: shape, finite values, no zero vector, and the vacuum
at the border of a fixed box (n3 >= `BORDER_N3` on every border site; the border is then
pinned to the vacuum as for the built-in families).  Every refusal is a `FieldInputError`
naming the file and what is wrong.
"""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import numpy as np

from solitons.lattice.grid import Grid
from solitons.relaxation.initial import field_from_fraction, interpolate_field

BORDER_N3 = 0.5  # a border site with n3 below this is nearer the antivacuum than the vacuum


class FieldInputError(ValueError):
    """A start field that cannot be used; the message names the file."""


def as_unit_field(values, shape: tuple[int, ...], label: str) -> np.ndarray:
    """n (shape + (3,), real) or W (shape, complex or real) as float64 unit vectors."""
    values = np.asarray(values)
    if values.shape == tuple(shape) + (3,) and not np.iscomplexobj(values):
        field = values.astype(np.float64)
    elif values.shape == tuple(shape):
        w = values.astype(np.complex128)
        if not np.all(np.isfinite(w)):
            bad = np.argwhere(~np.isfinite(w))
            raise FieldInputError(f"{label}: W has non-finite values at {len(bad)} site{'s' if len(bad) > 1 else ''} "
                                  f"(the first at index {tuple(int(i) for i in bad[0])}; give n where W has poles)")
        return field_from_fraction(w, np.ones_like(w))
    else:
        raise FieldInputError(f"{label}: has shape {values.shape}; expected n of shape {tuple(shape) + (3,)} "
                              f"or complex W of shape {tuple(shape)}")
    if not np.all(np.isfinite(field)):
        bad = np.argwhere(~np.all(np.isfinite(field), axis=-1))
        raise FieldInputError(f"{label}: non-finite values at {len(bad)} site{'s' if len(bad) > 1 else ''} "
                              f"(the first at index {tuple(int(i) for i in bad[0])})")
    length = np.linalg.norm(field, axis=-1)
    if np.any(length == 0.0):
        site = tuple(int(i) for i in np.argwhere(length == 0.0)[0])
        raise FieldInputError(f"{label}: n is the zero vector at index {site}: no direction on S^2 there")
    return field / length[..., None]


def check_border(field: np.ndarray, grid: Grid, label: str) -> None:
    """On a fixed box every border site must lie near the vacuum (n3 >= BORDER_N3)."""
    if grid.boundary != "fixed":
        return
    border = grid.free_mask()[..., 0] == 0.0
    n3 = np.where(border, field[..., 2], np.inf)
    site = np.unravel_index(int(np.argmin(n3)), n3.shape)
    if n3[site] < BORDER_N3:
        where = ", ".join(f"{c:.4g}" for c in (axis[i] for axis, i in zip(grid.axes(), site)))
        raise FieldInputError(f"{label}: the field is not near the vacuum n = (0, 0, 1) at the border of the box: "
                              f"n3 = {n3[site]:.4g} at ({where}), below {BORDER_N3} (the border is held at the "
                              "vacuum; take a larger box, a smaller soliton, or W -> 0 far away)")


def formula_field(path: str | Path, function: str, grid: Grid, parameters: dict | None = None) -> np.ndarray:
    """The start field that ``function`` of the Python file ``path`` gives on ``grid``."""
    path = Path(path)
    label = f"{path}:{function}"
    if not path.is_file():
        raise FieldInputError(f"{path}: formula file not found")
    module_name = f"solitons_user_field_{abs(hash(str(path.resolve())))}"
    try:
        spec = importlib.util.spec_from_file_location(module_name, path)
        module = importlib.util.module_from_spec(spec)
        sys.modules[module_name] = module
        spec.loader.exec_module(module)
    except Exception as error:  # any failure inside the user's file
        raise FieldInputError(f"{path}: cannot be imported: {type(error).__name__}: {error}") from None
    formula = getattr(module, function, None)
    if not callable(formula):
        raise FieldInputError(f"{path}: no function named {function!r}")
    x, y, z = grid.mesh()
    try:
        with np.errstate(all="ignore"):
            values = formula(x, y, z, **dict(parameters or {}))
    except Exception as error:
        raise FieldInputError(f"{label}: fails on the grid: {type(error).__name__}: {error}") from None
    field = as_unit_field(values, grid.shape, label)
    check_border(field, grid, label)
    return field


def read_array(path: str | Path, dataset: str = "") -> np.ndarray:
    """The array of an NPY file, or of one dataset of an HDF5 file."""
    path = Path(path)
    if not path.is_file():
        raise FieldInputError(f"{path}: field file not found")
    suffix = path.suffix.lower()
    if suffix == ".npy":
        try:
            return np.load(path, allow_pickle=False)
        except (OSError, ValueError) as error:
            raise FieldInputError(f"{path}: not a readable NPY array ({error})") from None
    if suffix not in (".h5", ".hdf5"):
        raise FieldInputError(f"{path}: expected a .npy, .h5 or .hdf5 file")
    import h5py

    try:
        with h5py.File(path, "r") as h5:
            names: list[str] = []
            h5.visititems(lambda name, item: names.append(name) if isinstance(item, h5py.Dataset) else None)
            if not dataset:
                if len(names) != 1:
                    raise FieldInputError(f"{path}: holds {len(names)} datasets ({', '.join(names[:8])}); "
                                          "name one with initial.dataset")
                dataset = names[0]
            if dataset not in names:
                raise FieldInputError(f"{path}: no dataset {dataset!r}; it holds {', '.join(names[:8]) or 'none'}")
            return np.asarray(h5[dataset])
    except OSError as error:
        raise FieldInputError(f"{path}: not a readable HDF5 file ({error})") from None


def array_field(path: str | Path, dataset: str, spacing: tuple[float, float, float], grid: Grid) -> np.ndarray:
    """The field of an array file on a uniform centred box of ``spacing``, on ``grid``."""
    label = f"{path}" + (f":{dataset}" if dataset else "")
    values = read_array(path, dataset)
    shape = values.shape[:3] if values.ndim == 4 else values.shape
    if len(shape) != 3 or min(shape) < 2:
        raise FieldInputError(f"{label}: has shape {values.shape}; expected n of shape (Nx, Ny, Nz, 3) "
                              "or complex W of shape (Nx, Ny, Nz)")
    source = Grid.centred(shape, spacing, "fixed", (0.0, 0.0, 0.0))
    field = as_unit_field(values, source.shape, label)
    check_border(field, source, label)
    if source.shape == grid.shape and source.spacing == grid.spacing and not any(grid.stretch):
        return field
    if any(grid.stretch):
        raise FieldInputError(f"{label}: is given on a uniform box; this run's grid is stretched "
                              f"({grid.stretch}): run it on a uniform grid")
    return interpolate_field(field, source, grid)
