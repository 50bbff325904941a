"""Fused hand-written kernels (numba) for the energy and gradient of the built-in
Skyrme-Faddeev model: c2 * dirichlet + c4 * skyrme_faddeev on the neighbour-coupled
lattice schemes of `solitons.energy`, the hot path of a relaxation.

The same site sum as the jax route (tests check energies and gradients against jax
autodiff to 1e-12), arranged so that nothing larger than the field is materialised twice:
with d_a^s (a = x, y, z; s = forward, backward) the one-sided differences at a site,
M_a = sum_s d_a^s (d_a^s)^T and S_a = tr M_a,

    e2 = (1/2) sum_a S_a,      e4 = (1/4) sum_{a<b} (S_a S_b - <M_a, M_b>),

(the average over the four corners of each plaquette of |d_a x d_b|^2), and

    de/dd_a^s = c2 d_a^s + (c4 / 2) sum_{b != a} (S_b - M_b) d_a^s.

Pass 1 (parallel over x-planes) writes, per site, the derivatives with respect to the six
differences; pass 2 gathers them into dE/dn (each difference is (n(x + r e_a) - n(x)) /
(r h_a)), projects on the tangent plane and zeroes the held border.  The energy of each
x-plane is accumulated in float64 whatever the field's precision.

Terms other than these two, and user terms, use the jax route.
"""

from __future__ import annotations

import numba as nb
import numpy as np

KERNEL_TERMS = ("dirichlet", "skyrme_faddeev")


_FAST = {"nsz", "arcp", "contract", "afn", "reassoc"}  # fastmath without "no NaN / no Inf"


@nb.njit(parallel=True, cache=True)
def _to_padded_planes(field, r, periodic, buf):
    """buf[c, i + r, j + r, k + r] = field[i, j, k, c]; the r-wide frame holds the vacuum
    (fixed) or the wrapped field (periodic).  Component-major so that the k loops of the
    passes below vectorise."""
    nx, ny, nz = field.shape[0], field.shape[1], field.shape[2]
    for pi in nb.prange(nx + 2 * r):
        i = pi - r
        inside_i = 0 <= i < nx
        if periodic:
            i = i % nx
        for pj in range(ny + 2 * r):
            j = pj - r
            inside_j = 0 <= j < ny
            if periodic:
                j = j % ny
            for pk in range(nz + 2 * r):
                k = pk - r
                inside = inside_i and inside_j and 0 <= k < nz
                if periodic:
                    k = k % nz
                    inside = True
                if inside:
                    buf[0, pi, pj, pk] = field[i, j, k, 0]
                    buf[1, pi, pj, pk] = field[i, j, k, 1]
                    buf[2, pi, pj, pk] = field[i, j, k, 2]
                else:
                    buf[0, pi, pj, pk] = 0.0
                    buf[1, pi, pj, pk] = 0.0
                    buf[2, pi, pj, pk] = 1.0


