"""The objects of one run from its validated RunSpec: grid, terms (user terms imported and
validated), model, initial field, and the memory guard; `RunError` for a run that cannot
start."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from solitons.config import USER_KIND, RunSpec
from solitons.io.results import read_result
from solitons.lattice.grid import Grid
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
    else:
        field = initial_field(grid, init.part)
    if grid.boundary == "fixed":
        field = field * grid.free_mask() + np.array([0.0, 0.0, 1.0]) * (1.0 - grid.free_mask())
    return add_noise(field, grid, init.noise, init.seed)


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
