"""The objects of one run from its validated RunSpec: grid, terms (user terms imported and
validated), model, initial field, and the memory guard; `RunError` for a run that cannot
start."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from solitons.config import USER_KIND, RunSpec
from solitons.io.results import read_result
from solitons.lattice.grid import Grid
from solitons.measure.topology import hopf_charge
from solitons.model.energy import Model
from solitons.model.terms import BUILTIN_TERMS, Term
from solitons.model.userterms import load_user_term
from solitons.relaxation.initial import add_noise, initial_field, interpolate_field

# Peak growth of resident memory per grid point during an L-BFGS relaxation (float64,
# memory 4), measured with analysis/bench_memory.py: 461-488 bytes per point at 96^3 for the
# default model on the fused kernel (any scheme), 441 at 128^3 with a built-in correction
# (staged kernel), 799 and 909 at 128^3 with a user term without and with a Laplacian
# (the compiled pointwise part holds the local fields of every site and their derivative
# rows).  The diagnostics (Hopf charge FFTs in complex128, curves, figures) come on top and
# are not in that measurement, so the guard keeps the earlier, larger figure.
BYTES_PER_POINT = 2600

# How far the Hopf charge of a start field read from a file may lie from initial.charge:
# the spectral charge of a resolved field is within 1e-3 of an integer on the survey grids
# (measured: 6.9998 for the Q = 7 trefoil at h = 0.2), so a quarter only catches a wrong
# charge or a field the box cuts.
START_CHARGE_TOLERANCE = 0.25


class RunError(RuntimeError):
    """A run cannot start (bad output directory, memory, resume mismatch)."""


def make_grid(spec: RunSpec) -> Grid:
    return Grid.centred(spec.grid.points, spec.grid.spacing, spec.grid.boundary, spec.grid.stretch)


def make_terms(spec: RunSpec) -> tuple[Term, ...]:
    """Terms of the model; user terms are imported and validated here (UserTermError)."""
    terms = []
    for t in spec.terms:
        if t.kind == USER_KIND:
            kind, _ = load_user_term(t.file, t.function, t.derivatives, t.laplacian,
                                     dict(t.parameters), name=t.name)
            terms.append(Term(t.name, kind, t.coupling))
        else:
            terms.append(Term(t.name, BUILTIN_TERMS[t.kind], t.coupling, t.parameters))
    return tuple(terms)


def make_model(spec: RunSpec, grid: Grid) -> Model:
    return Model(make_terms(spec), grid, spec.grid.scheme, spec.relax.backend)


def make_initial_field(spec: RunSpec, grid: Grid) -> np.ndarray:
    init = spec.initial
    if init.family == "result":
        field = field_from_result(init.part["file"], grid)
    elif init.family in ("formula", "array"):
        field = field_from_file(init.part, grid)
    else:
        field = initial_field(grid, init.part)
    if grid.boundary == "fixed":
        field = field * grid.free_mask() + np.array([0.0, 0.0, 1.0]) * (1.0 - grid.free_mask())
    return add_noise(field, grid, init.noise, init.seed)


def field_from_file(part: dict, grid: Grid) -> np.ndarray:
    """The start field of the formula or array family (solitons.io.fields) on ``grid``,
    refused (RunError) when it is unusable or its Hopf charge is not within
    `START_CHARGE_TOLERANCE` of initial.charge."""
    from solitons.io.fields import FieldInputError, array_field, formula_field

    try:
        if part["family"] == "formula":
            field = formula_field(part["file"], part["function"], grid, part["parameters"])
        else:
            field = array_field(part["file"], part["dataset"], part["spacing"], grid)
    except FieldInputError as error:
        raise RunError(f"initial: {error}") from None
    charge = hopf_charge(field, grid)
    if not abs(charge - part["charge"]) <= START_CHARGE_TOLERANCE:
        raise RunError(f"initial.charge = {part['charge']}, but the start field from {part['file']} has Hopf charge "
                       f"{charge:.4f} on this grid (give its charge, or a box and spacing that hold it)")
    return field


def field_from_result(path: str, grid: Grid) -> np.ndarray:
    """The relaxed field of a result file on ``grid``: an axial result rotated out from its
    half plane (solitons.axial.model.to_3d), a 3D one as it is on its own grid and
    interpolated (cubic splines, `interpolate_field`) onto another spacing or box."""
    from solitons.io.results import read_axial

    axial = read_axial(path)
    if axial is not None:
        from solitons.axial.model import to_3d

        return to_3d(axial["field"], axial["grid"], grid)
    data = read_result(path)
    if data["grid"] == grid:
        return data["field"]
    if data["grid"].stretch != grid.stretch:
        raise RunError(f"{path}: its grid is stretched by {data['grid'].stretch}, this run's by {grid.stretch}; "
                       "a 3D result seeds a run of the same stretch")
    # another spacing or box: cubic splines onto this grid (outside the file's box, its vacuum border)
    return interpolate_field(data["field"], data["grid"], grid)


def available_memory_bytes() -> int | None:
    try:
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemAvailable:"):
                return int(line.split()[1]) * 1024
    except OSError:
        return None
    return None


def check_memory(grid: Grid) -> None:
    need = BYTES_PER_POINT * grid.npoints
    have = available_memory_bytes()
    if have is not None and need > 0.9 * have:
        raise RunError(
            f"grid {grid.shape} needs about {need / 2**30:.1f} GiB "
            f"({BYTES_PER_POINT} bytes per point) but {have / 2**30:.1f} GiB is available"
        )