@nb.njit(parallel=True, cache=True, fastmath=_FAST)
def _pass_one(buf, r, hx, hy, hz, c2, c4, deriv, parts, density):
    """deriv[3 * row + c, i + r, j + r, k + r] = d e / d (d_row)_c at site (i, j, k), rows
    (x+, x-, y+, y-, z+, z-); parts[i] = the plane's sums of the six pieces of e
    (c2 e2 along x, y, z; c4 e4 of the pairs xy, xz, yz); density = e (unnormalised)."""
    nx, ny, nz = buf.shape[1] - 2 * r, buf.shape[2] - 2 * r, buf.shape[3] - 2 * r
    real = buf.dtype.type  # every constant in the field's precision (float32 * float64 would promote)
    ix, iy, iz = real(1.0 / (r * hx)), real(1.0 / (r * hy)), real(1.0 / (r * hz))
    c2, c4 = real(c2), real(c4)
    h, half, quarter, two = real(0.5 * c4), real(0.5), real(0.25), real(2.0)
    for i in nb.prange(nx):
        p0 = p1 = p2 = p3 = p4 = p5 = 0.0
        ci = i + r
        for j in range(ny):
            cj = j + r
            r0 = r1 = r2 = r3 = r4 = r5 = buf.dtype.type(0.0)
            for k in range(nz):
                ck = k + r
                n0, n1, n2 = buf[0, ci, cj, ck], buf[1, ci, cj, ck], buf[2, ci, cj, ck]
                xf0 = (buf[0, ci + r, cj, ck] - n0) * ix
                xf1 = (buf[1, ci + r, cj, ck] - n1) * ix
                xf2 = (buf[2, ci + r, cj, ck] - n2) * ix
                xb0 = (n0 - buf[0, ci - r, cj, ck]) * ix
                xb1 = (n1 - buf[1, ci - r, cj, ck]) * ix
                xb2 = (n2 - buf[2, ci - r, cj, ck]) * ix
                yf0 = (buf[0, ci, cj + r, ck] - n0) * iy
                yf1 = (buf[1, ci, cj + r, ck] - n1) * iy
                yf2 = (buf[2, ci, cj + r, ck] - n2) * iy
                yb0 = (n0 - buf[0, ci, cj - r, ck]) * iy
                yb1 = (n1 - buf[1, ci, cj - r, ck]) * iy
                yb2 = (n2 - buf[2, ci, cj - r, ck]) * iy
                zf0 = (buf[0, ci, cj, ck + r] - n0) * iz
                zf1 = (buf[1, ci, cj, ck + r] - n1) * iz
                zf2 = (buf[2, ci, cj, ck + r] - n2) * iz
                zb0 = (n0 - buf[0, ci, cj, ck - r]) * iz
                zb1 = (n1 - buf[1, ci, cj, ck - r]) * iz
                zb2 = (n2 - buf[2, ci, cj, ck - r]) * iz
                # M_a = f f^T + b b^T (entries 00 11 22 01 02 12), S_a = tr M_a
                x00 = xf0 * xf0 + xb0 * xb0
                x11 = xf1 * xf1 + xb1 * xb1
                x22 = xf2 * xf2 + xb2 * xb2
                x01 = xf0 * xf1 + xb0 * xb1
                x02 = xf0 * xf2 + xb0 * xb2
                x12 = xf1 * xf2 + xb1 * xb2
                y00 = yf0 * yf0 + yb0 * yb0
                y11 = yf1 * yf1 + yb1 * yb1
                y22 = yf2 * yf2 + yb2 * yb2
                y01 = yf0 * yf1 + yb0 * yb1
                y02 = yf0 * yf2 + yb0 * yb2
                y12 = yf1 * yf2 + yb1 * yb2
                z00 = zf0 * zf0 + zb0 * zb0
                z11 = zf1 * zf1 + zb1 * zb1
                z22 = zf2 * zf2 + zb2 * zb2
                z01 = zf0 * zf1 + zb0 * zb1
                z02 = zf0 * zf2 + zb0 * zb2
                z12 = zf1 * zf2 + zb1 * zb2
                sx = x00 + x11 + x22
                sy = y00 + y11 + y22
                sz = z00 + z11 + z22
                xy = x00 * y00 + x11 * y11 + x22 * y22 + two * (x01 * y01 + x02 * y02 + x12 * y12)
                xz = x00 * z00 + x11 * z11 + x22 * z22 + two * (x01 * z01 + x02 * z02 + x12 * z12)
                yz = y00 * z00 + y11 * z11 + y22 * z22 + two * (y01 * z01 + y02 * z02 + y12 * z12)
                exy = quarter * c4 * (sx * sy - xy)
                exz = quarter * c4 * (sx * sz - xz)
                eyz = quarter * c4 * (sy * sz - yz)
                r0 += half * c2 * sx
                r1 += half * c2 * sy
                r2 += half * c2 * sz
                r3 += exy
                r4 += exz
                r5 += eyz
                density[i, j, k] = half * c2 * (sx + sy + sz) + exy + exz + eyz
                # K_x = c2 + h (S_y + S_z) - h (M_y + M_z), and cyclic; times 1 / (r h_a)
                dg = (c2 + h * (sy + sz)) * ix
                k00 = dg - h * (y00 + z00) * ix
                k11 = dg - h * (y11 + z11) * ix
                k22 = dg - h * (y22 + z22) * ix
                k01 = -h * (y01 + z01) * ix
                k02 = -h * (y02 + z02) * ix
                k12 = -h * (y12 + z12) * ix
                deriv[0, ci, cj, ck] = k00 * xf0 + k01 * xf1 + k02 * xf2
                deriv[1, ci, cj, ck] = k01 * xf0 + k11 * xf1 + k12 * xf2
                deriv[2, ci, cj, ck] = k02 * xf0 + k12 * xf1 + k22 * xf2
                deriv[3, ci, cj, ck] = k00 * xb0 + k01 * xb1 + k02 * xb2
                deriv[4, ci, cj, ck] = k01 * xb0 + k11 * xb1 + k12 * xb2
                deriv[5, ci, cj, ck] = k02 * xb0 + k12 * xb1 + k22 * xb2
                dg = (c2 + h * (sx + sz)) * iy
                k00 = dg - h * (x00 + z00) * iy
                k11 = dg - h * (x11 + z11) * iy
                k22 = dg - h * (x22 + z22) * iy
                k01 = -h * (x01 + z01) * iy
                k02 = -h * (x02 + z02) * iy
                k12 = -h * (x12 + z12) * iy
                deriv[6, ci, cj, ck] = k00 * yf0 + k01 * yf1 + k02 * yf2
                deriv[7, ci, cj, ck] = k01 * yf0 + k11 * yf1 + k12 * yf2
                deriv[8, ci, cj, ck] = k02 * yf0 + k12 * yf1 + k22 * yf2
                deriv[9, ci, cj, ck] = k00 * yb0 + k01 * yb1 + k02 * yb2
                deriv[10, ci, cj, ck] = k01 * yb0 + k11 * yb1 + k12 * yb2
                deriv[11, ci, cj, ck] = k02 * yb0 + k12 * yb1 + k22 * yb2
                dg = (c2 + h * (sx + sy)) * iz
                k00 = dg - h * (x00 + y00) * iz
                k11 = dg - h * (x11 + y11) * iz
                k22 = dg - h * (x22 + y22) * iz
                k01 = -h * (x01 + y01) * iz
                k02 = -h * (x02 + y02) * iz
                k12 = -h * (x12 + y12) * iz
                deriv[12, ci, cj, ck] = k00 * zf0 + k01 * zf1 + k02 * zf2
                deriv[13, ci, cj, ck] = k01 * zf0 + k11 * zf1 + k12 * zf2
                deriv[14, ci, cj, ck] = k02 * zf0 + k12 * zf1 + k22 * zf2
                deriv[15, ci, cj, ck] = k00 * zb0 + k01 * zb1 + k02 * zb2
                deriv[16, ci, cj, ck] = k01 * zb0 + k11 * zb1 + k12 * zb2
                deriv[17, ci, cj, ck] = k02 * zb0 + k12 * zb1 + k22 * zb2
            p0 += np.float64(r0)
            p1 += np.float64(r1)
            p2 += np.float64(r2)
            p3 += np.float64(r3)
            p4 += np.float64(r4)
            p5 += np.float64(r5)
        parts[i, 0], parts[i, 1], parts[i, 2], parts[i, 3], parts[i, 4], parts[i, 5] = p0, p1, p2, p3, p4, p5


