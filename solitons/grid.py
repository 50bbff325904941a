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
    stretch: tuple[float, float, float] = (0.0, 0.0, 0.0)

    def __post_init__(self) -> None:
        stretch = (float(self.stretch),) * 3 if np.isscalar(self.stretch) else tuple(map(float, self.stretch))
        object.__setattr__(self, "stretch", stretch)
        if len(stretch) != 3 or any(not np.isfinite(s) or s < 0 for s in stretch):
            raise ValueError(f"stretch must be three lengths >= 0 (0: uniform axis), got {self.stretch}")
        if self.boundary == "periodic" and any(stretch):
            raise ValueError("a stretched grid needs the fixed boundary (a periodic box has no far region)")
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
        stretch: tuple[float, float, float] | float = 0.0,
    ) -> Grid:
        """A grid whose sites are symmetric about the coordinate origin."""
        shape3 = (shape,) * 3 if isinstance(shape, int) else tuple(int(n) for n in shape)
        spacing3 = (float(spacing),) * 3 if np.isscalar(spacing) else tuple(map(float, spacing))
        origin = tuple(-0.5 * (n - 1) * h for n, h in zip(shape3, spacing3))
        return cls(shape3, spacing3, origin, boundary, stretch)

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
        return Grid(shape, spacing, origin, self.boundary, self.stretch)

    @property
    def stretched(self) -> bool:
        return any(self.stretch)

    def computational(self) -> "Grid":
        """The uniform grid of the computational coordinate xi (itself when not stretched):
        topological integrals, being coordinate invariant, are evaluated on it."""
        return Grid(self.shape, self.spacing, self.origin, self.boundary) if self.stretched else self

    def xi_axes(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Computational coordinates xi of the sites along each axis."""
        return tuple(o + h * np.arange(n) for n, h, o in zip(self.shape, self.spacing, self.origin))

    def to_physical(self, xi, axis: int):
        """x(xi) on ``axis``."""
        s = self.stretch[axis]
        return s * np.sinh(np.asarray(xi) / s) if s else np.asarray(xi, dtype=float)

    def jacobian(self, xi, axis: int):
        """dx/dxi on ``axis`` at computational coordinate(s) ``xi``."""
        s = self.stretch[axis]
        return np.cosh(np.asarray(xi) / s) if s else np.ones_like(np.asarray(xi, dtype=float))

    def largest_cell(self) -> float:
        """Widest physical spacing between neighbouring sites (at the border of a stretched
        grid, h on a uniform one)."""
        return float(max(np.max(np.diff(x)) if len(x) > 1 else h for x, h in zip(self.axes(), self.spacing)))

    def link_factors(self, axis: int, reach: int) -> tuple[np.ndarray, np.ndarray]:
        """(forward, backward) factors 1 / (dx/dxi) at the midpoints of the links from each
        site to the site ``reach`` above and below along ``axis`` (ones when uniform)."""
        xi = self.xi_axes()[axis]
        half = 0.5 * reach * self.spacing[axis]
        return 1.0 / self.jacobian(xi + half, axis), 1.0 / self.jacobian(xi - half, axis)

    def site_weights(self) -> np.ndarray:
        """Product of dx/dxi over the three axes at each site, (Nx, Ny, Nz); ones when uniform."""
        j = [self.jacobian(xi, a) for a, xi in enumerate(self.xi_axes())]
        return j[0][:, None, None] * j[1][None, :, None] * j[2][None, None, :]

    def site_volumes(self) -> np.ndarray:
        """Physical volume carried by each site, (Nx, Ny, Nz): energies are sums of density
        times this."""
        return self.cell_volume * self.site_weights()

    def index_to_position(self, index) -> np.ndarray:
        """Physical positions (..., 3) of fractional site indices (..., 3)."""
        index = np.asarray(index, dtype=float)
        return np.stack([self.to_physical(self.origin[a] + self.spacing[a] * index[..., a], a)
                         for a in range(3)], axis=-1)

    @property
    def npoints(self) -> int:
        return int(np.prod(self.shape))

    @property
    def cell_volume(self) -> float:
        """h_x h_y h_z: the volume of a site of a uniform grid (of the centre site of a
        stretched one)."""
        return float(np.prod(self.spacing))

    @property
    def side(self) -> tuple[float, float, float]:
        """Box side per axis: the period for periodic boxes, the border-to-border
        distance for fixed ones."""
        if self.boundary == "periodic":
            return tuple(n * h for n, h in zip(self.shape, self.spacing))
        return tuple(float(x[-1] - x[0]) for x in self.axes())

    def axes(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Physical site coordinates along each axis, shapes (Nx,), (Ny,), (Nz,)."""
        return tuple(self.to_physical(xi, a) for a, xi in enumerate(self.xi_axes()))

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


def one_sided_differences(padded, width, shape, spacing, reach: int = 1, factors=None):
    """Forward and backward differences over ``reach`` sites along each axis.

    Returns two tuples (forward, backward) of three arrays of shape (Nx, Ny, Nz, C):
    forward[i](x) = (n(x + r e_i) - n(x)) / (r h_i), backward[i](x) = (n(x) - n(x - r e_i)) / (r h_i).
    ``spacing`` may be a traced array (the virial differentiates with respect to it).
    ``factors`` (stretched grids): per axis the (forward, backward) 1-D arrays of
    `Grid.link_factors`, multiplying the differences along that axis.
    """
    centre = shifted(padded, width, shape, 0, 0)
    forward, backward = [], []
    for axis in range(3):
        step = reach * spacing[axis]
        f = (shifted(padded, width, shape, axis, reach) - centre) / step
        b = (centre - shifted(padded, width, shape, axis, -reach)) / step
        if factors is not None:
            view = [1, 1, 1, 1]
            view[axis] = shape[axis]
            f = f * jnp.asarray(factors[axis][0].reshape(view), dtype=f.dtype)
            b = b * jnp.asarray(factors[axis][1].reshape(view), dtype=b.dtype)
        forward.append(f)
        backward.append(b)
    return tuple(forward), tuple(backward)


def grid_differences(padded, width, grid: Grid, spacing, reach: int = 1):
    """`one_sided_differences` with the link factors of a stretched ``grid``."""
    factors = None
    if grid.stretched:
        factors = tuple(grid.link_factors(axis, reach) for axis in range(3))
    return one_sided_differences(padded, width, grid.shape, spacing, reach, factors)


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
