"""Initial data from rational maps of the 3-sphere.

A point x of R^3 is sent to (Z1, Z0) on the unit 3-sphere by the degree-one map
(Sutcliffe, Proc. R. Soc. A 463 (2007) 3001, arXiv:0705.1468)

    Z1 = (x1 + i x2) sin f(r) / r,   Z0 = cos f(r) + i (x3 / r) sin f(r),

with a profile f decreasing from pi at r = 0 to 0.  A rational map W(Z1, Z0) then gives the
field through stereographic projection,

    n1 + i n2 = 2 W / (1 + |W|^2),   n3 = (1 - |W|^2) / (1 + |W|^2),

so W = 0 is the vacuum e3 and W = infinity (n = -e3) is the position curve.  The axial maps
W = Z1^a / Z0^b have Hopf charge a b (same source); a = b = 1 is the Hopf map.

Profile: f(r) = pi (1 - r/R)^2 for r < R and 0 beyond, so the field reaches the vacuum
inside the box (a profile with a slow tail, such as pi / (1 + r^2), leaves a jump at a
periodic wrap and spurious energy that grows as h shrinks).  ``size`` is the radius where
f = pi/2, the radius of the Hopf map's position curve: R = size / (1 - 1/sqrt 2).
"""

from __future__ import annotations

import numpy as np

from solitons.grid import Grid

SUPPORT_PER_SIZE = 1.0 / (1.0 - 1.0 / np.sqrt(2.0))


def profile(r: np.ndarray, size: float) -> np.ndarray:
    """f(r) = pi (1 - r / R)^2 inside R = size / (1 - 1/sqrt 2), zero outside."""
    support = size * SUPPORT_PER_SIZE
    return np.where(r < support, np.pi * (1.0 - np.minimum(r, support) / support) ** 2, 0.0)


def sphere_coordinates(grid: Grid, size: float, centre=(0.0, 0.0, 0.0)):
    """(Z1, Z0) of every site, complex arrays of shape (Nx, Ny, Nz), |Z1|^2 + |Z0|^2 = 1."""
    x, y, z = (c - c0 for c, c0 in zip(grid.mesh(), centre))
    r = np.sqrt(x**2 + y**2 + z**2)
    f = profile(r, size)
    # sin f / r is finite at r = 0 (f(0) = pi, f'(0) = -2 pi / R)
    safe_r = np.where(r > 0, r, 1.0)
    sin_over_r = np.where(r > 0, np.sin(f) / safe_r, 2.0 * np.pi / (size * SUPPORT_PER_SIZE))
    z1 = (x + 1j * y) * sin_over_r
    z0 = np.cos(f) + 1j * z * sin_over_r
    return z1, z0


def field_from_fraction(numerator: np.ndarray, denominator: np.ndarray) -> np.ndarray:
    """Unit field of W = numerator / denominator, computed without dividing (finite where
    the denominator vanishes).  Returns (Nx, Ny, Nz, 3)."""
    p2 = np.abs(numerator) ** 2
    q2 = np.abs(denominator) ** 2
    total = p2 + q2
    w = 2.0 * numerator * np.conj(denominator) / total
    return np.stack((w.real, w.imag, (q2 - p2) / total), axis=-1)


def axial_map(grid: Grid, a: int = 1, b: int = 1, size: float = 1.0, centre=(0.0, 0.0, 0.0)):
    """Field of W = Z1^a / Z0^b: Hopf charge a b (Sutcliffe 2007)."""
    z1, z0 = sphere_coordinates(grid, size, centre)
    return field_from_fraction(z1**a, z0**b)


def hopf_map(grid: Grid, size: float = 1.0, centre=(0.0, 0.0, 0.0)):
    """The Hopf map W = Z1 / Z0, Hopf charge 1."""
    return axial_map(grid, 1, 1, size, centre)


def add_noise(field: np.ndarray, grid: Grid, amplitude: float, seed: int) -> np.ndarray:
    """Add seeded Gaussian noise of the given amplitude to every free site, renormalise."""
    if amplitude == 0.0:
        return field
    rng = np.random.default_rng(seed)
    noisy = field + amplitude * rng.standard_normal(field.shape) * grid.free_mask()
    return noisy / np.linalg.norm(noisy, axis=-1, keepdims=True)