@nb.njit(parallel=True, cache=True)
def _wrap_frame(deriv, r):
    """Periodic boxes: copy the derivatives into the r-wide frame (wrapped), so that pass
    two reads its neighbours without index arithmetic."""
    nx, ny, nz = deriv.shape[1] - 2 * r, deriv.shape[2] - 2 * r, deriv.shape[3] - 2 * r
    for q in nb.prange(deriv.shape[0]):
        for pi in range(nx + 2 * r):
            i = (pi - r) % nx + r
            for pj in range(ny + 2 * r):
                j = (pj - r) % ny + r
                for pk in range(nz + 2 * r):
                    if r <= pi < nx + r and r <= pj < ny + r and r <= pk < nz + r:
                        continue
                    deriv[q, pi, pj, pk] = deriv[q, i, j, (pk - r) % nz + r]


@nb.njit(parallel=True, cache=True, fastmath=_FAST)
def _pass_two(buf, deriv, r, periodic, scale, weight, accumulate, out):
    """out[i, j, k] += weight * scale * P(dE/dn) at free sites (the border of a fixed box
    is held).  A site enters its own forward (-) and backward (+) differences, the forward
    difference of the site r below (+) and the backward one of the site r above (-); the
    frame of ``deriv`` is zero (fixed) or wrapped (periodic)."""
    nx, ny, nz = out.shape[0], out.shape[1], out.shape[2]
    lo = 0 if periodic else 1
    w = out.dtype.type(weight * scale)
    for i in nb.prange(lo, nx - lo):
        ci = i + r
        for j in range(lo, ny - lo):
            cj = j + r
            for k in range(lo, nz - lo):
                ck = k + r
                g0 = (deriv[3, ci, cj, ck] - deriv[0, ci, cj, ck] + deriv[9, ci, cj, ck] - deriv[6, ci, cj, ck]
                      + deriv[15, ci, cj, ck] - deriv[12, ci, cj, ck]
                      + deriv[0, ci - r, cj, ck] - deriv[3, ci + r, cj, ck]
                      + deriv[6, ci, cj - r, ck] - deriv[9, ci, cj + r, ck]
                      + deriv[12, ci, cj, ck - r] - deriv[15, ci, cj, ck + r])
                g1 = (deriv[4, ci, cj, ck] - deriv[1, ci, cj, ck] + deriv[10, ci, cj, ck] - deriv[7, ci, cj, ck]
                      + deriv[16, ci, cj, ck] - deriv[13, ci, cj, ck]
                      + deriv[1, ci - r, cj, ck] - deriv[4, ci + r, cj, ck]
                      + deriv[7, ci, cj - r, ck] - deriv[10, ci, cj + r, ck]
                      + deriv[13, ci, cj, ck - r] - deriv[16, ci, cj, ck + r])
                g2 = (deriv[5, ci, cj, ck] - deriv[2, ci, cj, ck] + deriv[11, ci, cj, ck] - deriv[8, ci, cj, ck]
                      + deriv[17, ci, cj, ck] - deriv[14, ci, cj, ck]
                      + deriv[2, ci - r, cj, ck] - deriv[5, ci + r, cj, ck]
                      + deriv[8, ci, cj - r, ck] - deriv[11, ci, cj + r, ck]
                      + deriv[14, ci, cj, ck - r] - deriv[17, ci, cj, ck + r])
                n0, n1, n2 = buf[0, ci, cj, ck], buf[1, ci, cj, ck], buf[2, ci, cj, ck]
                along = g0 * n0 + g1 * n1 + g2 * n2
                if accumulate:
                    out[i, j, k, 0] += w * (g0 - along * n0)
                    out[i, j, k, 1] += w * (g1 - along * n1)
                    out[i, j, k, 2] += w * (g2 - along * n2)
                else:
                    out[i, j, k, 0] = w * (g0 - along * n0)
                    out[i, j, k, 1] = w * (g1 - along * n1)
                    out[i, j, k, 2] = w * (g2 - along * n2)


