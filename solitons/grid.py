"""Lattice geometry and the neighbour-coupled difference stencils.

A `Grid` is immutable and hashable so it can be passed as static data to jitted
functions.  Sites carry the field; the boundary is either

* ``"fixed"``: the outermost layer of sites is held at the vacuum e3 = (0, 0, 1) and every
  virtual site beyond the array is vacuum too;
* ``"periodic"``: the box wraps around (period ``shape[a] * spacing[a]`` on axis a).

Why forward/backward differences and not central ones: an antisymmetric (central) stencil
gives zero on the lattice-scale mode (-1)^x, so a discretised energy built from it cannot
see a site-to-site flip and a knotted field can unwind through the lattice at no cost.
Forward and backward differences couple every site to its neighbour: the symbol of the
forward difference, |e^{i k h} - 1| = 2 |sin(k h / 2)|, vanishes only at k = 0
(common practice in lattice field theory).
"""

from __future__ import annotations

from dataclasses import dataclass

import jax.numpy as jnp
import numpy as np

BOUNDARIES = ("fixed", "periodic")

VACUUM = (0.0, 0.0, 1.0)


@dataclass(frozen=True)
class Grid:
    """A box of ``shape`` sites with per-axis ``spacing`` (model length units).

    ``origin`` is the position of site (0, 0, 0); by default the box is centred on the
    coordinate origin.
    """

    shape: tuple[int, int, int]
    spacing: tuple[float, float, float]
    origin: tuple[float, float, float]
    boundary: str = "fixed"

    def __post_init__(self) -> None:
        if len(self.shape) != 3 or len(self.spacing) != 3 or len(self.origin) != 3:
            raise ValueError("shape, spacing and origin each need three entries")
        if any(int(n) != n or n < 1 for n in self.shape):
            raise ValueError(f"shape must hold positive integers, got {self.shape}")
        if any(not np.isfinite(h) or h <= 0 for h in self.spacing):
            raise ValueError(f"spacing must be positive, got {self.spacing}")
        if self.boundary not in BOUNDARIES:
            raise ValueError(f"boundary must be one of {BOUNDARIES}, got {self.boundary!r}")

    @classmethod
    def centred(
        cls,
        shape: tuple[int, int, int] | int,
        spacing: tuple[float, float, float] | float,
        boundary: str = "fixed",
    ) -> Grid:
        """A grid whose sites are symmetric about the coordinate origin."""
        shape3 = (shape,) * 3 if isinstance(shape, int) else tuple(int(n) for n in shape)
        spacing3 = (float(spacing),) * 3 if np.isscalar(spacing) else tuple(map(float, spacing))
        origin = tuple(-0.5 * (n - 1) * h for n, h in zip(shape3, spacing3))
        return cls(shape3, spacing3, origin, boundary)

    def coarsened(self) -> "Grid":
        """The grid of about half the points per axis spanning the same box (spacing about
        2h): (N - 1) h = (M - 1) h' for fixed boxes, N h = M h' (N even) for periodic ones."""
        if self.boundary == "periodic":
            if any(n % 2 for n in self.shape):
                raise ValueError(f"a periodic grid {self.shape} needs even points per axis to coarsen")
            shape = tuple(n // 2 for n in self.shape)
            spacing = tuple(2.0 * h for h in self.spacing)
        else:
            shape = tuple((n - 1) // 2 + 1 for n in self.shape)
            spacing = tuple((n - 1) * h / (m - 1) for n, h, m in zip(self.shape, self.spacing, shape))
        origin = tuple(o + 0.5 * ((n - 1) * h - (m - 1) * hc)
                       for o, n, h, m, hc in zip(self.origin, self.shape, self.spacing, shape, spacing))
        return Grid(shape, spacing, origin, self.boundary)

    @property
    def npoints(self) -> int:
        return int(np.prod(self.shape))

    @property
    def cell_volume(self) -> float:
        return float(np.prod(self.spacing))

    @property
    def side(self) -> tuple[float, float, float]:
        """Box side per axis: the period for periodic boxes, the border-to-border
        distance for fixed ones."""
        if self.boundary == "periodic":
            return tuple(n * h for n, h in zip(self.shape, self.spacing))
        return tuple((n - 1) * h for n, h in zip(self.shape, self.spacing))

    def axes(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Site coordinates along each axis, shapes (Nx,), (Ny,), (Nz,)."""
        return tuple(o + h * np.arange(n) for n, h, o in zip(self.shape, self.spacing, self.origin))

    def mesh(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Coordinate arrays x, y, z of shape (Nx, Ny, Nz)."""
        return tuple(np.meshgrid(*self.axes(), indexing="ij"))

    def free_mask(self) -> np.ndarray:
        """1.0 on sites the minimiser may move, 0.0 on held border sites; (Nx, Ny, Nz, 1)."""
        mask = np.ones(self.shape)
        if self.boundary == "fixed":
            mask[0, :, :] = mask[-1, :, :] = 0.0
            mask[:, 0, :] = mask[:, -1, :] = 0.0
            mask[:, :, 0] = mask[:, :, -1] = 0.0
        return mask[..., None]

    def border_shell_mask(self, width: int = 2) -> np.ndarray:
        """True on the ``width`` outermost layers of sites (Nx, Ny, Nz)."""
        inner = np.zeros(self.shape, dtype=bool)
        sl = tuple(slice(width, n - width) for n in self.shape)
        inner[sl] = True
        return ~inner


def pad(field: jnp.ndarray, boundary: str, width: int) -> jnp.ndarray:
    """Extend a (Nx, Ny, Nz, C) field by ``width`` sites on every side of the three lattice
    axes: wrapped for periodic boxes, vacuum (0, 0, 1) for fixed ones."""
    widths = ((width, width),) * 3 + ((0, 0),)
    if boundary == "periodic":
        return jnp.pad(field, widths, mode="wrap")
    vacuum = jnp.asarray(VACUUM, dtype=field.dtype).reshape(1, 1, 1, 3)
    return jnp.pad(field - vacuum, widths) + vacuum


def shifted(padded: jnp.ndarray, width: int, shape: tuple[int, int, int], axis: int, k: int):
    """View of the padded array at offset ``k`` sites along ``axis``: element x is the
    field at site x + k e_axis, for x on the original (Nx, Ny, Nz) lattice."""
    index = [slice(width, width + n) for n in shape] + [slice(None)]
    index[axis] = slice(width + k, width + k + shape[axis])
    return padded[tuple(index)]


def one_sided_differences(padded, width, shape, spacing, reach: int = 1):
    """Forward and backward differences over ``reach`` sites along each axis.

    Returns two tuples (forward, backward) of three arrays of shape (Nx, Ny, Nz, C):
    forward[i](x) = (n(x + r e_i) - n(x)) / (r h_i), backward[i](x) = (n(x) - n(x - r e_i)) / (r h_i).
    ``spacing`` may be a traced array (the virial differentiates with respect to it).
    """
    centre = shifted(padded, width, shape, 0, 0)
    forward, backward = [], []
    for axis in range(3):
        step = reach * spacing[axis]
        forward.append((shifted(padded, width, shape, axis, reach) - centre) / step)
        backward.append((centre - shifted(padded, width, shape, axis, -reach)) / step)
    return tuple(forward), tuple(backward)


def spectral_derivative(values: jnp.ndarray, grid: Grid, axis: int) -> jnp.ndarray:
    """Derivative along ``axis`` of a (Nx, Ny, Nz, ...) array by FFT, treating the box as
    periodic with period ``shape[axis] * spacing[axis]``.  The Nyquist mode is dropped so
    that the derivative of a real field is real."""
    n = grid.shape[axis]
    k = 2.0 * np.pi * np.fft.fftfreq(n, d=grid.spacing[axis])
    if n % 2 == 0:
        k[n // 2] = 0.0
    shape = [1] * values.ndim
    shape[axis] = n
    transformed = jnp.fft.fft(values, axis=axis)
    ik = jnp.asarray((1j * k).reshape(shape), dtype=transformed.dtype)
    return jnp.real(jnp.fft.ifft(ik * transformed, axis=axis))
