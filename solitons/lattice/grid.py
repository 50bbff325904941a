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

The two schemes (`STENCILS`) differ only in the one-sided difference D+ (and its mirror
D-) that enters every density; a site's density is the average over the eight octants
(D+ or D- along each axis), so every weight is positive and the lattice energy of a
non-negative density is non-negative:

* ``second``: D+ f(x) = (f(x + h) - f(x)) / h, a second-order estimate of f' at the link
  midpoint x + h/2; the octant average is second order.
* ``fourth``: the forward-biased five-point difference
  D+ f(x) = (-3 f(x - h) - 10 f(x) + 18 f(x + h) - 6 f(x + 2h) + f(x + 3h)) / (12 h),
  a fourth-order estimate of f'(x) (its Taylor moments sum_o c_o o^m vanish for m = 0, 2,
  3, 4; derived).  Its symbol p(kh) vanishes only at k = 0, and |p|^2 / (kh)^2 is 1 +
  (kh)^4 / 10 + ... > 1 for kh < 2.5 and 0.72 at the checkerboard kh = pi (the one-site
  difference: 1 - (kh)^2 / 12 + ..., and 0.41 at kh = pi).  So this scheme's error is
  positive where the field is nearly resolved: coarse cells cost energy, which keeps a
  soliton off the coarse cells of a stretched grid and makes shrinking through the
  lattice costly.
* ``sixth``: the six-point forward-biased difference over x - h .. x + 4h, fifth order for
  f'(x); its odd error term cancels between D+ and D- in the octant average, so the energy
  is sixth order.  |p|^2 / (kh)^2 >= 1 at every k (1.84 at kh = pi).

The Laplacian (for second-derivative terms) is the central second difference of the
scheme's order (three, five or seven points); each symbol is negative except at k = 0
(derived: at kh = pi, -4, -64/12 and -1088/180), so it sees the checkerboard too.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import jax.numpy as jnp
import numpy as np

BOUNDARIES = ("fixed", "periodic")

VACUUM = (0.0, 0.0, 1.0)

# Sites from x at which a forward difference reads the field; every scheme's taps are
# coefficients over these offsets (zero where unused), so one padding serves all.
TAP_OFFSETS = (-1, 0, 1, 2, 3, 4)
PAD_WIDTH = 4


def stretch_map(xi, s: float):
    """The stretched coordinate x = s sinh(xi / s) (x = xi when s = 0)."""
    return s * np.sinh(np.asarray(xi) / s) if s else np.asarray(xi, dtype=float)


def stretch_jacobian(xi, s: float):
    """dx/dxi of `stretch_map`."""
    return np.cosh(np.asarray(xi) / s) if s else np.ones_like(np.asarray(xi, dtype=float))


def stretch_slope(xi, s: float):
    """d^2x/dxi^2 of `stretch_map`."""
    return np.sinh(np.asarray(xi) / s) / s if s else np.zeros_like(np.asarray(xi, dtype=float))


@dataclass(frozen=True)
class Stencil:
    """The one-sided difference of a lattice scheme (see the module docstring).

    ``taps``: D+ f(x) = sum_o taps[o] f(x + o h) / h over `TAP_OFFSETS`; the backward
    difference is the mirror image, D- f(x) = -sum_o taps[o] f(x - o h) / h.
    ``at``: where D+ estimates the derivative, in sites from x (1/2 for the link midpoint,
    0 for the site); a stretched grid's 1 / (dx/dxi) is taken there (and at -at for D-).
    ``laplacian``: central second-difference coefficients over offsets -3..3, times 1 / h^2;
    ``central``: central first-difference coefficients over offsets -3..3, times 1 / h (the
    stretched-grid correction of the Laplacian), both of the scheme's order.
    """

    name: str
    order: int
    taps: tuple[float, ...]
    at: float
    laplacian: tuple[float, ...]
    central: tuple[float, ...]

    @property
    def nonzero_taps(self) -> tuple[tuple[int, float], ...]:
        return tuple((o, c) for o, c in zip(TAP_OFFSETS, self.taps) if c != 0.0)


