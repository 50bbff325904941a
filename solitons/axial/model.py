"""Axially symmetric fields: the energy on the half plane (rho >= 0, z).

Ansatz: n(rho, phi, z) = R(k phi) m(rho, z), with R(a) the rotation of the target about e3
by the angle a and k the winding (``winding``): the symmetry of the axial rational maps
W = Z1^a / Z0^b, for which k = a (Sutcliffe, Proc. R. Soc. A 463 (2007) 3001,
arXiv:0705.1468; docs/references.md).  The field m lives in the plane phi = 0, where the
Cartesian derivatives are d_x n = d_rho m, d_y n = (k / rho) e3 x m (exact), d_z n = d_z m.
Every density that is invariant under a rotation of space about the z axis together with
a rotation of the target about e3 (by any angles) takes the same value on the whole circle
of a site, so

    E = NORMALISATION * sum_terms coupling * Int 2 pi rho e(n, d n, lap n) d rho dz.

`check_invariance` tests that property for a model and refuses terms without it (for them
the axial ansatz is not a consistent reduction: a stationary point of the reduced energy
need not be one in 3D).  The Laplacian is d_rho^2 m + d_rho m / rho + d_z^2 m - (k / rho)^2
(m1, m2, 0).

Lattice (the 3D schemes' stencils, `solitons.lattice.grid.STENCILS`, in two dimensions): sites at
rho_i = X((i + 1/2) h_rho), z_j = Z((j - (N_z - 1)/2) h_z) with X, Z the stretched map
s sinh(xi / s) (or xi) of `solitons.lattice.grid`.  Derivatives along rho and z are the scheme's
forward and backward differences, the density averaged over the four quadrants, so every
weight is positive and sites are neighbour coupled as in 3D.  The axis is treated exactly:
the point (-rho, 0, z) is (rho, phi = pi, z), so the sites beyond the axis hold
R(k pi) m(rho, z) (regularity by symmetry; no boundary condition is imposed on the axis).
The far border (the last rho column, the first and last z rows) is held at the vacuum e3,
and virtual sites beyond it are vacuum.

Hopf charge: Q = k deg(m), deg the degree of m on the half plane, whose boundary (axis and
infinity) goes to the vacuum for a finite-energy field of winding k != 0 (derived: the
preimage of a regular value is k times the circle through each preimage point of m in the
half plane, and the linking number of two such families of circles is k times the
intersection count, that is k deg).  The degree is the sum of the signed solid angles of
the images of the lattice triangles over 4 pi (exact up to the strip next to the axis
and beyond the border, where m is the vacuum).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from dataclasses import field as dc_field
from functools import partial

import jax
import jax.numpy as jnp
import numpy as np

from solitons.lattice.grid import PAD_WIDTH, STENCILS, VACUUM, Grid, stretch_jacobian, stretch_map, stretch_slope
from solitons.model.energy import NORMALISATION, SCHEMES, project_tangent
from solitons.model.terms import Term

FORCE_RADIUS = 1.0  # model lengths: see AxialGrid.site_weights


@dataclass(frozen=True)
class AxialGrid:
    """The half plane: ``shape`` = (N_rho, N_z) sites, ``spacing`` = (h_rho, h_z) of the
    computational coordinates, ``stretch`` = (s_rho, s_z) (0: uniform axis), ``winding``
    k.  Hashable (static data of jitted functions)."""

    shape: tuple[int, int]
    spacing: tuple[float, float]
    winding: int = 1
    stretch: tuple[float, float] = (0.0, 0.0)
    boundary: str = dc_field(default="fixed", init=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "shape", tuple(int(n) for n in self.shape))
        object.__setattr__(self, "spacing", tuple(float(h) for h in self.spacing))
        object.__setattr__(self, "stretch", tuple(float(s) for s in self.stretch))
        if len(self.shape) != 2 or len(self.spacing) != 2 or len(self.stretch) != 2:
            raise ValueError("an axial grid needs two entries (rho, z) for shape, spacing and stretch")
        if min(self.shape) < 2 * PAD_WIDTH + 3:
            raise ValueError(f"axial grid {self.shape} is smaller than the stencils need ({2 * PAD_WIDTH + 3} per axis)")
        if any(not np.isfinite(h) or h <= 0 for h in self.spacing):
            raise ValueError(f"spacing must be positive, got {self.spacing}")
        if any(not np.isfinite(s) or s < 0 for s in self.stretch):
            raise ValueError(f"stretch must be lengths >= 0, got {self.stretch}")
        if int(self.winding) != self.winding or self.winding == 0:
            raise ValueError(f"winding must be a non-zero integer, got {self.winding}")
        object.__setattr__(self, "winding", int(self.winding))

    @classmethod
    def covering(cls, rho_max: float, z_half: float, spacing: float, winding: int = 1,
                 stretch: tuple[float, float] = (0.0, 0.0)) -> AxialGrid:
        """The uniform-spacing grid reaching rho_max and |z| <= z_half (computational
        coordinates; the physical reach is X(rho_max) on a stretched axis)."""
        n_rho = int(round(rho_max / spacing + 0.5))
        n_z = 2 * int(round(z_half / spacing)) + 1
        return cls((n_rho, n_z), (spacing, spacing), winding, stretch)

    # ---- coordinates ----
    def xi_axes(self) -> tuple[np.ndarray, np.ndarray]:
        n_rho, n_z = self.shape
        h_rho, h_z = self.spacing
        return (np.arange(n_rho) + 0.5) * h_rho, (np.arange(n_z) - 0.5 * (n_z - 1)) * h_z

    def to_physical(self, xi, axis: int):
        return stretch_map(xi, self.stretch[axis])

    def jacobian(self, xi, axis: int):
        return stretch_jacobian(xi, self.stretch[axis])

    def jacobian_slope(self, xi, axis: int):
        return stretch_slope(xi, self.stretch[axis])

    def axes(self) -> tuple[np.ndarray, np.ndarray]:
        """Physical rho and z of the sites."""
        return tuple(self.to_physical(xi, a) for a, xi in enumerate(self.xi_axes()))

    @property
    def stretched(self) -> bool:
        """Always True: the sites carry unequal volumes (2 pi rho), which the minimisers
        treat as they treat a stretched 3D grid (force per unit volume, diagonal scaling)."""
        return True

    @property
    def npoints(self) -> int:
        return math.prod(self.shape)

    @property
    def cell_volume(self) -> float:
        """2 pi h_rho^2 h_z: the volume of a ring of radius h_rho and cross-section
        h_rho h_z (the reference of `site_weights`)."""
        return 2.0 * np.pi * self.spacing[0] ** 2 * self.spacing[1]

    def site_weights(self) -> np.ndarray:
        """The weights the minimisers measure the force with (force = gradient / (N
        cell_volume site_weights), an Euler-Lagrange residual per unit volume):
        (max(rho, FORCE_RADIUS) / h_rho) X' Z'.  Rings thinner than FORCE_RADIUS count as
        that radius: their sites hold so little volume that their residual lies below the
        energy's rounding (measured, Q = 1 with mass, h = 0.0625: gradient 5e-11 at the
        axis column, residual 1.2e-4 per unit volume, while the next change of E it could
        buy is 1e-17; every other site was below 1e-6).  The energy uses `ring_weights`."""
        xi_rho, xi_z = self.xi_axes()
        radius = np.maximum(self.to_physical(xi_rho, 0), FORCE_RADIUS) / self.spacing[0]
        return (radius * self.jacobian(xi_rho, 0))[:, None] * self.jacobian(xi_z, 1)[None, :]

    def site_volumes(self) -> np.ndarray:
        """The volume of the ring each site stands for: 2 pi rho drho dz (with the axis
        correction of `ring_weights`)."""
        return self.cell_volume * ring_weights(self)

    def free_mask(self) -> np.ndarray:
        """(N_rho, N_z, 1): 0 on the held far border (last rho column, first and last z
        rows), 1 elsewhere (the axis side is free)."""
        mask = np.ones(self.shape)
        mask[-1, :] = 0.0
        mask[:, 0] = mask[:, -1] = 0.0
        return mask[..., None]

    @property
    def side(self) -> tuple[float, float]:
        """(largest rho, z extent) of the sites."""
        rho, z = self.axes()
        return float(rho[-1]), float(z[-1] - z[0])

    def plane_grid(self) -> Grid:
        """The 3D grid of one site row per (rho, z) in the plane y = 0 (shape (N_rho, 1,
        N_z)), for evaluating 3D initial data on the half plane."""
        h_rho, h_z = self.spacing
        return Grid((self.shape[0], 1, self.shape[1]), (h_rho, 1.0, h_z),
                    (0.5 * h_rho, 0.0, -0.5 * (self.shape[1] - 1) * h_z), "fixed",
                    (self.stretch[0], 0.0, self.stretch[1]))


# ---- the lattice energy (pure, jit-friendly) ----

def _rotation_pi(k: int):
    sign = 1.0 if k % 2 == 0 else -1.0
    return jnp.asarray([sign, sign, 1.0])


def pad_axial(m, winding: int, width: int = PAD_WIDTH):
    """(N_rho + 2w, N_z + 2w, 3): mirror sites R(k pi) m beyond the axis, vacuum beyond
    the far border."""
    n_rho, n_z = m.shape[:2]
    vacuum = jnp.asarray(VACUUM, dtype=m.dtype)
    mirror = m[:width][::-1] * _rotation_pi(winding).astype(m.dtype).reshape(1, 1, 3)
    outer = jnp.broadcast_to(vacuum, (width, n_z, 3))
    column = jnp.concatenate([mirror, m, outer], axis=0)
    rows = jnp.broadcast_to(vacuum, (n_rho + 2 * width, width, 3))
    return jnp.concatenate([rows, column, rows], axis=1)


def _view(padded, shape, axis: int, offset: int, width: int = PAD_WIDTH):
    index = [slice(width, width + n) for n in shape]
    index[axis] = slice(width + offset, width + offset + shape[axis])
    return padded[tuple(index)]


@dataclass(frozen=True)
class _Metric:
    """Static per-site numbers of a grid and scheme, as numpy arrays."""

    rho_unit: np.ndarray        # rho / h_rho per rho site
    forward: tuple              # per axis: 1 / X'(xi + at h), per site along that axis
    backward: tuple
    jacobian: tuple             # X'(xi) per axis
    slope: tuple                # X''(xi) / X'(xi) per axis


def _metric(grid: AxialGrid, scheme: str) -> _Metric:
    stencil = STENCILS[scheme]
    xi = grid.xi_axes()
    forward = tuple(1.0 / grid.jacobian(xi[a] + stencil.at * grid.spacing[a], a) for a in range(2))
    backward = tuple(1.0 / grid.jacobian(xi[a] - stencil.at * grid.spacing[a], a) for a in range(2))
    jac = tuple(grid.jacobian(xi[a], a) for a in range(2))
    slope = tuple(grid.jacobian_slope(xi[a], a) / jac[a] for a in range(2))
    return _Metric(grid.to_physical(xi[0], 0) / grid.spacing[0], forward, backward, jac, slope)


def _along(values: np.ndarray, axis: int, dtype):
    shape = [1, 1, 1]
    shape[axis] = len(values)
    return jnp.asarray(values.reshape(shape), dtype=dtype)


def local_fields(m, spacing, grid: AxialGrid, scheme: str, laplacian: bool):
    """(rho, forward, backward, angular, lap): rho (N_rho, 1, 1); forward/backward
    differences along rho and z, each (N_rho, N_z, 3); the exact angular derivative
    d_y n = (k / rho) e3 x m; the Laplacian or None.  ``spacing`` may be traced."""
    stencil = STENCILS[scheme]
    metric = _metric(grid, scheme)
    dtype = m.dtype
    padded = pad_axial(m, grid.winding)
    shape = grid.shape
    taps = [(o, c) for o, c in stencil.nonzero_taps if o != 0]
    forward, backward = [], []
    for axis in range(2):
        f = sum(c * (_view(padded, shape, axis, o) - m) for o, c in taps) / spacing[axis]
        b = -sum(c * (_view(padded, shape, axis, -o) - m) for o, c in taps) / spacing[axis]
        forward.append(f * _along(metric.forward[axis], axis, dtype))
        backward.append(b * _along(metric.backward[axis], axis, dtype))
    rho = spacing[0] * _along(metric.rho_unit, 0, dtype)
    k = grid.winding
    angular = (k / rho) * jnp.stack([-m[..., 1], m[..., 0], jnp.zeros_like(m[..., 2])], axis=-1)
    lap = None
    if laplacian:
        def central(coefficients, axis):
            return sum(c * _view(padded, shape, axis, o) for o, c in zip(range(-3, 4), coefficients) if c != 0.0)

        lap = 0.0
        first_rho = None
        for axis in range(2):
            first = central(stencil.central, axis) / spacing[axis]
            second = central(stencil.laplacian, axis) / spacing[axis] ** 2
            # X''/X' is an inverse length: it scales with 1/h when every length does
            slope = _along(metric.slope[axis] * grid.spacing[axis], axis, dtype) / spacing[axis]
            second = (second - first * slope) * _along(1.0 / metric.jacobian[axis] ** 2, axis, dtype)
            lap = lap + second
            if axis == 0:
                first_rho = first * _along(1.0 / metric.jacobian[0], 0, dtype)
        lap = lap + first_rho / rho - (k / rho) ** 2 * jnp.stack(
            [m[..., 0], m[..., 1], jnp.zeros_like(m[..., 2])], axis=-1)
    return rho, tuple(forward), tuple(backward), angular, lap


def term_densities(m, spacing, grid: AxialGrid, terms: tuple[Term, ...], scheme: str):
    """Per-term normalised densities (energy per unit volume), each (N_rho, N_z)."""
    needs_lap = any(t.kind.needs_laplacian for t in terms)
    _, forward, backward, angular, lap = local_fields(m, spacing, grid, scheme, needs_lap)
    out = []
    for term in terms:
        parameters = term.parameter_values()
        total = 0.0
        for d_rho in (forward[0], backward[0]):
            for d_z in (forward[1], backward[1]):
                d = jnp.stack((d_rho, angular, d_z), axis=-2)
                total = total + term.kind.density(m, d, lap, **parameters)
        out.append(NORMALISATION * term.coupling * total / 4.0)
    return tuple(out)


# The axis correction of the rho quadrature (in units of h_rho^2) on the first three
# columns.  Sum over the sites at xi = (i + 1/2) h of h f(xi) is the midpoint rule for
# Int_0 f dxi, and f = X X' e is odd in xi (e is even: a smooth function of rho^2), so its
# error is not small: Int_0 f = h sum f(xi_i) - (h^2 / 24) f1 + (7 h^4 / 5760) f3 + O(h^6)
# (Euler-Maclaurin for the midpoint rule; f1, f3 the first and third derivatives of f at
# the axis).  With e = a + b xi^2 + c xi^4 near the axis and X = s sinh(xi / s): f1 = a,
# f3 = 6 b + 4 a / s^2.  a and b come from the first three columns (Lagrange in
# u = xi^2 at u = 1, 9, 25 times h^2 / 4), so the quadrature is sixth order like the
# stencils (derived).  The corrected weights stay positive (0.446, 1.514, 2.498 against
# 0.5, 1.5, 2.5 h^2 on a uniform axis; derived), so the energy of a non-negative density
# is still non-negative.
_LAGRANGE_AT_AXIS = np.array([225.0 / 192.0, -25.0 / 128.0, 9.0 / 384.0])      # L_i(0)
_LAGRANGE_SLOPE = np.array([-34.0 / 192.0, 26.0 / 128.0, -10.0 / 384.0])      # dL_i/du at 0


def axis_correction(h: float, stretch: float) -> np.ndarray:
    """Weights added to the first three columns (units h^2): -a / 24 + (7 / 5760) h^2 f3
    with a and b from the columns (see above)."""
    curvature = 7.0 * h**2 / (1440.0 * stretch**2) if stretch else 0.0
    return -_LAGRANGE_AT_AXIS / 24.0 + 7.0 / 240.0 * _LAGRANGE_SLOPE + curvature * _LAGRANGE_AT_AXIS


def ring_weights(grid: AxialGrid) -> np.ndarray:
    """Per-site weights (N_rho, N_z) of Int 2 pi rho (...) d rho dz in units of
    2 pi h_rho^2 h_z: (rho / h_rho) X' Z' with the axis correction on the first three
    columns (`axis_correction`)."""
    xi_rho, xi_z = grid.xi_axes()
    column = grid.to_physical(xi_rho, 0) / grid.spacing[0] * grid.jacobian(xi_rho, 0)
    column = column.copy()
    column[:3] += axis_correction(grid.spacing[0], grid.stretch[0])
    return column[:, None] * grid.jacobian(xi_z, 1)[None, :]


def _volumes(spacing, grid: AxialGrid, dtype):
    return 2.0 * np.pi * spacing[0] ** 2 * spacing[1] * jnp.asarray(ring_weights(grid), dtype=dtype)


def term_energies(m, spacing, grid: AxialGrid, terms, scheme: str):
    volumes = _volumes(spacing, grid, m.dtype)
    return tuple(jnp.sum(d * volumes) for d in term_densities(m, spacing, grid, terms, scheme))


@dataclass(frozen=True)
class AxialModel:
    """A sum of terms on an `AxialGrid` with a lattice scheme: the interface of
    `solitons.model.energy.Model` that the minimisers use (evaluate, value_and_grad,
    force_scale, site_scale, grid), plus per-term energies, the density and the virial.
    Evaluation is jax autodiff of the lattice energy (2D grids are small)."""

    terms: tuple[Term, ...]
    grid: AxialGrid
    scheme: str = "sixth"

    def __post_init__(self) -> None:
        if self.scheme not in SCHEMES:
            raise ValueError(f"unknown scheme {self.scheme!r}; choose from {sorted(SCHEMES)}")

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(t.name for t in self.terms)

    def spacing_array(self, dtype=jnp.float64):
        return jnp.asarray(self.grid.spacing, dtype=dtype)

    def energy(self, m):
        return _total_jit(self, jnp.asarray(m), self.spacing_array())

    def energies(self, m) -> dict[str, float]:
        energies, _, _, _ = _measure_jit(self, jnp.asarray(m), self.spacing_array())
        return {t.name: float(e) for t, e in zip(self.terms, energies)}

    def energy_density(self, m) -> np.ndarray:
        _, density, _, _ = _measure_jit(self, jnp.asarray(m), self.spacing_array())
        return np.asarray(density)

    def virial(self, m) -> dict:
        """Derrick balance h_a dE/dh_a / E for a = rho (the x and y parts of 3D together)
        and z; ``total`` their sum (0 at a stationary point in infinite space)."""
        return self.density_and_virial(m)[1]

    def density_and_virial(self, m) -> tuple[np.ndarray, dict]:
        _, density, value, dspacing = _measure_jit(self, jnp.asarray(m), self.spacing_array())
        parts = np.asarray(dspacing) * np.asarray(self.grid.spacing) / float(value)
        return np.asarray(density), {"total": float(parts.sum()), "per_axis": parts.tolist(),
                                     "rho": float(parts[0]), "z": float(parts[1])}

    def value_and_grad(self, m):
        value, grad = _value_and_grad_jit(self, jnp.asarray(m), self.spacing_array())
        return value, grad

    def evaluate(self, m, out: np.ndarray | None = None) -> tuple[float, np.ndarray]:
        value, grad = self.value_and_grad(m)
        grad = np.asarray(grad)
        if out is not None:
            out[...] = grad
            return float(value), out
        return float(value), grad

    def force_scale(self) -> float:
        return NORMALISATION * self.grid.cell_volume

    def preconditioner(self, shift: float) -> AxialPreconditioner:
        """The L-BFGS preconditioner of this grid (asked for by solitons.relaxation.minimise)."""
        return AxialPreconditioner(self.grid, shift)

    def site_scale(self):
        """Per site: gradient / site_scale is the force of the stopping rule (see
        `AxialGrid.site_weights`)."""
        return NORMALISATION * self.grid.cell_volume * self.grid.site_weights()[..., None]


@partial(jax.jit, static_argnums=0)
def _total_jit(model: AxialModel, m, spacing):
    return sum(term_energies(m, spacing, model.grid, model.terms, model.scheme))


@partial(jax.jit, static_argnums=0)
def _value_and_grad_jit(model: AxialModel, m, spacing):
    value, grad = jax.value_and_grad(
        lambda f: sum(term_energies(f, spacing, model.grid, model.terms, model.scheme)))(m)
    mask = jnp.asarray(model.grid.free_mask(), dtype=m.dtype)
    return value, project_tangent(m, grad) * mask


@partial(jax.jit, static_argnums=0)
def _measure_jit(model: AxialModel, m, spacing):
    def total(spacing):
        energies = term_energies(m, spacing, model.grid, model.terms, model.scheme)
        return sum(energies), energies

    (value, energies), dspacing = jax.value_and_grad(total, has_aux=True)(spacing)
    density = sum(term_densities(m, spacing, model.grid, model.terms, model.scheme))
    return energies, density, value, dspacing


# ---- consistency of the ansatz, charge, initial data, 3D embedding ----

class AxialTermError(ValueError):
    """A term whose density is not invariant under the axial symmetry."""


def _rotation_z(angle: float) -> np.ndarray:
    c, s = np.cos(angle), np.sin(angle)
    return np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])


def check_invariance(terms: tuple[Term, ...], winding: int, samples: int = 8, seed: int = 0) -> None:
    """Raise AxialTermError for a term whose density changes when space is rotated about z
    by an angle a and the target about e3 by k a (random unit fields, derivatives tangent
    to them and Laplacians; relative tolerance 1e-9)."""
    rng = np.random.default_rng(seed)
    n = rng.standard_normal((samples, 3))
    n /= np.linalg.norm(n, axis=-1, keepdims=True)
    d = rng.standard_normal((samples, 3, 3))
    d -= np.einsum("sia,sa->si", d, n)[..., None] * n[:, None, :]  # d_i n . n = 0
    lap = rng.standard_normal((samples, 3))
    for angle in (0.7, 2.1):
        space, target = _rotation_z(angle), _rotation_z(winding * angle)
        # n'(x) = T n(S^-1 x): d'_i n' = S_ij T d_j n (rows: spatial index)
        n_r = n @ target.T
        d_r = np.einsum("ij,sjb,ab->sia", space, d, target)
        lap_r = lap @ target.T
        for term in terms:
            parameters = term.parameter_values()
            before = np.asarray(term.kind.density(jnp.asarray(n), jnp.asarray(d), jnp.asarray(lap), **parameters))
            after = np.asarray(term.kind.density(jnp.asarray(n_r), jnp.asarray(d_r), jnp.asarray(lap_r),
                                                 **parameters))
            scale = np.maximum(np.abs(before), 1e-300)
            if not np.all(np.abs(after - before) <= 1e-9 * np.maximum(scale, np.abs(before).max())):
                raise AxialTermError(
                    f"term {term.name!r} ({term.kind.name}) is not invariant under a rotation of space about z "
                    f"together with a rotation of the target by {winding} times the angle: the axial ansatz with "
                    f"winding {winding} is not a consistent reduction for it (relax in 3D instead)")


def solid_angle(a, b, c):
    """Signed solid angle of the spherical triangle (a, b, c) of unit vectors (..., 3)."""
    triple = np.einsum("...i,...i->...", a, np.cross(b, c))
    denominator = 1.0 + np.einsum("...i,...i->...", a, b) + np.einsum("...i,...i->...", b, c) \
        + np.einsum("...i,...i->...", c, a)
    return 2.0 * np.arctan2(triple, denominator)


def half_plane_degree(m: np.ndarray) -> float:
    """Degree of m (N_rho, N_z, 3) on the half plane: the signed solid angles of the images
    of the two triangles of every lattice cell, over 4 pi, oriented by (rho, z).  A column
    on the axis closes the surface: there a regular field of winding k != 0 is +e3 or -e3,
    taken from the sign of m3 on the first column.  With the held border at the vacuum and
    the axis at e3 the boundary maps to one point, and the sum is an integer up to rounding
    (derived: the triangles then tile a closed surface)."""
    m = np.asarray(m, dtype=float)
    axis = np.zeros_like(m[:1])
    axis[..., 2] = np.where(m[:1, :, 2] >= 0.0, 1.0, -1.0)
    m = np.concatenate([axis, m], axis=0)
    p00, p10, p01, p11 = m[:-1, :-1], m[1:, :-1], m[:-1, 1:], m[1:, 1:]
    total = solid_angle(p00, p10, p11).sum() + solid_angle(p00, p11, p01).sum()
    return float(total / (4.0 * np.pi))


# Orientation: the (rho, z) half plane with (rho, phi, z) right-handed gives Q = +k deg in
# the convention of solitons.measure.topology (the Hopf map W = Z1 / Z0 has Q = +1; checked in
# tests/test_axial.py against the 3D Whitehead integral).
CHARGE_SIGN = 1.0


def hopf_charge(m: np.ndarray, grid: AxialGrid) -> float:
    """Q = k deg(m) (module docstring), in the sign convention of solitons.measure.topology."""
    return CHARGE_SIGN * grid.winding * half_plane_degree(m)


def axial_initial(grid: AxialGrid, b: int = 1, size: float = 1.0, z_centre: float = 0.0) -> np.ndarray:
    """m of W = Z1^k / Z0^b (k = the grid's winding) in the plane phi = 0 (the rational
    map and profile of solitons.relaxation.initial), the far border at the vacuum: Q = k b."""
    from solitons.relaxation.initial import axial_map

    field = axial_map(grid.plane_grid(), grid.winding, b, size, centre=(0.0, 0.0, z_centre))[:, 0, :, :]
    mask = grid.free_mask()
    return field * mask + np.asarray(VACUUM) * (1.0 - mask)


def _plane_coordinates(grid: AxialGrid, target: Grid):
    """(fractional rho index, fractional z index, phi, outside) of every 3D site."""
    x, y, z = target.mesh()
    rho, phi = np.hypot(x, y), np.arctan2(y, x)
    xi_rho = np.arcsinh(rho / grid.stretch[0]) * grid.stretch[0] if grid.stretch[0] else rho
    xi_z = np.arcsinh(z / grid.stretch[1]) * grid.stretch[1] if grid.stretch[1] else z
    i = xi_rho / grid.spacing[0] - 0.5
    j = xi_z / grid.spacing[1] + 0.5 * (grid.shape[1] - 1)
    outside = (i > grid.shape[0] - 1) | (j < 0) | (j > grid.shape[1] - 1)
    return i, j, phi, outside


def density_to_3d(density: np.ndarray, grid: AxialGrid, target: Grid) -> np.ndarray:
    """An axial scalar (N_rho, N_z) at every 3D site (cubic interpolation, mirrored across
    the axis; zero outside the half plane's reach)."""
    from scipy.ndimage import map_coordinates

    i, j, _, outside = _plane_coordinates(grid, target)
    width = 3
    extended = np.concatenate([np.asarray(density)[:width][::-1], np.asarray(density)], axis=0)
    extended = np.pad(extended, ((0, width), (width, width)))
    values = map_coordinates(extended, np.stack([i + width, j + width]), order=3, mode="nearest")
    return np.where(outside, 0.0, values)


def to_3d(m: np.ndarray, grid: AxialGrid, target: Grid) -> np.ndarray:
    """The axial field on a 3D grid: n(x) = R(k phi) m(rho, z), m interpolated (cubic, in
    the computational coordinates) at each site's (rho, z); the vacuum outside the half
    plane's reach.  Renormalised; the target's held border at the vacuum."""
    from scipy.ndimage import map_coordinates

    i, j, phi, outside = _plane_coordinates(grid, target)
    # extend across the axis with the mirror sites so that the spline is smooth there
    width = 3
    extended = np.asarray(pad_axial(jnp.asarray(m), grid.winding, width))
    coords = np.stack([i + width, j + width])
    values = np.stack([map_coordinates(extended[..., c], coords, order=3, mode="nearest") for c in range(3)], -1)
    values[outside] = VACUUM
    angle = grid.winding * phi
    c, s = np.cos(angle), np.sin(angle)
    field = np.stack([c * values[..., 0] - s * values[..., 1], s * values[..., 0] + c * values[..., 1],
                      values[..., 2]], axis=-1)
    field /= np.linalg.norm(field, axis=-1, keepdims=True)
    if target.boundary == "fixed":
        mask = target.free_mask()
        field = field * mask + np.asarray(VACUUM) * (1.0 - mask)
    return field


class AxialPreconditioner:
    """W = K^-1 for L-BFGS on the half plane, K the SPD matrix of the quadratic form
    Int 2 pi rho (|grad u|^2 + (shift + k^2 / rho^2) u^2) d rho dz on the free sites
    (five-point differences in the computational coordinates; zero on the held border;
    no flux through the axis, where the ring weight rho vanishes), applied to each
    component by a sparse LU factorisation (scipy.sparse.linalg.splu, computed once).
    It plays the part of the 3D shifted-Laplacian preconditioner (solitons.lattice.preconditioner),
    with the ring weight in it: that weight, which spans a factor N_rho between the axis
    and the border, is what slows plain L-BFGS here."""

    def __init__(self, grid: AxialGrid, shift: float = 1.0):
        import scipy.sparse as sparse
        from scipy.sparse.linalg import splu

        if not shift >= 0.0:
            raise ValueError(f"the preconditioner shift must be >= 0, got {shift!r}")
        self.grid = grid
        n_rho, n_z = grid.shape
        h_rho, h_z = grid.spacing
        xi_rho, xi_z = grid.xi_axes()
        jac_rho, jac_z = grid.jacobian(xi_rho, 0), grid.jacobian(xi_z, 1)
        rho = grid.to_physical(xi_rho, 0)
        free = grid.free_mask()[..., 0].astype(bool)
        index = -np.ones(grid.shape, dtype=np.int64)
        index[free] = np.arange(int(free.sum()))
        rows, cols, values = [], [], []
        diagonal = np.zeros(int(free.sum()))

        def couple(a, b, weight):
            """Add weight (u_a - u_b)^2 for site index arrays a, b (held sites: u = 0)."""
            ia, ib = index[a], index[b]
            for i, j in ((ia, ib), (ib, ia)):
                keep = i >= 0
                np.add.at(diagonal, i[keep], weight[keep])
                both = keep & (j >= 0)
                rows.append(i[both])
                cols.append(j[both])
                values.append(-weight[both])

        ii, jj = np.meshgrid(np.arange(n_rho), np.arange(n_z), indexing="ij")
        # rho faces between i and i + 1 at xi + h/2
        xi_face = xi_rho[:-1] + 0.5 * h_rho
        rho_face = grid.to_physical(xi_face, 0)
        w_rho = (rho_face / (grid.jacobian(xi_face, 0) * h_rho))[:, None] * (jac_z * h_z)[None, :]
        couple((ii[:-1], jj[:-1]), (ii[1:], jj[1:]), w_rho.ravel().reshape(w_rho.shape))
        # the far rho border couples to the held column (already a site) - nothing beyond
        xi_zface = xi_z[:-1] + 0.5 * h_z
        w_z = (rho * jac_rho * h_rho)[:, None] / (grid.jacobian(xi_zface, 1) * h_z)[None, :]
        couple((ii[:, :-1], jj[:, :-1]), (ii[:, 1:], jj[:, 1:]), w_z)
        mass = ((shift * rho + grid.winding**2 / rho) * jac_rho * h_rho)[:, None] * (jac_z * h_z)[None, :]
        diagonal += mass[free]
        count = len(diagonal)
        rows.append(np.arange(count))
        cols.append(np.arange(count))
        values.append(diagonal)
        matrix = sparse.csc_matrix((2.0 * np.pi * np.concatenate(values),
                                    (np.concatenate(rows), np.concatenate(cols))), shape=(count, count))
        self.lu = splu(matrix)
        self.free = free.ravel()

    def apply(self, vectors: np.ndarray, out: np.ndarray) -> np.ndarray:
        v = vectors.reshape(-1, 3)
        o = out.reshape(-1, 3)
        o[~self.free] = 0.0
        o[self.free] = self.lu.solve(np.ascontiguousarray(v[self.free], dtype=np.float64))
        return out
