"""Result files: HDF5 result and checkpoint, summary JSON, XDMF sidecar.

Every write goes to a temporary name in the same directory and is renamed into place, so
a reader never sees a half-written file and a killed run leaves its last complete
checkpoint.

``result.h5`` layout::

    /field            float64 (Nx, Ny, Nz, 3), attrs spacing (3,), origin (3,), boundary,
                      stretch (3,) (0: uniform axis; see solitons.grid: spacing and origin
                      are then those of the computational coordinate xi)
    /energy_density   float64 (Nx, Ny, Nz), normalised energy per unit volume
    /coordinates      float64 (Nx, Ny, Nz, 3), site positions (for the XDMF sidecar)
    /history/{step, energy, force, seconds}
    attrs: config (TOML text), version, normalisation, energy, hopf_charge, virial,
           virial_per_axis, status, verdict, summary (the summary JSON text)
    /terms attrs: one energy per term name
"""

from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path

import h5py
import numpy as np

from solitons.grid import Grid


class ResultFileError(OSError):
    """A result or checkpoint file that cannot be read: names the file and the problem."""


def _atomic_target(path: Path):
    path.parent.mkdir(parents=True, exist_ok=True)
    handle, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(handle)
    return Path(tmp)


def finite_json(value):
    """Replace NaN and infinities (not valid JSON) by None, recursively."""
    if isinstance(value, float) and not np.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: finite_json(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [finite_json(v) for v in value]
    return value


def atomic_write_text(path: str | Path, text: str) -> None:
    """Write a text file atomically (temporary name in the same folder, then rename)."""
    path = Path(path)
    tmp = _atomic_target(path)
    try:
        tmp.write_text(text)
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)


def write_json(path: str | Path, data: dict) -> None:
    """Atomic, strict JSON (non-finite numbers written as null)."""
    atomic_write_text(path, json.dumps(finite_json(data), indent=2, allow_nan=False) + "\n")


def _write_field(h5, field, grid: Grid):
    dataset = h5.create_dataset("field", data=np.asarray(field, dtype=np.float64))
    dataset.attrs["spacing"] = np.asarray(grid.spacing, dtype=np.float64)
    dataset.attrs["origin"] = np.asarray(grid.origin, dtype=np.float64)
    dataset.attrs["boundary"] = grid.boundary
    dataset.attrs["stretch"] = np.asarray(grid.stretch, dtype=np.float64)


def _write_history(h5, history_arrays: dict):
    group = h5.create_group("history")
    for key, values in history_arrays.items():
        group.create_dataset(key, data=np.asarray(values))


def write_result(path, field, grid: Grid, energy_density, summary: dict, history_arrays: dict,
                 config_text: str, version: str) -> None:
    """Write ``result.h5`` atomically (layout in the module docstring)."""
    path = Path(path)
    tmp = _atomic_target(path)
    try:
        with h5py.File(tmp, "w") as h5:
            _write_field(h5, field, grid)
            h5.create_dataset("energy_density", data=np.asarray(energy_density, dtype=np.float64))
            h5.create_dataset("coordinates", data=np.stack(grid.mesh(), axis=-1))
            _write_history(h5, history_arrays)
            terms = h5.create_group("terms")
            for name, value in summary["terms"].items():
                terms.attrs[name] = value
            h5.attrs["config"] = config_text
            h5.attrs["version"] = version
            h5.attrs["normalisation"] = summary["normalisation"]
            h5.attrs["energy"] = summary["energy"]
            h5.attrs["hopf_charge"] = summary["hopf_charge"]
            h5.attrs["virial"] = summary["virial"]
            h5.attrs["virial_per_axis"] = np.asarray(summary["virial_per_axis"])
            h5.attrs["status"] = summary["status"]
            h5.attrs["verdict"] = summary["verdict"]
            h5.attrs["summary"] = json.dumps(finite_json(summary), allow_nan=False)
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)


def _grid_from(dataset) -> Grid:
    shape = tuple(int(n) for n in dataset.shape[:3])
    stretch = tuple(map(float, dataset.attrs.get("stretch", (0.0, 0.0, 0.0))))  # absent before stretched grids
    return Grid(shape, tuple(map(float, dataset.attrs["spacing"])),
                tuple(map(float, dataset.attrs["origin"])), str(dataset.attrs["boundary"]), stretch)


def read_result(path) -> dict:
    """Load ``result.h5`` into plain Python: field, grid, energy_density, history,
    terms, config, version and the summary dictionary."""
    try:
        return _read_result(path)
    except (OSError, KeyError) as error:
        raise ResultFileError(f"{path}: not a readable solitons result file ({error})") from None


def _read_result(path) -> dict:
    with h5py.File(path, "r") as h5:
        return {
            "field": h5["field"][...],
            "grid": _grid_from(h5["field"]),
            "energy_density": h5["energy_density"][...],
            "history": {k: v[...] for k, v in h5["history"].items()},
            "terms": {k: float(v) for k, v in h5["terms"].attrs.items()},
            "config": str(h5.attrs["config"]),
            "version": str(h5.attrs["version"]),
            "summary": json.loads(h5.attrs["summary"]),
        }


def write_checkpoint(path, field, grid: Grid, step: int, history_arrays: dict, config_text: str):
    """Atomic checkpoint: field, step, history and the config it belongs to."""
    path = Path(path)
    tmp = _atomic_target(path)
    try:
        with h5py.File(tmp, "w") as h5:
            _write_field(h5, field, grid)
            _write_history(h5, history_arrays)
            h5.attrs["step"] = int(step)
            h5.attrs["config"] = config_text
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)


def read_checkpoint(path) -> dict:
    with h5py.File(path, "r") as h5:
        return {
            "field": h5["field"][...],
            "grid": _grid_from(h5["field"]),
            "history": {k: v[...] for k, v in h5["history"].items()},
            "step": int(h5.attrs["step"]),
            "config": str(h5.attrs["config"]),
        }


def write_xdmf(path, h5_path, grid: Grid) -> None:
    """XDMF 3 sidecar for a result file, so ParaView and VisIt open it directly.

    The field is stored x-slowest, (Nx, Ny, Nz, 3); a co-rectilinear XDMF mesh would read
    the fastest array axis as x and mirror the picture (a mirror flips the handedness of
    knots), so the sidecar names a structured mesh with explicit site coordinates
    (/coordinates), which is unambiguous.  Attributes: n (vector), n3 and energy_density
    (scalars)."""
    nx, ny, nz = grid.shape
    dims = f"{nx} {ny} {nz}"
    name = Path(h5_path).name
    text = f"""<?xml version="1.0" ?>
<Xdmf Version="3.0">
  <Domain>
    <Grid Name="soliton" GridType="Uniform">
      <Topology TopologyType="3DSMesh" Dimensions="{dims}"/>
      <Geometry GeometryType="XYZ">
        <DataItem Dimensions="{dims} 3" NumberType="Float" Precision="8" Format="HDF">{name}:/coordinates</DataItem>
      </Geometry>
      <Attribute Name="n" AttributeType="Vector" Center="Node">
        <DataItem Dimensions="{dims} 3" NumberType="Float" Precision="8" Format="HDF">{name}:/field</DataItem>
      </Attribute>
      <Attribute Name="energy_density" AttributeType="Scalar" Center="Node">
        <DataItem Dimensions="{dims}" NumberType="Float" Precision="8" Format="HDF">{name}:/energy_density</DataItem>
      </Attribute>
    </Grid>
  </Domain>
</Xdmf>
"""
    path = Path(path)
    tmp = _atomic_target(path)
    try:
        tmp.write_text(text)
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)
