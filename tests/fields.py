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
