"""Initial data from rational maps of the 3-sphere.

A point x of R^3 is sent to (Z1, Z0) on the unit 3-sphere by the degree-one map
(Sutcliffe, Proc. R. Soc. A 463 (2007) 3001, arXiv:0705.1468)

    Z1 = (x1 + i x2) sin f(r) / r,   Z0 = cos f(r) + i (x3 / r) sin f(r),

with a profile f decreasing from pi at r = 0 to 0.  A rational map W(Z1, Z0) then gives the
field through stereographic projection,

    n1 + i n2 = 2 W / (1 + |W|^2),   n3 = (1 - |W|^2) / (1 + |W|^2),

so W = 0 is the vacuum e3 and W = infinity (n = -e3) is the position curve.  The axial maps
W = Z1^a / Z0^b have Hopf charge a b (same source); a = b = 1 is the Hopf map.

Families (each states its charge; the driver checks the relaxed field against it):

- ``axial``: W = Z1^a / Z0^b, Q = a b.
- ``torus_knot``: W = Z1^alpha Z0^beta / (Z1^a + Z0^b), Q = alpha b + beta a (Sutcliffe
  2007); the position curve Z1^a = -Z0^b is the (a, b) torus knot (a trefoil for (3, 2)),
  or gcd(a, b) linked torus knots.
- ``rational``: W = Z1^alpha Z0^beta / prod_k (Z1^a_k + c_k Z0^b_k), several torus curves
  at once (distinct c_k): linked position curves.  Q = sum_k (alpha b_k + beta a_k).
  Derived: Q is the linking number of the preimages of infinity and of 0; the preimage of
  a value near 0 lies near alpha copies of the circle Z1 = 0 and beta of Z0 = 0, and the
  curve Z1^a = -c Z0^b winds b times in arg Z1 (links Z1 = 0 b times) and a times in
  arg Z0.  The torus-knot family is the case of one factor with c = 1.
- ``several``: a list of parts, each any of the above with its own size, centre and
  orientation, combined as W = sum_k W_k (written as one fraction).  With the compact
  profile each W_k vanishes outside its own ball, so parts placed apart are exactly the
  separate solitons and Q is the sum of their charges.

Every family takes a size, a centre and an orientation (z-y-z Euler angles in degrees,
the rotation applied to the soliton), and seeded noise is added by `add_noise`.

Profile: f(r) = pi (1 - r/R)^2 for r < R and 0 beyond, so the field reaches the vacuum
inside the box (a profile with a slow tail, such as pi / (1 + r^2), leaves a jump at a
periodic wrap and spurious energy that grows as h shrinks).  ``size`` is the radius where
f = pi/2, the radius of the Hopf map's position curve: R = size / (1 - 1/sqrt 2).
"""

from __future__ import annotations

import numpy as np

from solitons.lattice.grid import Grid

SUPPORT_PER_SIZE = 1.0 / (1.0 - 1.0 / np.sqrt(2.0))


def profile(r: np.ndarray, size: float) -> np.ndarray:
    """f(r) = pi (1 - r / R)^2 inside R = size / (1 - 1/sqrt 2), zero outside."""
    support = size * SUPPORT_PER_SIZE
    return np.where(r < support, np.pi * (1.0 - np.minimum(r, support) / support) ** 2, 0.0)


def euler_rotation(angles_degrees) -> np.ndarray:
    """Rotation matrix of z-y-z Euler angles (phi, theta, psi) in degrees:
    R = Rz(phi) Ry(theta) Rz(psi)."""
    phi, theta, psi = np.radians(np.asarray(angles_degrees, float))

    def rz(a):
        return np.array([[np.cos(a), -np.sin(a), 0.0], [np.sin(a), np.cos(a), 0.0], [0.0, 0.0, 1.0]])

    ry = np.array([[np.cos(theta), 0.0, np.sin(theta)], [0.0, 1.0, 0.0], [-np.sin(theta), 0.0, np.cos(theta)]])
    return rz(phi) @ ry @ rz(psi)


def sphere_coordinates(grid: Grid, size: float, centre=(0.0, 0.0, 0.0), orientation=(0.0, 0.0, 0.0)):
    """(Z1, Z0) of every site, complex arrays of shape (Nx, Ny, Nz), |Z1|^2 + |Z0|^2 = 1,
    for the soliton centred at ``centre`` and rotated by ``orientation`` (Euler angles):
    the map is evaluated at R^T (x - centre)."""
    shifted = np.stack([c - c0 for c, c0 in zip(grid.mesh(), centre)], -1)
    if any(orientation):
        shifted = shifted @ euler_rotation(orientation)  # rows: R^T (x - centre)
    x, y, z = shifted[..., 0], shifted[..., 1], shifted[..., 2]
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


def axial_map(grid: Grid, a: int = 1, b: int = 1, size: float = 1.0, centre=(0.0, 0.0, 0.0),
              orientation=(0.0, 0.0, 0.0)):
    """Field of W = Z1^a / Z0^b: Hopf charge a b (Sutcliffe 2007)."""
    z1, z0 = sphere_coordinates(grid, size, centre, orientation)
    return field_from_fraction(z1**a, z0**b)


def torus_knot_map(grid: Grid, alpha: int, beta: int, a: int, b: int, size: float = 1.0,
                   centre=(0.0, 0.0, 0.0), orientation=(0.0, 0.0, 0.0)):
    """Field of W = Z1^alpha Z0^beta / (Z1^a + Z0^b): Q = alpha b + beta a (Sutcliffe 2007)."""
    return rational_map(grid, alpha, beta, [(a, b, 1.0)], size, centre, orientation)


