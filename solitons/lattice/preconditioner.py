"""The shifted-Laplacian preconditioner of L-BFGS: W = (-Delta_h + shift)^-1 applied to
each component of a vector field on the grid, with the boundary condition of the grid
(held border sites: zero Dirichlet values there; periodic boxes: periodic), by fast sine or
Fourier transforms (scipy.fft).

Why: the stiffness of a lattice energy of gradients grows like 1 / h^2 (the largest
eigenvalue of the lattice Laplacian is 12 / h^2), so plain L-BFGS needs more steps the finer
the grid (Q = 1, max force < 1e-3: 470 steps at h = 0.125, 1081 at h = 0.0625).  Taking W as the initial
inverse Hessian makes the preconditioned problem's condition number independent of h for
a gradient energy, and the step count with it (Sobolev-gradient preconditioning; Nocedal &
Wright, Numerical Optimization, 2nd ed., sec. 7.2 for L-BFGS with a general initial
matrix).  Only SPD-ness matters for correctness, not how well W matches the Hessian:

* The transforms run in float32 (W only shapes the search direction; the energy, gradient
  and stored pairs stay float64).
* On a held border the interior of n points per axis is padded with zeros to the next
  length m >= n whose sine transform is fast (m + 1 with small prime factors), so W is
  R (-Delta_m + shift)^-1 R^T, a compression of an SPD matrix, SPD itself.
* On a stretched grid the Laplacian is that of the uniform computational coordinate xi
  and W = D^1/2 K^-1 D^1/2 with D the inverse site weight (the diagonal scaling the
  unpreconditioned L-BFGS uses there).

``taps`` (the scheme's one-sided difference over `TAP_OFFSETS`, `Stencil.taps`) replaces the
second-order eigenvalues 2 - 2 cos(theta) of each axis by the scheme's own symbol
|p(theta)|^2, p(theta) = sum_o taps[o] e^{i o theta}: the octant-averaged Dirichlet energy of
that scheme has exactly this symbol on a periodic box, and on the sine modes of a held
border W stays SPD whatever positive values divide them.  For the sixth-order scheme the
symbol at theta = pi is 4.5 times the second-order one, so W built from the second-order
Laplacian overstated the stiff high modes' step; matched, L-BFGS took 1854 instead of 2690
steps to force 1e-3 on the survey's Q = 3 start (81^3, h = 0.2; analysis/bench_minimisers.md).

``shift`` (units 1 / length^2, default 1: the inverse square of the Skyrme length the energy
is measured in) keeps W bounded on periodic boxes and damps the long-wavelength part.
"""

from __future__ import annotations

import numpy as np
import scipy.fft

from solitons.lattice.grid import TAP_OFFSETS, Grid

SHIFT = 1.0
TRANSFORM_DTYPE = np.float32


def symbol(theta, taps=None):
    """|p(theta)|^2 of a one-sided difference with ``taps`` over `TAP_OFFSETS` (the
    second-order 2 - 2 cos(theta) when taps is None)."""
    theta = np.asarray(theta, dtype=float)
    if taps is None:
        return 2.0 - 2.0 * np.cos(theta)
    return np.abs(sum(t * np.exp(1j * o * theta) for o, t in zip(TAP_OFFSETS, taps))) ** 2


class LaplacianPreconditioner:
    """``apply(vectors, out)``: out <- W vectors on (P, 3) arrays in the grid's site order
    (C order of (Nx, Ny, Nz)); held border sites of ``out`` are zero."""

    def __init__(self, grid: Grid, shift: float = SHIFT, taps=None):
        if not shift >= 0.0:
            raise ValueError(f"the preconditioner shift must be >= 0, got {shift!r}")
        if grid.boundary == "periodic" and shift == 0.0:
            raise ValueError("a periodic box needs a positive preconditioner shift (the constant mode)")
        self.grid = grid
        self.shift = float(shift)
        self.periodic = grid.boundary == "periodic"
        shape = grid.shape
        if self.periodic:
            self.padded = shape
            thetas = [2.0 * np.pi * np.fft.fftfreq(n) for n in shape[:-1]]
            thetas.append(2.0 * np.pi * np.arange(shape[-1] // 2 + 1) / shape[-1])
        else:
            self.inner = tuple(slice(1, n - 1) for n in shape)
            self.padded = tuple(scipy.fft.next_fast_len(n - 1, real=True) - 1 for n in shape)
            thetas = [np.pi * np.arange(1, m + 1) / (m + 1) for m in self.padded]
        modes = [symbol(theta, taps) for theta in thetas]
        lam = sum(np.reshape(mode / h ** 2, [-1 if a == b else 1 for b in range(3)])
                  for a, (mode, h) in enumerate(zip(modes, grid.spacing)))
        lam = lam + self.shift
        if self.periodic:
            inv = 1.0 / lam
        else:
            # DST-I applied twice without normalisation is 2 (m + 1) times the identity per axis
            inv = 1.0 / (lam * np.prod([2.0 * (m + 1) for m in self.padded]))
        self.inverse_eigenvalues = np.ascontiguousarray(inv[..., None], dtype=TRANSFORM_DTYPE)
        self.root_weights = None
        if grid.stretched:
            self.root_weights = np.sqrt(1.0 / grid.site_weights())[..., None]

    def apply(self, vectors: np.ndarray, out: np.ndarray) -> np.ndarray:
        shape = self.grid.shape
        v = vectors.reshape(*shape, 3)
        if self.root_weights is not None:
            v = v * self.root_weights
        if self.periodic:
            spectrum = scipy.fft.rfftn(v.astype(TRANSFORM_DTYPE), axes=(0, 1, 2), workers=-1)
            spectrum *= self.inverse_eigenvalues
            result = scipy.fft.irfftn(spectrum, s=shape, axes=(0, 1, 2), workers=-1)
            o = out.reshape(*shape, 3)
            o[...] = result
        else:
            work = np.zeros((*self.padded, 3), dtype=TRANSFORM_DTYPE)
            n = tuple(s.stop - s.start for s in self.inner)
            work[:n[0], :n[1], :n[2]] = v[self.inner]
            work = scipy.fft.dstn(work, type=1, axes=(0, 1, 2), workers=-1, overwrite_x=True)
            work *= self.inverse_eigenvalues
            work = scipy.fft.dstn(work, type=1, axes=(0, 1, 2), workers=-1, overwrite_x=True)
            o = out.reshape(*shape, 3)
            o[0], o[-1], o[:, 0], o[:, -1], o[:, :, 0], o[:, :, -1] = 0.0, 0.0, 0.0, 0.0, 0.0, 0.0
            o[self.inner] = work[:n[0], :n[1], :n[2]]
        if self.root_weights is not None:
            o *= self.root_weights
        return out
