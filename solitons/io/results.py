"""Result files: HDF5 result and checkpoint, summary JSON, XDMF sidecar.

Every write goes to a temporary name in the same directory and is renamed into place, so
a reader never sees a half-written file and a killed run leaves its last complete
checkpoint.

``result.h5`` layout::

    /field            float64 (Nx, Ny, Nz, 3), attrs spacing (3,), origin (3,), boundary,
                      stretch (3,) (0: uniform axis; see solitons.lattice.grid: spacing and origin
                      are then those of the computational coordinate xi)
    /energy_density   float64 (Nx, Ny, Nz), normalised energy per unit volume
    /coordinates      float64 (Nx, Ny, Nz, 3), site positions (for the XDMF sidecar)
    /history/{step, energy, force, seconds}
    attrs: config (TOML text), version, normalisation, energy, hopf_charge, virial,
           virial_per_axis, status, verdict, summary (the summary JSON text),
           provenance (JSON: package version and git commit, Python and library
           versions, each user-term file with its SHA-256 and content)
    /terms attrs: one energy per term name
"""

from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path

import h5py
import numpy as np

from solitons.lattice.grid import Grid

# the files of one run directory
NORMALISATION_TEXT = (
    "E = 1/(32 sqrt(2) pi^2) * sum_terms coupling * Int density d^3x; with dirichlet and "
    "skyrme_faddeev couplings 1 this is the Battye-Sutcliffe normalisation (Q = 1 minimum ~ 1.22)"
)


RESULT = "result.h5"


XDMF = "result.xdmf"


SUMMARY = "summary.json"


CHECKPOINT = "checkpoint.h5"


class ResultFileError(OSError):
    """A result or checkpoint file that cannot be read: names the file and the problem."""


def _current_umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


# Files are created with the permissions of any program's files (0666 less the umask), not
# mkstemp's private 0600: colleagues sharing a results directory can read them.
FILE_MODE = 0o666 & ~_current_umask()
TMP_SUFFIX = ".tmp"


def _atomic_target(path: Path):
    path.parent.mkdir(parents=True, exist_ok=True)
    handle, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=TMP_SUFFIX, dir=path.parent)
    os.fchmod(handle, FILE_MODE)
    os.close(handle)
    return Path(tmp)


def stale_temporaries(directory: str | Path) -> list[Path]:
    """Half-written files that a killed process left in ``directory`` (the temporary names
    of `_atomic_target`; a finished write renames its file into place)."""
    directory = Path(directory)
    if not directory.is_dir():
        return []
    return sorted(p for p in directory.glob(f".*{TMP_SUFFIX}")
                  if any(p.name.startswith(f".{name}.") for name in ("result.h5", "checkpoint.h5", "summary.json",
                                                                     "result.xdmf")))


class OutputError(OSError):
    """An output location that cannot be used: names the path and the problem."""


def check_output_dir(path: str | Path) -> Path:
    """Whether ``path`` can become an output directory, without creating anything: it is
    a writable directory, or its nearest existing ancestor is one.  OutputError if not."""
    path = Path(path)
    if path.exists() and not path.is_dir():
        raise OutputError(f"{path}: exists and is not a directory; name a directory for the output")
    ancestor = path
    while not ancestor.exists():
        ancestor = ancestor.parent
    if not ancestor.is_dir():
        raise OutputError(f"{path}: cannot create it, {ancestor} is a file")
    if not os.access(ancestor, os.W_OK | os.X_OK):
        raise OutputError(f"{path}: cannot write output there ({ancestor} is not writable)")
    return path


def prepare_output_dir(path: str | Path) -> Path:
    """Create ``path`` as a directory (with its parents) and check that files can be
    written in it, before any work starts; an existing file of that name, a parent that
    is a file, or a place without write permission is an OutputError."""
    path = Path(path)
    if path.exists() and not path.is_dir():
        raise OutputError(f"{path}: exists and is not a directory; name a directory for the output")
    try:
        path.mkdir(parents=True, exist_ok=True)
        handle, probe = tempfile.mkstemp(prefix=".write-test.", dir=path)
        os.close(handle)
        os.unlink(probe)
    except OSError as error:
        reason = error.strerror or str(error)
        raise OutputError(f"{path}: cannot write output there ({reason})") from None
    return path


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
        tmp.write_text(text, encoding="utf-8")
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)