_BUFFERS: dict = {}


def _buffer(key, shape, dtype, zero=False):
    """Work arrays kept between calls (a relaxation evaluates the same shapes thousands
    of times); the frame of the derivative buffer must stay zero for fixed boxes."""
    array = _BUFFERS.get(key)
    if array is None or array.shape != shape or array.dtype != dtype:
        if len(_BUFFERS) > 8:
            _BUFFERS.clear()
        array = np.zeros(shape, dtype=dtype) if zero else np.empty(shape, dtype=dtype)
        _BUFFERS[key] = array
    return array


def _run(field, spacing, periodic, reaches_weights, c2, c4, normalisation, out, gradient=True):
    field = np.ascontiguousarray(field)
    nx, ny, nz, _ = field.shape
    hx, hy, hz = (float(h) for h in spacing)
    scale = normalisation * hx * hy * hz
    if gradient:
        if out is None:
            out = np.empty_like(field)
        if not periodic:  # the held border
            out[0], out[-1], out[:, 0], out[:, -1], out[:, :, 0], out[:, :, -1] = 0, 0, 0, 0, 0, 0
    parts = np.empty((nx, 6), dtype=np.float64)
    pieces = np.zeros(6)
    densities = []
    for count, (reach, weight) in enumerate(reaches_weights):
        density = _buffer(("density", reach), (nx, ny, nz), field.dtype)
        densities.append((weight * normalisation, density))
        padded_shape = (nx + 2 * reach, ny + 2 * reach, nz + 2 * reach)
        buf = _buffer(("field", reach), (3,) + padded_shape, field.dtype)
        deriv = _buffer(("deriv", reach, periodic), (18,) + padded_shape, field.dtype, zero=True)
        _to_padded_planes(field, reach, periodic, buf)
        _pass_one(buf, reach, hx, hy, hz, float(c2), float(c4), deriv, parts, density)
        if periodic:
            _wrap_frame(deriv, reach)
        pieces += weight * scale * parts.sum(axis=0)
        if gradient:
            _pass_two(buf, deriv, reach, periodic, scale, weight, count > 0, out)
    return pieces, densities, out