def rational_map(grid: Grid, alpha: int, beta: int, factors, size: float = 1.0,
                 centre=(0.0, 0.0, 0.0), orientation=(0.0, 0.0, 0.0)):
    """Field of W = Z1^alpha Z0^beta / prod_k (Z1^a_k + c_k Z0^b_k); ``factors`` holds
    (a_k, b_k, c_k) with c_k complex.  Q = sum_k (alpha b_k + beta a_k) (module docstring)."""
    numerator, denominator = _fraction(grid, {"family": "rational", "alpha": alpha, "beta": beta,
                                              "factors": factors, "size": size, "centre": centre,
                                              "orientation": orientation})
    return field_from_fraction(numerator, denominator)


FAMILIES = ("axial", "torus_knot", "rational", "several", "result", "formula", "array")
FILE_FAMILIES = ("result", "formula", "array")  # start fields read from a file (solitons.io.fields)
# "result": the relaxed field of a result file (an axial one rotated out onto the grid, see
# solitons.axial.model.to_3d), read by the driver; ``charge`` is the file's rounded Hopf charge.


def _factors(part: dict):
    if part["family"] == "torus_knot":
        return [(part["a"], part["b"], 1.0)]
    return [(int(f[0]), int(f[1]), complex(f[2]) if len(f) > 2 else 1.0) for f in part["factors"]]


def expected_charge(part: dict) -> int:
    """Hopf charge the family's formula gives (module docstring and Sutcliffe 2007)."""
    family = part["family"]
    if family == "axial":
        return part["a"] * part["b"]
    if family in FILE_FAMILIES:
        return part["charge"]
    if family == "several":
        return sum(expected_charge(p) for p in part["parts"])
    return sum(part["alpha"] * b + part["beta"] * a for a, b, _ in _factors(part))


def describe(part: dict) -> str:
    """Short name of the initial data, e.g. axial(2,1), knot(1,1;3,2), rational(1,1;[1,1],[1,2])."""
    family = part["family"]
    if family == "axial":
        return f"axial({part['a']},{part['b']})"
    if family == "result":
        from pathlib import Path

        return f"result({Path(part['file']).parent.name or part['file']})"
    if family == "formula":
        from pathlib import Path

        return f"formula({Path(part['file']).name}:{part['function']})"
    if family == "array":
        from pathlib import Path

        return f"array({Path(part['file']).name}{':' + part['dataset'] if part['dataset'] else ''})"
    if family == "several":
        return " + ".join(describe(p) for p in part["parts"])
    if family == "torus_knot":
        return f"knot({part['alpha']},{part['beta']};{part['a']},{part['b']})"
    factors = ",".join(f"[{a},{b}]" if c == 1 else f"[{a},{b},{c:g}]" for a, b, c in _factors(part))
    return f"rational({part['alpha']},{part['beta']};{factors})"


def _fraction(grid: Grid, part: dict):
    """(numerator, denominator) of W for one family description (a dict as in [initial])."""
    if part["family"] == "several":
        pieces = [_fraction(grid, p) for p in part["parts"]]
        denominator = np.prod([d for _, d in pieces], axis=0)
        numerator = np.zeros_like(denominator)
        for k, (n_k, _) in enumerate(pieces):
            others = [d for j, (_, d) in enumerate(pieces) if j != k]
            numerator = numerator + (n_k * np.prod(others, axis=0) if others else n_k)
        return numerator, denominator
    z1, z0 = sphere_coordinates(grid, part["size"], part.get("centre", (0.0, 0.0, 0.0)),
                                part.get("orientation", (0.0, 0.0, 0.0)))
    if part["family"] == "axial":
        return z1 ** part["a"], z0 ** part["b"]
    denominator = np.ones_like(z1)
    for a, b, c in _factors(part):
        denominator = denominator * (z1**a + c * z0**b)
    return z1 ** part["alpha"] * z0 ** part["beta"], denominator


def initial_field(grid: Grid, part: dict) -> np.ndarray:
    """Unit field (Nx, Ny, Nz, 3) of a family description: a dict with ``family`` and the
    family's keys (a, b; alpha, beta; factors; parts) and size, centre, orientation."""
    return field_from_fraction(*_fraction(grid, part))


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


def interpolate_field(field: np.ndarray, source: Grid, target: Grid) -> np.ndarray:
    """Cubic-spline interpolation of a unit field from one grid of a box to another of the
    same box (coarse-to-fine continuation), renormalised; the border of a fixed target keeps
    the vacuum."""
    from scipy.ndimage import map_coordinates

    if source.stretch != target.stretch:
        raise ValueError(f"interpolation between grids of different stretch ({source.stretch} -> {target.stretch})"
                         " is not supported")
    # in the computational coordinate xi (the physical one on uniform grids)
    axes = [(np.arange(n) * h + o - so) / sh for n, h, o, so, sh
            in zip(target.shape, target.spacing, target.origin, source.origin, source.spacing)]
    coords = np.meshgrid(*axes, indexing="ij")
    mode = "grid-wrap" if source.boundary == "periodic" else "nearest"
    values = np.stack([map_coordinates(field[..., c], coords, order=3, mode=mode) for c in range(3)], -1)
    values /= np.linalg.norm(values, axis=-1, keepdims=True)
    if target.boundary == "fixed":
        mask = target.free_mask()
        values = values * mask + np.array([0.0, 0.0, 1.0]) * (1.0 - mask)
    return values
