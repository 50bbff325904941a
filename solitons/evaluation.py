"""A field's numbers without relaxing it: the energy per term, the density, the Hopf
charge, the Derrick virial, the largest and RMS tangent force, the preimage label and the
trust measures with every other input of the verdict (`solitons.judge.evidence`).  For a
trial function from a paper, a field from another calculation or an array in a notebook."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from solitons.judge.evidence import Evidence, gather
from solitons.lattice.grid import Grid
from solitons.measure.knots import solution_label
from solitons.measure.topology import hopf_charge
from solitons.model.energy import Model


@dataclass(frozen=True)
class Evaluation:
    """energy and terms in the normalisation of `solitons.model.energy`; density per unit
    volume on the grid; forces in Euler-Lagrange units (gradient / `Model.site_scale`),
    tangent to the sphere, zero on held border sites; evidence: the trust measures."""

    energy: float
    terms: dict
    density: np.ndarray
    hopf_charge: float
    virial: float
    virial_per_axis: list
    max_force: float
    rms_force: float
    label: str
    evidence: Evidence

    def __repr__(self) -> str:
        return (f"Evaluation(E = {self.energy:.6f}, Q = {self.hopf_charge:.4f}, virial = {self.virial:+.4f}, "
                f"max force {self.max_force:.2e}, {self.label})")


def check_field(field, grid: Grid) -> np.ndarray:
    """``field`` as float64 unit vectors on ``grid``; ValueError naming what is wrong."""
    field = np.asarray(field, dtype=np.float64)
    if field.shape != grid.shape + (3,):
        raise ValueError(f"the field has shape {field.shape}; the grid {grid.shape} needs {grid.shape + (3,)}")
    if not np.all(np.isfinite(field)):
        site = tuple(int(i) for i in np.argwhere(~np.all(np.isfinite(field), axis=-1))[0])
        raise ValueError(f"the field is not finite at site {site}")
    length = np.linalg.norm(field, axis=-1)
    if np.any(length < 1e-12):
        raise ValueError("the field vanishes at some site: it must be a unit vector (or normalisable) everywhere")
    return field / length[..., None]


def evaluate_field(model: Model, field) -> Evaluation:
    """Every number of `Evaluation` for ``field`` (normalised to unit length first)."""
    grid = model.grid
    field = check_field(field, grid)
    energies = model.energies(field)
    density, virial = model.density_and_virial(field)
    _, gradient = model.evaluate(field)
    force = np.linalg.norm(np.asarray(gradient) / model.site_scale(), axis=-1)
    charge = hopf_charge(field, grid)
    curves = solution_label(field, grid, density=density)
    evidence = gather(field, grid, density, charge, round(charge), virial["total"], "not relaxed",
                      open_chains=curves["open_chains"], linking_charge=curves["linking_charge"])
    return Evaluation(float(sum(energies.values())), energies, np.asarray(density), float(charge),
                      float(virial["total"]), list(virial["per_axis"]), float(force.max()),
                      float(np.sqrt(np.mean(force**2))), curves["label"], evidence)
