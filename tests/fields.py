"""Analytic test fields shared by the tests (not part of the package)."""

import numpy as np
from scipy.spatial.transform import Rotation


def twisted_field(grid, amplitude=1.2, wave=None):
    """A smooth periodic unit field n = (sin t cos p, sin t sin p, cos t) with
    t = amplitude * sin(k x) and p = k (y + z), k = 2 pi / L.  Returns (field, k)."""
    x, y, z = grid.mesh()
    k = 2 * np.pi / grid.side[0] if wave is None else wave
    theta = amplitude * np.sin(k * x)
    phi = k * (y + z)
    field = np.stack((np.sin(theta) * np.cos(phi), np.sin(theta) * np.sin(phi), np.cos(theta)), -1)
    return field, k


def random_rotation(rng):
    """A uniformly random proper rotation matrix (scipy's reference implementation)."""
    return Rotation.random(random_state=rng).as_matrix()


def smooth_hopf_map(grid, size=1.0):
    """The Hopf map W = Z1 / Z0 with the smooth profile f(r) = pi (1 - tanh(r / size)).

    (Z1, Z0) = ((x1 + i x2) sin f / r, cos f + i (x3 / r) sin f) (Sutcliffe 2007,
    arXiv:0705.1468, from memory), n1 + i n2 = 2 W / (1 + |W|^2), n3 = (1 - |W|^2) /
    (1 + |W|^2).  f - pi is odd in r, so sin f / r and cos f are smooth at r = 0 (derived):
    unlike a compact profile there is no kink to limit a high-order stencil's accuracy."""
    x, y, z = grid.mesh()
    r = np.sqrt(x**2 + y**2 + z**2)
    f = np.pi * (1.0 - np.tanh(r / size))
    sinc = np.where(r > 0, np.sin(f) / np.where(r > 0, r, 1.0), np.pi / size)
    z1 = (x + 1j * y) * sinc
    z0 = np.cos(f) + 1j * z * sinc
    w = z1 / z0
    w2 = np.abs(w) ** 2
    field = np.stack((2 * w.real / (1 + w2), 2 * w.imag / (1 + w2), (1 - w2) / (1 + w2)), -1)
    return np.where(np.isfinite(field), field, np.array([0.0, 0.0, -1.0]))