def as_json(data: dict) -> dict:
    """``data`` as `write_json` writes it (plain JSON types, non-finite numbers None): a
    record kept in memory then equals one read back from its files."""
    return json.loads(json.dumps(finite_json(data), allow_nan=False))


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
                 config_text: str, version: str, axial: dict | None = None) -> None:
    """Write ``result.h5`` atomically (layout in the module docstring).  ``axial``: the
    half-plane field and density of an axial run (group ``/axial``, solitons.axial.run)."""
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
            if "provenance" in summary:
                h5.attrs["provenance"] = json.dumps(summary["provenance"])
            if axial is not None:
                group = h5.create_group("axial")
                group.create_dataset("field", data=np.asarray(axial["field"], dtype=np.float64))
                group.create_dataset("energy_density", data=np.asarray(axial["energy_density"], dtype=np.float64))
                for key in ("spacing", "stretch", "winding"):
                    group.attrs[key] = axial[key]
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
        data = {
            "field": h5["field"][...],
            "grid": _grid_from(h5["field"]),
            "energy_density": h5["energy_density"][...],
            "history": {k: v[...] for k, v in h5["history"].items()},
            "terms": {k: float(v) for k, v in h5["terms"].attrs.items()},
            "config": str(h5.attrs["config"]),
            "version": str(h5.attrs["version"]),
            "summary": json.loads(h5.attrs["summary"]),
        }
    if not data["summary"].get("model"):  # results written before the summary named the model
        model = model_from_config(data["config"])
        if model:
            data["summary"]["model"] = model
    return data


def model_from_config(text: str) -> str | None:
    """The terms and couplings of a merged configuration, e.g. "1 dirichlet + 1
    skyrme_faddeev + 0.2 log_quartic(c1=0.1)" (the constants given in the file)."""
    import tomllib

    try:
        terms = tomllib.loads(text).get("terms") or {}
    except tomllib.TOMLDecodeError:
        return None
    parts = []
    for name, entries in terms.items():
        if not isinstance(entries, dict):
            return None
        kind = entries.get("kind", name)
        label = name if kind == name else f"{name} [{kind}]"
        constants = {k: v for k, v in entries.items() if k not in ("kind", "coupling", "file", "function",
                                                                  "derivatives", "laplacian")}
        inside = ", ".join(f"{k}={v:g}" if isinstance(v, (int, float)) else f"{k}={v}" for k, v in constants.items())
        parts.append(f"{entries.get('coupling', 1.0):g} {label}" + (f"({inside})" if inside else ""))
    return " + ".join(parts) or None


def write_checkpoint(path, field, grid: Grid, step: int, history_arrays: dict, config_text: str,
                     state: dict | None = None, record: dict | None = None):
    """Atomic checkpoint: field, step, history, the config it belongs to, the minimiser's
    loop state (/minimiser: arrays as datasets, numbers and strings as attributes; see
    solitons.relaxation.minimise) and the run's record so far (``record``: JSON, the segments of a
    run and their counts)."""
    path = Path(path)
    tmp = _atomic_target(path)
    try:
        with h5py.File(tmp, "w") as h5:
            _write_field(h5, field, grid)
            _write_history(h5, history_arrays)
            h5.attrs["step"] = int(step)
            h5.attrs["config"] = config_text
            h5.attrs["record"] = json.dumps(finite_json(record or {}), allow_nan=False)
            group = h5.create_group("minimiser")
            for key, value in (state or {}).items():
                if isinstance(value, np.ndarray):
                    group.create_dataset(key, data=value)
                else:
                    group.attrs[key] = value
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)


def _plain(value):
    """An HDF5 attribute as a Python value (numpy scalars and bytes unwrapped)."""
    if isinstance(value, bytes):
        return value.decode()
    if isinstance(value, np.generic):
        return value.item()
    return value


def read_checkpoint(path) -> dict:
    """Field, grid, history, step, config, minimiser state (None if the checkpoint holds
    none) and record of a checkpoint; an unreadable file is a ResultFileError."""
    try:
        with h5py.File(path, "r") as h5:
            state = None
            if "minimiser" in h5 and len(h5["minimiser"].attrs):
                group = h5["minimiser"]
                state = {k: _plain(v) for k, v in group.attrs.items()}
                state.update({k: v[...] for k, v in group.items()})
            return {
                "field": h5["field"][...],
                "grid": _grid_from(h5["field"]),
                "history": {k: v[...] for k, v in h5["history"].items()},
                "step": int(h5.attrs["step"]),
                "config": str(h5.attrs["config"]),
                "state": state,
                "record": json.loads(h5.attrs.get("record", "{}")),
            }
    except (OSError, KeyError) as error:
        raise ResultFileError(f"{path}: not a readable solitons checkpoint ({error})") from None


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
        tmp.write_text(text, encoding="utf-8")
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)


def read_axial(path) -> dict | None:
    """The half-plane field, density and grid of an axial result file, or None for a 3D
    one."""
    from solitons.axial.model import AxialGrid

    path = Path(path)
    if path.is_dir():
        path = path / "result.h5"
    with h5py.File(path, "r") as h5:
        if "axial" not in h5:
            return None
        group = h5["axial"]
        field = group["field"][...]
        grid = AxialGrid(field.shape[:2], tuple(group.attrs["spacing"]), int(group.attrs["winding"]),
                         tuple(group.attrs["stretch"]))
        return {"field": field, "energy_density": group["energy_density"][...], "grid": grid}