def value_and_grad(field: np.ndarray, spacing, periodic: bool, reaches_weights, c2: float, c4: float,
                   normalisation: float, out: np.ndarray | None = None):
    """Energy (float64) and tangent-projected gradient (the field's dtype, border zeroed
    on fixed boxes) of c2 * dirichlet + c4 * skyrme_faddeev; ``reaches_weights`` lists
    (reach, weight) pairs: ((1, 1.0),) for the second-order scheme, ((1, 4/3), (2, -1/3))
    for the fourth-order one.  ``out`` (the field's shape and dtype) receives the gradient
    when given: a relaxation reuses two buffers instead of asking the system for fresh
    pages at every evaluation."""
    pieces, _, out = _run(field, spacing, periodic, reaches_weights, c2, c4, normalisation, out)
    return float(pieces.sum()), out


def energy_pieces(field: np.ndarray, spacing, periodic: bool, reaches_weights, c2: float, c4: float,
                  normalisation: float):
    """The energy split as (E2 along x, y, z; E4 of the planes xy, xz, yz) and the
    normalised energy density per site (a copy).  The Derrick derivatives follow from the
    scaling of each piece (see `virial`)."""
    pieces, densities, _ = _run(field, spacing, periodic, reaches_weights, c2, c4, normalisation, None,
                                gradient=False)
    return pieces, sum(weight * density.astype(np.float64) for weight, density in densities)


def virial(pieces: np.ndarray) -> tuple[float, list[float]]:
    """h_a dE/dh_a / E from the pieces: each difference carries 1 / h_a and the cell volume
    h_x h_y h_z, so h_a dE/dh_a = E - 2 E2_a - 2 sum_{b != a} E4_ab (derived; equal to the
    jax derivative with respect to the spacing, checked in the tests)."""
    energy = float(pieces.sum())
    if energy == 0.0:
        return 0.0, [0.0, 0.0, 0.0]
    e2 = pieces[:3]
    exy, exz, eyz = pieces[3:]
    quartic_with = (exy + exz, exy + eyz, exz + eyz)
    per_axis = [(energy - 2.0 * e2[a] - 2.0 * quartic_with[a]) / energy for a in range(3)]
    return float(sum(per_axis)), [float(v) for v in per_axis]
