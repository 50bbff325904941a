"""What one relaxation gives: the `Result` record (summary, field, grid, energy density,
history, configuration), returned by `solitons.run.relax_record` and by the Python API's
`relax` and `load` alike.  Its views (figures, the HTML page, an xarray Dataset) import
their modules when called."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from solitons.lattice.grid import Grid


@dataclass(frozen=True)
class Result:
    """A relaxed configuration: the summary (energies, charge, virial, verdict, evidence,
    warnings, provenance), the field on its grid, the energy density, the history of the
    relaxation, the merged configuration text and, if it was written, the directory."""

    summary: dict
    field: np.ndarray        # (Nx, Ny, Nz, 3) unit vectors
    grid: Grid
    energy_density: np.ndarray  # (Nx, Ny, Nz), normalised energy per unit volume
    history: dict            # per-step arrays: step, energy, force, seconds; monitor values
    config: str              # the merged configuration (TOML)
    path: Path | None = None

    @property
    def energy(self) -> float:
        """Total energy in Battye-Sutcliffe units (docs/references.md [R1])."""
        return float(self.summary["energy"])

    @property
    def terms(self) -> dict[str, float]:
        return dict(self.summary["terms"])

    @property
    def charge(self) -> float:
        """Hopf charge by the Whitehead integral."""
        return float(self.summary["hopf_charge"])

    @property
    def virial(self) -> float:
        """Derrick residual sum_a h_a dE/dh_a / E (0 at a stationary point in infinite space)."""
        return float(self.summary["virial"])

    @property
    def verdict(self) -> str:
        return str(self.summary["verdict"])

    @property
    def evidence(self) -> dict:
        return dict(self.summary["evidence"])

    @property
    def warnings(self) -> list[str]:
        return list(self.summary["warnings"])

    @property
    def inertia(self) -> dict | None:
        """U (isospin), W (mixed), V (spin, about the energy centre) and the 4 x 4 matrix
        of `solitons.measure.inertia`, inside the box (None for results without them)."""
        return self.summary.get("inertia")

    @property
    def converged(self) -> bool:
        return bool(self.summary["converged"])

    def figures(self, level: float | None = None) -> dict[str, Any]:
        """The run's figures as matplotlib Figure objects (nothing is written): slices,
        isosurface (n3 = level, default -0.8), curves, history."""
        from solitons.views import plots

        level = plots.DEFAULT_LEVEL if level is None else level
        meta = {"label": self.summary.get("label"), "hopf_charge": self.charge, "energy": self.energy,
                "model": self.summary.get("model")}
        return {
            "slices": plots.plot_slices(self.field, self.grid, self.energy_density, None, meta),
            "isosurface": plots.plot_isosurface(self.field, self.grid, None, meta, level),
            "curves": plots.plot_curves(self.field, self.grid, None, meta),
            "history": plots.plot_history(self.history, None, meta),
        }

    def to_html(self, path: str | Path | None = None, level: float | None = None) -> str | Path:
        """The interactive 3D page of `solitons show --html` (self-contained, offline):
        written to ``path`` and the path returned, or the HTML text when ``path`` is None."""
        from solitons.views import html_view, plots

        level = plots.DEFAULT_LEVEL if level is None else level
        if path is None:
            return html_view.view_html(self.field, self.grid, self.summary, level)
        return html_view.write_view({"field": self.field, "grid": self.grid, "summary": self.summary}, path, level)

    def to_xarray(self):
        """The field and the energy density as an xarray Dataset on the site coordinates
        x, y, z (physical positions, stretched grids included), with units and the
        normalisation in attributes and the summary's main numbers as dataset attributes."""
        import xarray as xr

        x, y, z = self.grid.axes()
        coords = {"x": ("x", x, {"units": "model length"}), "y": ("y", y, {"units": "model length"}),
                  "z": ("z", z, {"units": "model length"}), "component": ("component", ["n1", "n2", "n3"])}
        data = {
            "n": (("x", "y", "z", "component"), self.field,
                  {"long_name": "unit-vector field n", "units": "1"}),
            "energy_density": (("x", "y", "z"), self.energy_density,
                               {"long_name": "energy density", "units": "energy / model length^3",
                                "normalisation": self.summary.get("normalisation", "")}),
        }
        attrs = {"energy": self.energy, "hopf_charge": self.charge, "virial": self.virial,
                 "verdict": self.verdict, "spacing": list(self.grid.spacing), "boundary": self.grid.boundary,
                 "stretch": list(self.grid.stretch), "config": self.config}
        return xr.Dataset(data, coords=coords, attrs=attrs)

    def __repr__(self) -> str:
        return (f"Result(E = {self.energy:.6f}, Q = {self.charge:.4f}, virial = {self.virial:+.4f}, "
                f"verdict = {self.verdict!r}, grid = {'x'.join(map(str, self.grid.shape))})")
