"""Moments of inertia of a static soliton: the collective-coordinate data of rigid
isorotations and rotations.

Convention (docs/units.md): each term gets the Lorentz-invariant extension of its density,
d_i -> d_mu.  For the Dirichlet and Skyrme-Faddeev terms of the default model the kinetic
energy is

    T = C Int [ c2 |d_t n|^2 + c4 sum_i |d_t n x d_i n|^2 ] d^3x,   C = 1/(32 sqrt(2) pi^2),

(c2, c4 their couplings).  For rigid motion, d_t n = omega (e3 x n) - ((Omega x x) . grad) n
with x measured from the energy centre, so T = (1/2) q M q for q = (omega, Omega_1,
Omega_2, Omega_3), with

    M_ab = 2 C Int [ c2 A_a . A_b + c4 sum_i (A_a x d_i n) . (A_b x d_i n) ] d^3x,
    A_0 = e3 x n,   A_k = -((e_k x x) . grad) n.

U = M_00 (isospin), W_k = M_0k (mixed), V_kl = M_kl (spin).  Derivatives are sixth-order
central differences (the border continued by its own values, the vacuum of a fixed
box; wrapped on a periodic one); terms without derivatives (potentials) add nothing to T.  Pure: arrays in, numbers out.
"""

from __future__ import annotations

import numpy as np

from solitons.lattice.grid import Grid

NORMALISATION = 1.0 / (32.0 * np.sqrt(2.0) * np.pi**2)
# the kinds whose kinetic counterpart is built in here; others are reported as not extended
EXTENDED = ("dirichlet", "skyrme_faddeev")
STATIC_ONLY = ("potential",)  # no derivatives: no kinetic energy


def _derivative(f: np.ndarray, axis: int, h: float, periodic: bool = False) -> np.ndarray:
    """Sixth-order central difference along ``axis`` (edge values continued, or wrapped
    on a periodic grid)."""
    pad = [(0, 0)] * f.ndim
    pad[axis] = (3, 3)
    g = np.pad(f, pad, mode="wrap" if periodic else "edge")
    n = f.shape[axis]

    def shifted(s):
        return np.take(g, np.arange(3 + s, 3 + s + n), axis=axis)

    return (45.0 * (shifted(1) - shifted(-1)) - 9.0 * (shifted(2) - shifted(-2))
            + (shifted(3) - shifted(-3))) / (60.0 * h)


def energy_centre(density: np.ndarray, grid: Grid) -> np.ndarray:
    weights = np.abs(np.asarray(density))
    total = weights.sum()
    return np.array([float((weights.sum(axis=tuple(b for b in range(3) if b != a)) * x).sum() / total)
                     for a, x in enumerate(grid.axes())])


def inertia_tensors(field: np.ndarray, grid: Grid, density: np.ndarray, c2: float = 1.0, c4: float = 1.0) -> dict:
    """U, W (3), V (3 x 3) and the full 4 x 4 matrix M of ``field`` on a uniform grid,
    about the energy centre of ``density``; also the principal moments of V."""
    if grid.stretched:
        raise ValueError("inertia tensors are computed on uniform grids only")
    n = np.asarray(field, dtype=np.float64)
    h = grid.spacing
    d = [_derivative(n, a, h[a], grid.boundary == "periodic") for a in range(3)]
    centre = energy_centre(density, grid)
    x = [m - c for m, c in zip(grid.mesh(), centre)]
    e3 = np.array([0.0, 0.0, 1.0])
    generators = [np.cross(e3, n)]
    for k in range(3):
        axis = np.zeros(3)
        axis[k] = 1.0
        velocity = np.cross(axis, np.stack(x, -1))  # (e_k x x)
        generators.append(-sum(velocity[..., a, None] * d[a] for a in range(3)))
    sums = np.zeros((4, 4))
    for a in range(4):
        for b in range(a, 4):
            sums[a, b] += c2 * float(np.sum(generators[a] * generators[b]))
    for i in range(3):  # one derivative at a time: four crossed arrays in memory, not twelve
        crossed = [np.cross(g, d[i]) for g in generators]
        for a in range(4):
            for b in range(a, 4):
                sums[a, b] += c4 * float(np.sum(crossed[a] * crossed[b]))
    m = 2.0 * NORMALISATION * float(np.prod(h)) * (np.triu(sums) + np.triu(sums, 1).T)
    v = m[1:, 1:]
    return {"U": float(m[0, 0]), "W": m[0, 1:].tolist(), "V": v.tolist(), "matrix": m.tolist(),
            "principal_V": np.linalg.eigvalsh(v).tolist(), "centre": centre.tolist()}


def model_inertia(field: np.ndarray, grid: Grid, density: np.ndarray, terms) -> dict:
    """`inertia_tensors` for a model's terms: the Dirichlet and Skyrme-Faddeev couplings
    enter; a potential has no kinetic part; every other term is listed under
    ``not_extended`` (its kinetic counterpart is not built in, so U, V, W omit it).
    On a stretched grid: ``computed`` False with the reason.  The box truncates the
    integrals: for the massless model the integrand of U falls like r^-4, so the part
    outside the box falls only like 1/L (a note says so)."""
    if grid.stretched:
        return {"computed": False, "reason": "stretched grid: inertia tensors are computed on uniform grids only"}
    c2 = sum(t.coupling for t in terms if t.kind.name == "dirichlet")
    c4 = sum(t.coupling for t in terms if t.kind.name == "skyrme_faddeev")
    others = [t.name for t in terms if t.kind.name not in EXTENDED + STATIC_ONLY]
    result = inertia_tensors(field, grid, density, c2, c4)
    massive = any(t.kind.name in STATIC_ONLY for t in terms)
    result.update(computed=True, not_extended=others, box_side=list(grid.side),
                  note=("inside the box only; with a mass term the tail decays exponentially" if massive else
                        "inside the box only: the massless integrand of U falls like r^-4, so the box error "
                        "falls like 1/L; compare two boxes before quoting U or V"))
    return result