STENCILS = {
    "second": Stencil("second", 2, (0.0, -1.0, 1.0, 0.0, 0.0, 0.0), 0.5,
                      (0.0, 0.0, 1.0, -2.0, 1.0, 0.0, 0.0), (0.0, 0.0, -0.5, 0.0, 0.5, 0.0, 0.0)),
    "fourth": Stencil("fourth", 4, tuple(c / 12.0 for c in (-3.0, -10.0, 18.0, -6.0, 1.0, 0.0)), 0.0,
                      tuple(c / 12.0 for c in (0.0, -1.0, 16.0, -30.0, 16.0, -1.0, 0.0)),
                      tuple(c / 12.0 for c in (0.0, 1.0, -8.0, 0.0, 8.0, -1.0, 0.0))),
    "sixth": Stencil("sixth", 6, tuple(c / 60.0 for c in (-12.0, -65.0, 120.0, -60.0, 20.0, -3.0)), 0.0,
                     tuple(c / 180.0 for c in (2.0, -27.0, 270.0, -490.0, 270.0, -27.0, 2.0)),
                     tuple(c / 60.0 for c in (-1.0, 9.0, -45.0, 0.0, 45.0, -9.0, 1.0))),
}


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

    def coarsened(self) -> Grid:
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

    def computational(self) -> Grid:
        """The uniform grid of the computational coordinate xi (itself when not stretched):
        topological integrals, being coordinate invariant, are evaluated on it."""
        return Grid(self.shape, self.spacing, self.origin, self.boundary) if self.stretched else self

    def xi_axes(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Computational coordinates xi of the sites along each axis."""
        return tuple(o + h * np.arange(n) for n, h, o in zip(self.shape, self.spacing, self.origin))

    def to_physical(self, xi, axis: int):
        """x(xi) on ``axis``."""
        return stretch_map(xi, self.stretch[axis])

    def jacobian(self, xi, axis: int):
        """dx/dxi on ``axis`` at computational coordinate(s) ``xi``."""
        return stretch_jacobian(xi, self.stretch[axis])

    def largest_cell(self) -> float:
        """Widest physical spacing between neighbouring sites (at the border of a stretched
        grid, h on a uniform one)."""
        return float(max(np.max(np.diff(x)) if len(x) > 1 else h for x, h in zip(self.axes(), self.spacing)))

    def difference_factors(self, axis: int, stencil: Stencil) -> tuple[np.ndarray, np.ndarray]:
        """(forward, backward) factors 1 / (dx/dxi) per site along ``axis`` where the
        stencil's D+ and D- estimate the derivative (ones when uniform)."""
        xi = self.xi_axes()[axis]
        shift = stencil.at * self.spacing[axis]
        return 1.0 / self.jacobian(xi + shift, axis), 1.0 / self.jacobian(xi - shift, axis)

    def jacobian_slope(self, xi, axis: int):
        """d^2x/dxi^2 on ``axis`` (zeros when uniform)."""
        return stretch_slope(xi, self.stretch[axis])

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
        return math.prod(int(n) for n in self.shape)  # Python integers: no overflow

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


def _axis_view(values, axis: int, shape):
    view = [1] * 4
    view[axis] = shape[axis]
    return values.reshape(view)


def one_sided_differences(padded, width, shape, spacing, stencil: Stencil, factors=None):
    """The stencil's forward and backward differences along each axis.

    Returns two tuples (forward, backward) of three arrays of shape (Nx, Ny, Nz, C):
    forward[i](x) = sum_o taps[o] n(x + o e_i) / h_i, backward[i](x) = -sum_o taps[o]
    n(x - o e_i) / h_i.  ``spacing`` may be a traced array (the virial differentiates with
    respect to it).  ``factors`` (stretched grids): per axis the (forward, backward) 1-D
    arrays of `Grid.difference_factors`, multiplying the differences along that axis.
    """
    # differences against the centre (the taps sum to zero): exact zero on a uniform field
    taps = [(o, c) for o, c in stencil.nonzero_taps if o != 0]
    centre = shifted(padded, width, shape, 0, 0)
    forward, backward = [], []
    for axis in range(3):
        f = sum(c * (shifted(padded, width, shape, axis, o) - centre) for o, c in taps) / spacing[axis]
        b = -sum(c * (shifted(padded, width, shape, axis, -o) - centre) for o, c in taps) / spacing[axis]
        if factors is not None:
            f = f * jnp.asarray(_axis_view(factors[axis][0], axis, shape), dtype=f.dtype)
            b = b * jnp.asarray(_axis_view(factors[axis][1], axis, shape), dtype=b.dtype)
        forward.append(f)
        backward.append(b)
    return tuple(forward), tuple(backward)


def grid_differences(padded, width, grid: Grid, spacing, stencil: Stencil):
    """`one_sided_differences` with the factors of a stretched ``grid``."""
    factors = None
    if grid.stretched:
        factors = tuple(grid.difference_factors(axis, stencil) for axis in range(3))
    return one_sided_differences(padded, width, grid.shape, spacing, stencil, factors)


def grid_laplacian(padded, width, grid: Grid, spacing, stencil: Stencil):
    """sum_i d_i d_i n with the stencil's central second difference, (Nx, Ny, Nz, C).  On a
    stretched grid d^2/dx^2 = (d^2/dxi^2 - (x''/x') d/dxi) / x'^2, with the central first
    difference of the same order for d/dxi."""
    shape = grid.shape
    dtype = padded.dtype
    def central(coefficients, axis):
        return sum(c * shifted(padded, width, shape, axis, o) for o, c in zip(range(-3, 4), coefficients) if c != 0.0)

    total = 0.0
    for axis in range(3):
        second = central(stencil.laplacian, axis) / spacing[axis] ** 2
        if grid.stretch[axis]:
            xi = grid.xi_axes()[axis]
            jacobian = grid.jacobian(xi, axis)
            first = central(stencil.central, axis) / spacing[axis]
            # x''/x' is an inverse length: it scales with 1/h when every length does (the
            # virial's scaling, with x'(xi) and the site weights fixed)
            slope = jnp.asarray(_axis_view(grid.jacobian_slope(xi, axis) / jacobian * grid.spacing[axis], axis,
                                           shape), dtype=dtype) / spacing[axis]
            second = (second - first * slope) * jnp.asarray(_axis_view(1.0 / jacobian**2, axis, shape), dtype=dtype)
        total = total + second
    return total


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
