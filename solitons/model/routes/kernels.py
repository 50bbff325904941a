"""Fused hand-written kernels (numba) for the energy and gradient of the built-in
Skyrme-Faddeev model: c2 * dirichlet + c4 * skyrme_faddeev on the neighbour-coupled
lattice schemes of `solitons.model.energy`, the hot path of a relaxation.

The same site sum as the jax route (tests check energies and gradients against jax
autodiff to 1e-12), arranged so that nothing larger than the field is materialised twice:
with d_a^s (a = x, y, z; s = forward, backward) the one-sided differences at a site,
M_a = sum_s d_a^s (d_a^s)^T and S_a = tr M_a,

    e2 = (1/2) sum_a S_a,      e4 = (1/4) sum_{a<b} (S_a S_b - <M_a, M_b>),

(the average over the four corners of each plaquette of |d_a x d_b|^2), and

    de/dd_a^s = c2 d_a^s + (c4 / 2) sum_{b != a} (S_b - M_b) d_a^s.

Every scheme is one set of taps over the offsets `solitons.lattice.grid.TAP_OFFSETS` (-1 .. 4):
d+ = sum_o c_o (n(x + o) - n(x)) f and d- = -sum_o c_o (n(x - o) - n(x)) f, with f the
difference factor (1 / h, or 1 / (h dx/dxi) on a stretched grid), so the second-order
scheme runs with zero taps (the price of one code path: measured in
analysis/bench_energy.txt).  Per x-plane, `_plane_derivatives` writes the derivatives of
each site's density with respect to its six differences (18 values per site), and
`_plane_gradient` gathers those of the nine planes x - 4 .. x + 4 into dE/dn (site x
collects sum_o c_o (P+(x - o) - P-(x + o)) per axis), projects on the tangent plane and
zeroes the held border.  `_fused` runs both in one sweep per thread-slab with a ring of
nine derivative planes, so the derivatives stay in cache.  The energy of each x-plane
is accumulated in float64 whatever the field's precision.

Every other model runs on the staged route of `solitons.model.routes.staged`, which reuses `_site`
and the gather functions below.
"""

from __future__ import annotations

import llvmlite.binding as llvm
import numba as nb
import numpy as np

from solitons.lattice.grid import PAD_WIDTH, STENCILS

KERNEL_TERMS = ("dirichlet", "skyrme_faddeev")
# the one-site difference runs on its own narrow path (pad 1, three planes, no zero taps)
NARROW_TAPS = STENCILS["second"].taps


_FAST = {"nsz", "arcp", "contract", "afn", "reassoc"}  # fastmath without "no NaN / no Inf"

# The inner loops touch some 40 row views of the same arrays; LLVM vectorises a loop only
# after runtime checks that its pointers do not overlap, and by default gives up beyond 8
# such checks ("too many memory checks needed"), leaving the kernel scalar.  Raising the
# limits (process-wide LLVM options; they only allow more checks, never change results)
# made pass one about 1.5x faster in analysis/bench_energy.py.
VECTORISE_OPTIONS = ("-runtime-memory-check-threshold=2000", "-vectorize-memory-check-threshold=2000")
for _option in VECTORISE_OPTIONS:
    llvm.set_option("", _option)


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


@nb.njit(inline="always", fastmath=_FAST)
def _site(differences, constants, w, factors):
    """One site: from its six difference vectors, the six weighted energy pieces (w c2 e2
    along x, y, z; w c4 e4 of xy, xz, yz), the unweighted density, and the 18 derivatives
    d (w e) / d (difference) times the difference factors.  Shared by the k loops of both
    stencil widths, inlined there so that the loops still vectorise (packed in tuples:
    numba's inliner refuses a call with this many arguments)."""
    xf0, xf1, xf2, xb0, xb1, xb2, yf0, yf1, yf2, yb0, yb1, yb2, zf0, zf1, zf2, zb0, zb1, zb2 = differences
    c2, c4, h, half, quarter, two = constants
    ixf, ixb, iyf, iyb, izf, izb = factors
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
    density = half * c2 * (sx + sy + sz) + exy + exz + eyz
    # K_x = c2 + h (S_y + S_z) - h (M_y + M_z), and cyclic; times 1 / (r h_a)
    dg = c2 + h * (sy + sz)
    k00 = dg - h * (y00 + z00)
    k11 = dg - h * (y11 + z11)
    k22 = dg - h * (y22 + z22)
    k01 = -h * (y01 + z01)
    k02 = -h * (y02 + z02)
    k12 = -h * (y12 + z12)
    wf, wb = w * ixf, w * ixb
    g0 = wf * (k00 * xf0 + k01 * xf1 + k02 * xf2)
    g1 = wf * (k01 * xf0 + k11 * xf1 + k12 * xf2)
    g2 = wf * (k02 * xf0 + k12 * xf1 + k22 * xf2)
    g3 = wb * (k00 * xb0 + k01 * xb1 + k02 * xb2)
    g4 = wb * (k01 * xb0 + k11 * xb1 + k12 * xb2)
    g5 = wb * (k02 * xb0 + k12 * xb1 + k22 * xb2)
    dg = c2 + h * (sx + sz)
    k00 = dg - h * (x00 + z00)
    k11 = dg - h * (x11 + z11)
    k22 = dg - h * (x22 + z22)
    k01 = -h * (x01 + z01)
    k02 = -h * (x02 + z02)
    k12 = -h * (x12 + z12)
    wf, wb = w * iyf, w * iyb
    g6 = wf * (k00 * yf0 + k01 * yf1 + k02 * yf2)
    g7 = wf * (k01 * yf0 + k11 * yf1 + k12 * yf2)
    g8 = wf * (k02 * yf0 + k12 * yf1 + k22 * yf2)
    g9 = wb * (k00 * yb0 + k01 * yb1 + k02 * yb2)
    g10 = wb * (k01 * yb0 + k11 * yb1 + k12 * yb2)
    g11 = wb * (k02 * yb0 + k12 * yb1 + k22 * yb2)
    dg = c2 + h * (sx + sy)
    k00 = dg - h * (x00 + y00)
    k11 = dg - h * (x11 + y11)
    k22 = dg - h * (x22 + y22)
    k01 = -h * (x01 + y01)
    k02 = -h * (x02 + y02)
    k12 = -h * (x12 + y12)
    wf, wb = w * izf, w * izb
    g12 = wf * (k00 * zf0 + k01 * zf1 + k02 * zf2)
    g13 = wf * (k01 * zf0 + k11 * zf1 + k12 * zf2)
    g14 = wf * (k02 * zf0 + k12 * zf1 + k22 * zf2)
    g15 = wb * (k00 * zb0 + k01 * zb1 + k02 * zb2)
    g16 = wb * (k01 * zb0 + k11 * zb1 + k12 * zb2)
    g17 = wb * (k02 * zb0 + k12 * zb1 + k22 * zb2)
    return (w * half * c2 * sx, w * half * c2 * sy, w * half * c2 * sz, w * exy, w * exz, w * eyz, density,
            g0, g1, g2, g3, g4, g5, g6, g7, g8, g9, g10, g11, g12, g13, g14, g15, g16, g17)


@nb.njit(cache=True, fastmath=_FAST)
def _plane_derivatives(buf, r, i, taps, fx, bx, fy, by, fz, bz, wx, wy, wz, c2, c4, plane, density, store_density):
    """For x-plane i: plane[3 * row + c, j + r, k + r] = d (w e) / d (d_row)_c at site (i, j, k)
    times the row's difference factor, rows (x+, x-, y+, y-, z+, z-); returns the plane's
    sums of the six pieces of w e (c2 e2 along x, y, z; c4 e4 of the pairs xy, xz, yz);
    density[i] = e (unnormalised) when ``store_density``.  ``taps``: the scheme's
    coefficients over TAP_OFFSETS (r = PAD_WIDTH).  fx[i] (bx[i]) multiplies the forward
    (backward) difference along x at site i: 1 / h_x on a uniform grid, 1 / (h_x dx/dxi)
    where the difference estimates the derivative on a stretched one; likewise y, z.
    w = wx[i] wy[j] wz[k] is the site's dx/dxi product.

    The k loop reads and writes 1-D row views (v<component><neighbour>, d<row>) so that its
    index is a plain counter from 0: LLVM then vectorises it (see VECTORISE_OPTIONS)."""
    ny, nz = buf.shape[2] - 2 * r, buf.shape[3] - 2 * r
    real = buf.dtype.type  # every constant in the field's precision (float32 * float64 would promote)
    c2, c4 = real(c2), real(c4)
    h, half, quarter, two = real(0.5 * c4), real(0.5), real(0.25), real(2.0)
    t0, t2, t3, t4, t5 = real(taps[0]), real(taps[2]), real(taps[3]), real(taps[4]), real(taps[5])
    ci = i + r
    p0 = p1 = p2 = p3 = p4 = p5 = 0.0
    ixf, ixb = fx[i], bx[i]
    for j in range(ny):
        cj = j + r
        iyf, iyb = fy[j], by[j]
        wxy = wx[i] * wy[j]
        v0 = buf[0, ci, cj, r:]
        v0xm4 = buf[0, ci - 4, cj, r:]
        v0ym4 = buf[0, ci, cj - 4, r:]
        v0zm4 = buf[0, ci, cj, r - 4:]
        v0xm3 = buf[0, ci - 3, cj, r:]
        v0ym3 = buf[0, ci, cj - 3, r:]
        v0zm3 = buf[0, ci, cj, r - 3:]
        v0xm2 = buf[0, ci - 2, cj, r:]
        v0ym2 = buf[0, ci, cj - 2, r:]
        v0zm2 = buf[0, ci, cj, r - 2:]
        v0xm1 = buf[0, ci - 1, cj, r:]
        v0ym1 = buf[0, ci, cj - 1, r:]
        v0zm1 = buf[0, ci, cj, r - 1:]
        v0xp1 = buf[0, ci + 1, cj, r:]
        v0yp1 = buf[0, ci, cj + 1, r:]
        v0zp1 = buf[0, ci, cj, r + 1:]
        v0xp2 = buf[0, ci + 2, cj, r:]
        v0yp2 = buf[0, ci, cj + 2, r:]
        v0zp2 = buf[0, ci, cj, r + 2:]
        v0xp3 = buf[0, ci + 3, cj, r:]
        v0yp3 = buf[0, ci, cj + 3, r:]
        v0zp3 = buf[0, ci, cj, r + 3:]
        v0xp4 = buf[0, ci + 4, cj, r:]
        v0yp4 = buf[0, ci, cj + 4, r:]
        v0zp4 = buf[0, ci, cj, r + 4:]
        v1 = buf[1, ci, cj, r:]
        v1xm4 = buf[1, ci - 4, cj, r:]
        v1ym4 = buf[1, ci, cj - 4, r:]
        v1zm4 = buf[1, ci, cj, r - 4:]
        v1xm3 = buf[1, ci - 3, cj, r:]
        v1ym3 = buf[1, ci, cj - 3, r:]
        v1zm3 = buf[1, ci, cj, r - 3:]
        v1xm2 = buf[1, ci - 2, cj, r:]
        v1ym2 = buf[1, ci, cj - 2, r:]
        v1zm2 = buf[1, ci, cj, r - 2:]
        v1xm1 = buf[1, ci - 1, cj, r:]
        v1ym1 = buf[1, ci, cj - 1, r:]
        v1zm1 = buf[1, ci, cj, r - 1:]
        v1xp1 = buf[1, ci + 1, cj, r:]
        v1yp1 = buf[1, ci, cj + 1, r:]
        v1zp1 = buf[1, ci, cj, r + 1:]
        v1xp2 = buf[1, ci + 2, cj, r:]
        v1yp2 = buf[1, ci, cj + 2, r:]
        v1zp2 = buf[1, ci, cj, r + 2:]
        v1xp3 = buf[1, ci + 3, cj, r:]
        v1yp3 = buf[1, ci, cj + 3, r:]
        v1zp3 = buf[1, ci, cj, r + 3:]
        v1xp4 = buf[1, ci + 4, cj, r:]
        v1yp4 = buf[1, ci, cj + 4, r:]
        v1zp4 = buf[1, ci, cj, r + 4:]
        v2 = buf[2, ci, cj, r:]
        v2xm4 = buf[2, ci - 4, cj, r:]
        v2ym4 = buf[2, ci, cj - 4, r:]
        v2zm4 = buf[2, ci, cj, r - 4:]
        v2xm3 = buf[2, ci - 3, cj, r:]
        v2ym3 = buf[2, ci, cj - 3, r:]
        v2zm3 = buf[2, ci, cj, r - 3:]
        v2xm2 = buf[2, ci - 2, cj, r:]
        v2ym2 = buf[2, ci, cj - 2, r:]
        v2zm2 = buf[2, ci, cj, r - 2:]
        v2xm1 = buf[2, ci - 1, cj, r:]
        v2ym1 = buf[2, ci, cj - 1, r:]
        v2zm1 = buf[2, ci, cj, r - 1:]
        v2xp1 = buf[2, ci + 1, cj, r:]
        v2yp1 = buf[2, ci, cj + 1, r:]
        v2zp1 = buf[2, ci, cj, r + 1:]
        v2xp2 = buf[2, ci + 2, cj, r:]
        v2yp2 = buf[2, ci, cj + 2, r:]
        v2zp2 = buf[2, ci, cj, r + 2:]
        v2xp3 = buf[2, ci + 3, cj, r:]
        v2yp3 = buf[2, ci, cj + 3, r:]
        v2zp3 = buf[2, ci, cj, r + 3:]
        v2xp4 = buf[2, ci + 4, cj, r:]
        v2yp4 = buf[2, ci, cj + 4, r:]
        v2zp4 = buf[2, ci, cj, r + 4:]
        d0 = plane[0, cj, r:]
        d1 = plane[1, cj, r:]
        d2 = plane[2, cj, r:]
        d3 = plane[3, cj, r:]
        d4 = plane[4, cj, r:]
        d5 = plane[5, cj, r:]
        d6 = plane[6, cj, r:]
        d7 = plane[7, cj, r:]
        d8 = plane[8, cj, r:]
        d9 = plane[9, cj, r:]
        d10 = plane[10, cj, r:]
        d11 = plane[11, cj, r:]
        d12 = plane[12, cj, r:]
        d13 = plane[13, cj, r:]
        d14 = plane[14, cj, r:]
        d15 = plane[15, cj, r:]
        d16 = plane[16, cj, r:]
        d17 = plane[17, cj, r:]
        dens = density[i, j]
        r0 = r1 = r2 = r3 = r4 = r5 = buf.dtype.type(0.0)
        for k in range(nz):
            izf, izb = fz[k], bz[k]
            n0, n1, n2 = v0[k], v1[k], v2[k]
            xf0 = (t0 * (v0xm1[k] - n0) + t2 * (v0xp1[k] - n0) + t3 * (v0xp2[k] - n0)
                   + t4 * (v0xp3[k] - n0) + t5 * (v0xp4[k] - n0)) * ixf
            xf1 = (t0 * (v1xm1[k] - n1) + t2 * (v1xp1[k] - n1) + t3 * (v1xp2[k] - n1)
                   + t4 * (v1xp3[k] - n1) + t5 * (v1xp4[k] - n1)) * ixf
            xf2 = (t0 * (v2xm1[k] - n2) + t2 * (v2xp1[k] - n2) + t3 * (v2xp2[k] - n2)
                   + t4 * (v2xp3[k] - n2) + t5 * (v2xp4[k] - n2)) * ixf
            xb0 = -(t0 * (v0xp1[k] - n0) + t2 * (v0xm1[k] - n0) + t3 * (v0xm2[k] - n0)
                    + t4 * (v0xm3[k] - n0) + t5 * (v0xm4[k] - n0)) * ixb
            xb1 = -(t0 * (v1xp1[k] - n1) + t2 * (v1xm1[k] - n1) + t3 * (v1xm2[k] - n1)
                    + t4 * (v1xm3[k] - n1) + t5 * (v1xm4[k] - n1)) * ixb
            xb2 = -(t0 * (v2xp1[k] - n2) + t2 * (v2xm1[k] - n2) + t3 * (v2xm2[k] - n2)
                    + t4 * (v2xm3[k] - n2) + t5 * (v2xm4[k] - n2)) * ixb
            yf0 = (t0 * (v0ym1[k] - n0) + t2 * (v0yp1[k] - n0) + t3 * (v0yp2[k] - n0)
                   + t4 * (v0yp3[k] - n0) + t5 * (v0yp4[k] - n0)) * iyf
            yf1 = (t0 * (v1ym1[k] - n1) + t2 * (v1yp1[k] - n1) + t3 * (v1yp2[k] - n1)
                   + t4 * (v1yp3[k] - n1) + t5 * (v1yp4[k] - n1)) * iyf
            yf2 = (t0 * (v2ym1[k] - n2) + t2 * (v2yp1[k] - n2) + t3 * (v2yp2[k] - n2)
                   + t4 * (v2yp3[k] - n2) + t5 * (v2yp4[k] - n2)) * iyf
            yb0 = -(t0 * (v0yp1[k] - n0) + t2 * (v0ym1[k] - n0) + t3 * (v0ym2[k] - n0)
                    + t4 * (v0ym3[k] - n0) + t5 * (v0ym4[k] - n0)) * iyb
            yb1 = -(t0 * (v1yp1[k] - n1) + t2 * (v1ym1[k] - n1) + t3 * (v1ym2[k] - n1)
                    + t4 * (v1ym3[k] - n1) + t5 * (v1ym4[k] - n1)) * iyb
            yb2 = -(t0 * (v2yp1[k] - n2) + t2 * (v2ym1[k] - n2) + t3 * (v2ym2[k] - n2)
                    + t4 * (v2ym3[k] - n2) + t5 * (v2ym4[k] - n2)) * iyb
            zf0 = (t0 * (v0zm1[k] - n0) + t2 * (v0zp1[k] - n0) + t3 * (v0zp2[k] - n0)
                   + t4 * (v0zp3[k] - n0) + t5 * (v0zp4[k] - n0)) * izf
            zf1 = (t0 * (v1zm1[k] - n1) + t2 * (v1zp1[k] - n1) + t3 * (v1zp2[k] - n1)
                   + t4 * (v1zp3[k] - n1) + t5 * (v1zp4[k] - n1)) * izf
            zf2 = (t0 * (v2zm1[k] - n2) + t2 * (v2zp1[k] - n2) + t3 * (v2zp2[k] - n2)
                   + t4 * (v2zp3[k] - n2) + t5 * (v2zp4[k] - n2)) * izf
            zb0 = -(t0 * (v0zp1[k] - n0) + t2 * (v0zm1[k] - n0) + t3 * (v0zm2[k] - n0)
                    + t4 * (v0zm3[k] - n0) + t5 * (v0zm4[k] - n0)) * izb
            zb1 = -(t0 * (v1zp1[k] - n1) + t2 * (v1zm1[k] - n1) + t3 * (v1zm2[k] - n1)
                    + t4 * (v1zm3[k] - n1) + t5 * (v1zm4[k] - n1)) * izb
            zb2 = -(t0 * (v2zp1[k] - n2) + t2 * (v2zm1[k] - n2) + t3 * (v2zm2[k] - n2)
                    + t4 * (v2zm3[k] - n2) + t5 * (v2zm4[k] - n2)) * izb
            (e0, e1, e2, e3, e4, e5, e, g0, g1, g2, g3, g4, g5, g6, g7, g8, g9, g10, g11, g12, g13, g14, g15, g16,
             g17) = _site((xf0, xf1, xf2, xb0, xb1, xb2, yf0, yf1, yf2, yb0, yb1, yb2, zf0, zf1, zf2, zb0, zb1, zb2),
                          (c2, c4, h, half, quarter, two), wxy * wz[k], (ixf, ixb, iyf, iyb, izf, izb))
            dens[k] = e
            d0[k], d1[k], d2[k], d3[k], d4[k], d5[k] = g0, g1, g2, g3, g4, g5
            d6[k], d7[k], d8[k], d9[k], d10[k], d11[k] = g6, g7, g8, g9, g10, g11
            d12[k], d13[k], d14[k], d15[k], d16[k], d17[k] = g12, g13, g14, g15, g16, g17
            r0 += e0
            r1 += e1
            r2 += e2
            r3 += e3
            r4 += e4
            r5 += e5
        p0 += np.float64(r0)
        p1 += np.float64(r1)
        p2 += np.float64(r2)
        p3 += np.float64(r3)
        p4 += np.float64(r4)
        p5 += np.float64(r5)
    return p0, p1, p2, p3, p4, p5


@nb.njit(cache=True, fastmath=_FAST)
def _plane_derivatives_narrow(buf, r, i, fx, bx, fy, by, fz, bz, wx, wy, wz, c2, c4, plane, density, store_density):
    """`_plane_derivatives` for the one-site difference of the second-order scheme (pad
    r = 1): D+ = (n(x + e_a) - n(x)) f_a, D- = (n(x) - n(x - e_a)) f_a; no zero taps."""
    ny, nz = buf.shape[2] - 2 * r, buf.shape[3] - 2 * r
    real = buf.dtype.type  # every constant in the field's precision (float32 * float64 would promote)
    c2, c4 = real(c2), real(c4)
    h, half, quarter, two = real(0.5 * c4), real(0.5), real(0.25), real(2.0)
    ci = i + r
    p0 = p1 = p2 = p3 = p4 = p5 = 0.0
    ixf, ixb = fx[i], bx[i]
    for j in range(ny):
        cj = j + r
        iyf, iyb = fy[j], by[j]
        wxy = wx[i] * wy[j]
        v0 = buf[0, ci, cj, r:]
        v0xp1 = buf[0, ci + 1, cj, r:]
        v0xm1 = buf[0, ci - 1, cj, r:]
        v0yp1 = buf[0, ci, cj + 1, r:]
        v0ym1 = buf[0, ci, cj - 1, r:]
        v0zp1 = buf[0, ci, cj, r + 1:]
        v0zm1 = buf[0, ci, cj, r - 1:]
        v1 = buf[1, ci, cj, r:]
        v1xp1 = buf[1, ci + 1, cj, r:]
        v1xm1 = buf[1, ci - 1, cj, r:]
        v1yp1 = buf[1, ci, cj + 1, r:]
        v1ym1 = buf[1, ci, cj - 1, r:]
        v1zp1 = buf[1, ci, cj, r + 1:]
        v1zm1 = buf[1, ci, cj, r - 1:]
        v2 = buf[2, ci, cj, r:]
        v2xp1 = buf[2, ci + 1, cj, r:]
        v2xm1 = buf[2, ci - 1, cj, r:]
        v2yp1 = buf[2, ci, cj + 1, r:]
        v2ym1 = buf[2, ci, cj - 1, r:]
        v2zp1 = buf[2, ci, cj, r + 1:]
        v2zm1 = buf[2, ci, cj, r - 1:]
        d0 = plane[0, cj, r:]
        d1 = plane[1, cj, r:]
        d2 = plane[2, cj, r:]
        d3 = plane[3, cj, r:]
        d4 = plane[4, cj, r:]
        d5 = plane[5, cj, r:]
        d6 = plane[6, cj, r:]
        d7 = plane[7, cj, r:]
        d8 = plane[8, cj, r:]
        d9 = plane[9, cj, r:]
        d10 = plane[10, cj, r:]
        d11 = plane[11, cj, r:]
        d12 = plane[12, cj, r:]
        d13 = plane[13, cj, r:]
        d14 = plane[14, cj, r:]
        d15 = plane[15, cj, r:]
        d16 = plane[16, cj, r:]
        d17 = plane[17, cj, r:]
        dens = density[i, j]
        r0 = r1 = r2 = r3 = r4 = r5 = buf.dtype.type(0.0)
        for k in range(nz):
            izf, izb = fz[k], bz[k]
            n0, n1, n2 = v0[k], v1[k], v2[k]
            xf0 = (v0xp1[k] - n0) * ixf
            xf1 = (v1xp1[k] - n1) * ixf
            xf2 = (v2xp1[k] - n2) * ixf
            xb0 = (n0 - v0xm1[k]) * ixb
            xb1 = (n1 - v1xm1[k]) * ixb
            xb2 = (n2 - v2xm1[k]) * ixb
            yf0 = (v0yp1[k] - n0) * iyf
            yf1 = (v1yp1[k] - n1) * iyf
            yf2 = (v2yp1[k] - n2) * iyf
            yb0 = (n0 - v0ym1[k]) * iyb
            yb1 = (n1 - v1ym1[k]) * iyb
            yb2 = (n2 - v2ym1[k]) * iyb
            zf0 = (v0zp1[k] - n0) * izf
            zf1 = (v1zp1[k] - n1) * izf
            zf2 = (v2zp1[k] - n2) * izf
            zb0 = (n0 - v0zm1[k]) * izb
            zb1 = (n1 - v1zm1[k]) * izb
            zb2 = (n2 - v2zm1[k]) * izb
            (e0, e1, e2, e3, e4, e5, e, g0, g1, g2, g3, g4, g5, g6, g7, g8, g9, g10, g11, g12, g13, g14, g15, g16,
             g17) = _site((xf0, xf1, xf2, xb0, xb1, xb2, yf0, yf1, yf2, yb0, yb1, yb2, zf0, zf1, zf2, zb0, zb1, zb2),
                          (c2, c4, h, half, quarter, two), wxy * wz[k], (ixf, ixb, iyf, iyb, izf, izb))
            dens[k] = e
            d0[k], d1[k], d2[k], d3[k], d4[k], d5[k] = g0, g1, g2, g3, g4, g5
            d6[k], d7[k], d8[k], d9[k], d10[k], d11[k] = g6, g7, g8, g9, g10, g11
            d12[k], d13[k], d14[k], d15[k], d16[k], d17[k] = g12, g13, g14, g15, g16, g17
            r0 += e0
            r1 += e1
            r2 += e2
            r3 += e3
            r4 += e4
            r5 += e5
        p0 += np.float64(r0)
        p1 += np.float64(r1)
        p2 += np.float64(r2)
        p3 += np.float64(r3)
        p4 += np.float64(r4)
        p5 += np.float64(r5)
    return p0, p1, p2, p3, p4, p5


@nb.njit(cache=True, fastmath=_FAST)
def _plane_gradient(buf, r, i, taps, planes, lo, w, out):
    """out[i, j, k] = w P(dE/dn) on x-plane i from the derivative planes of x-planes
    i - 4 .. i + 4 (``planes``, a tuple of nine).  A forward difference at site y reads
    n(y + o) with tap c_o, a backward one n(y - o) with -c_o, so site x gathers
    sum_o c_o (P+(x - o) - P-(x + o)) along each axis; the y and z frames of the planes
    are zero (fixed) or wrapped (periodic).  Sites of the fixed border (lo = 1) are held.
    ``out`` is the gradient viewed as (Nx, Ny, 3 Nz) (contiguous rows, so that the k loop
    vectorises)."""
    ny, nz = out.shape[1], out.shape[2] // 3
    real = buf.dtype.type
    t0, t1, t2, t3, t4, t5 = (real(taps[0]), real(taps[1]), real(taps[2]), real(taps[3]), real(taps[4]),
                              real(taps[5]))
    ci = i + r
    # views start at the first free site (offset lo), so the k loop counts from 0 and LLVM
    # can bound every access (a loop from a run-time start stayed scalar)
    b, m = r + lo, nz - 2 * lo
    for j in range(lo, ny - lo):
        cj = j + r
        n0, n1, n2 = buf[0, ci, cj, b:], buf[1, ci, cj, b:], buf[2, ci, cj, b:]
        q0_xp1 = planes[5][0, cj, b:]
        q3_xm1 = planes[3][3, cj, b:]
        q0_xp0 = planes[4][0, cj, b:]
        q3_xp0 = planes[4][3, cj, b:]
        q0_xm1 = planes[3][0, cj, b:]
        q3_xp1 = planes[5][3, cj, b:]
        q0_xm2 = planes[2][0, cj, b:]
        q3_xp2 = planes[6][3, cj, b:]
        q0_xm3 = planes[1][0, cj, b:]
        q3_xp3 = planes[7][3, cj, b:]
        q0_xm4 = planes[0][0, cj, b:]
        q3_xp4 = planes[8][3, cj, b:]
        q6_yp1 = planes[4][6, cj + 1, b:]
        q9_ym1 = planes[4][9, cj - 1, b:]
        q6_yp0 = planes[4][6, cj + 0, b:]
        q9_yp0 = planes[4][9, cj + 0, b:]
        q6_ym1 = planes[4][6, cj - 1, b:]
        q9_yp1 = planes[4][9, cj + 1, b:]
        q6_ym2 = planes[4][6, cj - 2, b:]
        q9_yp2 = planes[4][9, cj + 2, b:]
        q6_ym3 = planes[4][6, cj - 3, b:]
        q9_yp3 = planes[4][9, cj + 3, b:]
        q6_ym4 = planes[4][6, cj - 4, b:]
        q9_yp4 = planes[4][9, cj + 4, b:]
        q12_zp1 = planes[4][12, cj, b + 1:]
        q15_zm1 = planes[4][15, cj, b - 1:]
        q12_zp0 = planes[4][12, cj, b + 0:]
        q15_zp0 = planes[4][15, cj, b + 0:]
        q12_zm1 = planes[4][12, cj, b - 1:]
        q15_zp1 = planes[4][15, cj, b + 1:]
        q12_zm2 = planes[4][12, cj, b - 2:]
        q15_zp2 = planes[4][15, cj, b + 2:]
        q12_zm3 = planes[4][12, cj, b - 3:]
        q15_zp3 = planes[4][15, cj, b + 3:]
        q12_zm4 = planes[4][12, cj, b - 4:]
        q15_zp4 = planes[4][15, cj, b + 4:]
        q1_xp1 = planes[5][1, cj, b:]
        q4_xm1 = planes[3][4, cj, b:]
        q1_xp0 = planes[4][1, cj, b:]
        q4_xp0 = planes[4][4, cj, b:]
        q1_xm1 = planes[3][1, cj, b:]
        q4_xp1 = planes[5][4, cj, b:]
        q1_xm2 = planes[2][1, cj, b:]
        q4_xp2 = planes[6][4, cj, b:]
        q1_xm3 = planes[1][1, cj, b:]
        q4_xp3 = planes[7][4, cj, b:]
        q1_xm4 = planes[0][1, cj, b:]
        q4_xp4 = planes[8][4, cj, b:]
        q7_yp1 = planes[4][7, cj + 1, b:]
        q10_ym1 = planes[4][10, cj - 1, b:]
        q7_yp0 = planes[4][7, cj + 0, b:]
        q10_yp0 = planes[4][10, cj + 0, b:]
        q7_ym1 = planes[4][7, cj - 1, b:]
        q10_yp1 = planes[4][10, cj + 1, b:]
        q7_ym2 = planes[4][7, cj - 2, b:]
        q10_yp2 = planes[4][10, cj + 2, b:]
        q7_ym3 = planes[4][7, cj - 3, b:]
        q10_yp3 = planes[4][10, cj + 3, b:]
        q7_ym4 = planes[4][7, cj - 4, b:]
        q10_yp4 = planes[4][10, cj + 4, b:]
        q13_zp1 = planes[4][13, cj, b + 1:]
        q16_zm1 = planes[4][16, cj, b - 1:]
        q13_zp0 = planes[4][13, cj, b + 0:]
        q16_zp0 = planes[4][16, cj, b + 0:]
        q13_zm1 = planes[4][13, cj, b - 1:]
        q16_zp1 = planes[4][16, cj, b + 1:]
        q13_zm2 = planes[4][13, cj, b - 2:]
        q16_zp2 = planes[4][16, cj, b + 2:]
        q13_zm3 = planes[4][13, cj, b - 3:]
        q16_zp3 = planes[4][16, cj, b + 3:]
        q13_zm4 = planes[4][13, cj, b - 4:]
        q16_zp4 = planes[4][16, cj, b + 4:]
        q2_xp1 = planes[5][2, cj, b:]
        q5_xm1 = planes[3][5, cj, b:]
        q2_xp0 = planes[4][2, cj, b:]
        q5_xp0 = planes[4][5, cj, b:]
        q2_xm1 = planes[3][2, cj, b:]
        q5_xp1 = planes[5][5, cj, b:]
        q2_xm2 = planes[2][2, cj, b:]
        q5_xp2 = planes[6][5, cj, b:]
        q2_xm3 = planes[1][2, cj, b:]
        q5_xp3 = planes[7][5, cj, b:]
        q2_xm4 = planes[0][2, cj, b:]
        q5_xp4 = planes[8][5, cj, b:]
        q8_yp1 = planes[4][8, cj + 1, b:]
        q11_ym1 = planes[4][11, cj - 1, b:]
        q8_yp0 = planes[4][8, cj + 0, b:]
        q11_yp0 = planes[4][11, cj + 0, b:]
        q8_ym1 = planes[4][8, cj - 1, b:]
        q11_yp1 = planes[4][11, cj + 1, b:]
        q8_ym2 = planes[4][8, cj - 2, b:]
        q11_yp2 = planes[4][11, cj + 2, b:]
        q8_ym3 = planes[4][8, cj - 3, b:]
        q11_yp3 = planes[4][11, cj + 3, b:]
        q8_ym4 = planes[4][8, cj - 4, b:]
        q11_yp4 = planes[4][11, cj + 4, b:]
        q14_zp1 = planes[4][14, cj, b + 1:]
        q17_zm1 = planes[4][17, cj, b - 1:]
        q14_zp0 = planes[4][14, cj, b + 0:]
        q17_zp0 = planes[4][17, cj, b + 0:]
        q14_zm1 = planes[4][14, cj, b - 1:]
        q17_zp1 = planes[4][17, cj, b + 1:]
        q14_zm2 = planes[4][14, cj, b - 2:]
        q17_zp2 = planes[4][17, cj, b + 2:]
        q14_zm3 = planes[4][14, cj, b - 3:]
        q17_zp3 = planes[4][17, cj, b + 3:]
        q14_zm4 = planes[4][14, cj, b - 4:]
        q17_zp4 = planes[4][17, cj, b + 4:]
        row = out[i, j, 3 * lo:]  # site lo + k, component c at 3 k + c
        for k in range(m):
            g0 = (
                  t0 * (q0_xp1[k] - q3_xm1[k])
                  + t1 * (q0_xp0[k] - q3_xp0[k])
                  + t2 * (q0_xm1[k] - q3_xp1[k])
                  + t3 * (q0_xm2[k] - q3_xp2[k])
                  + t4 * (q0_xm3[k] - q3_xp3[k])
                  + t5 * (q0_xm4[k] - q3_xp4[k])
                  + t0 * (q6_yp1[k] - q9_ym1[k])
                  + t1 * (q6_yp0[k] - q9_yp0[k])
                  + t2 * (q6_ym1[k] - q9_yp1[k])
                  + t3 * (q6_ym2[k] - q9_yp2[k])
                  + t4 * (q6_ym3[k] - q9_yp3[k])
                  + t5 * (q6_ym4[k] - q9_yp4[k])
                  + t0 * (q12_zp1[k] - q15_zm1[k])
                  + t1 * (q12_zp0[k] - q15_zp0[k])
                  + t2 * (q12_zm1[k] - q15_zp1[k])
                  + t3 * (q12_zm2[k] - q15_zp2[k])
                  + t4 * (q12_zm3[k] - q15_zp3[k])
                  + t5 * (q12_zm4[k] - q15_zp4[k]))
            g1 = (
                  t0 * (q1_xp1[k] - q4_xm1[k])
                  + t1 * (q1_xp0[k] - q4_xp0[k])
                  + t2 * (q1_xm1[k] - q4_xp1[k])
                  + t3 * (q1_xm2[k] - q4_xp2[k])
                  + t4 * (q1_xm3[k] - q4_xp3[k])
                  + t5 * (q1_xm4[k] - q4_xp4[k])
                  + t0 * (q7_yp1[k] - q10_ym1[k])
                  + t1 * (q7_yp0[k] - q10_yp0[k])
                  + t2 * (q7_ym1[k] - q10_yp1[k])
                  + t3 * (q7_ym2[k] - q10_yp2[k])
                  + t4 * (q7_ym3[k] - q10_yp3[k])
                  + t5 * (q7_ym4[k] - q10_yp4[k])
                  + t0 * (q13_zp1[k] - q16_zm1[k])
                  + t1 * (q13_zp0[k] - q16_zp0[k])
                  + t2 * (q13_zm1[k] - q16_zp1[k])
                  + t3 * (q13_zm2[k] - q16_zp2[k])
                  + t4 * (q13_zm3[k] - q16_zp3[k])
                  + t5 * (q13_zm4[k] - q16_zp4[k]))
            g2 = (
                  t0 * (q2_xp1[k] - q5_xm1[k])
                  + t1 * (q2_xp0[k] - q5_xp0[k])
                  + t2 * (q2_xm1[k] - q5_xp1[k])
                  + t3 * (q2_xm2[k] - q5_xp2[k])
                  + t4 * (q2_xm3[k] - q5_xp3[k])
                  + t5 * (q2_xm4[k] - q5_xp4[k])
                  + t0 * (q8_yp1[k] - q11_ym1[k])
                  + t1 * (q8_yp0[k] - q11_yp0[k])
                  + t2 * (q8_ym1[k] - q11_yp1[k])
                  + t3 * (q8_ym2[k] - q11_yp2[k])
                  + t4 * (q8_ym3[k] - q11_yp3[k])
                  + t5 * (q8_ym4[k] - q11_yp4[k])
                  + t0 * (q14_zp1[k] - q17_zm1[k])
                  + t1 * (q14_zp0[k] - q17_zp0[k])
                  + t2 * (q14_zm1[k] - q17_zp1[k])
                  + t3 * (q14_zm2[k] - q17_zp2[k])
                  + t4 * (q14_zm3[k] - q17_zp3[k])
                  + t5 * (q14_zm4[k] - q17_zp4[k]))
            along = g0 * n0[k] + g1 * n1[k] + g2 * n2[k]
            row[3 * k] = w * (g0 - along * n0[k])
            row[3 * k + 1] = w * (g1 - along * n1[k])
            row[3 * k + 2] = w * (g2 - along * n2[k])


@nb.njit(cache=True, fastmath=_FAST)
def _plane_gradient_narrow(buf, r, i, lower, own, upper, lo, w, out):
    """`_plane_gradient` for the one-site difference (pad r = 1): site x gathers
    P+(x - 1) - P+(x) + P-(x) - P-(x + 1) per axis from the planes of x-planes i - 1
    (lower), i (own) and i + 1 (upper)."""
    ny, nz = out.shape[1], out.shape[2] // 3
    ci = i + r
    b, m = r + lo, nz - 2 * lo
    for j in range(lo, ny - lo):
        cj = j + r
        n0, n1, n2 = buf[0, ci, cj, b:], buf[1, ci, cj, b:], buf[2, ci, cj, b:]
        a0, a1, a2, a3, a4, a5 = (own[0, cj, b:], own[1, cj, b:], own[2, cj, b:],
                                  own[3, cj, b:], own[4, cj, b:], own[5, cj, b:])
        a6, a7, a8, a9, a10, a11 = (own[6, cj, b:], own[7, cj, b:], own[8, cj, b:],
                                    own[9, cj, b:], own[10, cj, b:], own[11, cj, b:])
        a12, a13, a14, a15, a16, a17 = (own[12, cj, b:], own[13, cj, b:], own[14, cj, b:],
                                        own[15, cj, b:], own[16, cj, b:], own[17, cj, b:])
        xm0, xm1, xm2 = lower[0, cj, b:], lower[1, cj, b:], lower[2, cj, b:]
        xp3, xp4, xp5 = upper[3, cj, b:], upper[4, cj, b:], upper[5, cj, b:]
        ym6, ym7, ym8 = own[6, cj - 1, b:], own[7, cj - 1, b:], own[8, cj - 1, b:]
        yp9, yp10, yp11 = own[9, cj + 1, b:], own[10, cj + 1, b:], own[11, cj + 1, b:]
        zm12, zm13, zm14 = own[12, cj, b - 1:], own[13, cj, b - 1:], own[14, cj, b - 1:]
        zp15, zp16, zp17 = own[15, cj, b + 1:], own[16, cj, b + 1:], own[17, cj, b + 1:]
        row = out[i, j, 3 * lo:]
        for k in range(m):
            g0 = (a3[k] - a0[k] + a9[k] - a6[k] + a15[k] - a12[k]
                  + xm0[k] - xp3[k] + ym6[k] - yp9[k] + zm12[k] - zp15[k])
            g1 = (a4[k] - a1[k] + a10[k] - a7[k] + a16[k] - a13[k]
                  + xm1[k] - xp4[k] + ym7[k] - yp10[k] + zm13[k] - zp16[k])
            g2 = (a5[k] - a2[k] + a11[k] - a8[k] + a17[k] - a14[k]
                  + xm2[k] - xp5[k] + ym8[k] - yp11[k] + zm14[k] - zp17[k])
            along = g0 * n0[k] + g1 * n1[k] + g2 * n2[k]
            row[3 * k] = w * (g0 - along * n0[k])
            row[3 * k + 1] = w * (g1 - along * n1[k])
            row[3 * k + 2] = w * (g2 - along * n2[k])


@nb.njit(cache=True)
def _wrap_plane_frame(plane, r):
    """Periodic boxes: copy a derivative plane's interior into its r-wide y and z frame."""
    ny, nz = plane.shape[1] - 2 * r, plane.shape[2] - 2 * r
    for q in range(plane.shape[0]):
        for pj in range(ny + 2 * r):
            j = (pj - r) % ny + r
            for pk in range(nz + 2 * r):
                if r <= pj < ny + r and r <= pk < nz + r:
                    continue
                plane[q, pj, pk] = plane[q, j, (pk - r) % nz + r]


@nb.njit(cache=True)
def gather_plane(buf, r, g, narrow, taps, ring, lo, w, out):
    """w P(dE/dn) of x-plane g from the difference rows of the ring of derivative planes
    (2 r + 1 planes, plane i at ring[i % (2 r + 1)]): the narrow or the tap gather."""
    span = 2 * r + 1
    if narrow:
        _plane_gradient_narrow(buf, r, g, ring[(g - 1) % span], ring[g % span], ring[(g + 1) % span], lo, w, out)
    else:
        planes = (ring[(g - 4) % span], ring[(g - 3) % span], ring[(g - 2) % span], ring[(g - 1) % span],
                  ring[g % span], ring[(g + 1) % span], ring[(g + 2) % span], ring[(g + 3) % span],
                  ring[(g + 4) % span])
        _plane_gradient(buf, r, g, taps, planes, lo, w, out)


@nb.njit(parallel=True, cache=True)
def _fused(buf, r, narrow, taps, fx, bx, fy, by, fz, bz, wx, wy, wz, c2, c4, periodic, w, gradient,
           store_density, rings, parts, density, out):
    """Energy pieces per x-plane (parts), density and (if ``gradient``) the tangent gradient
    in one sweep.  The x-planes are cut into one slab per ring (rings.shape[0], one per
    thread); a slab computes the derivative planes of its own x-planes and r on either side
    (a recomputed halo) into a ring of 2 r + 1 planes, and gathers the gradient of plane
    i - r as soon as plane i is done (r = 1 for the narrow one-site difference, else
    PAD_WIDTH), so the derivatives (18 values per site, the largest
    traffic of a two-pass form) stay in cache instead of travelling to main memory."""
    nx = buf.shape[1] - 2 * r
    slabs = rings.shape[0]
    span = 2 * r + 1
    lo = 0 if periodic else 1
    for t in nb.prange(slabs):
        i0 = t * nx // slabs
        i1 = (t + 1) * nx // slabs
        ring = rings[t]
        first, last = (i0 - r, i1 + r) if gradient else (i0, i1)
        for ip in range(first, last):
            plane = ring[ip % span]
            owned = i0 <= ip < i1
            if not periodic and (ip < 0 or ip >= nx):
                plane[:] = 0.0  # beyond a fixed border: no sites, no energy
            else:
                i = ip % nx
                if narrow:
                    pieces = _plane_derivatives_narrow(buf, r, i, fx, bx, fy, by, fz, bz, wx, wy, wz, c2, c4, plane,
                                                       density, store_density and owned)
                else:
                    pieces = _plane_derivatives(buf, r, i, taps, fx, bx, fy, by, fz, bz, wx, wy, wz, c2, c4, plane,
                                                density, store_density and owned)
                if owned:
                    for q in range(6):
                        parts[i, q] = pieces[q]
                if periodic:
                    _wrap_plane_frame(plane, r)
            g = ip - r
            if gradient and g >= i0 and lo <= g < nx - lo:
                gather_plane(buf, r, g, narrow, taps, ring, lo, w, out)


@nb.njit(parallel=True, cache=True)
def max_forward_gradient_sq(field, fx, fy, fz, periodic):
    """max over sites of sum_a |D+_a n|^2 with D+_a n = (n(x + e_a) - n(x)) f_a (f_a per
    site along axis a: 1 / h_a, or the stretched link factors over h_a); beyond the last
    site the vacuum e3 (fixed) or the wrapped field (periodic).  Used by the core thickness."""
    nx, ny, nz = field.shape[0], field.shape[1], field.shape[2]
    largest = np.zeros(nx)
    vacuum = np.array([0.0, 0.0, 1.0])
    for i in nb.prange(nx):
        best = 0.0
        iu = i + 1 if i + 1 < nx else 0
        for j in range(ny):
            ju = j + 1 if j + 1 < ny else 0
            for k in range(nz):
                ku = k + 1 if k + 1 < nz else 0
                total = 0.0
                for comp in range(3):
                    here = field[i, j, k, comp]
                    ax = field[iu, j, k, comp] if (i + 1 < nx or periodic) else vacuum[comp]
                    ay = field[i, ju, k, comp] if (j + 1 < ny or periodic) else vacuum[comp]
                    az = field[i, j, ku, comp] if (k + 1 < nz or periodic) else vacuum[comp]
                    dx, dy, dz = (ax - here) * fx[i], (ay - here) * fy[j], (az - here) * fz[k]
                    total += dx * dx + dy * dy + dz * dz
                best = max(best, total)
        largest[i] = best
    return largest.max()


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


def _factors(n, h, dtype, metric_axis):
    """Forward and backward difference factors and site weights along one axis."""
    inverse = 1.0 / h
    if metric_axis is None:
        ones = np.ones(n, dtype=dtype)
        return ones * dtype(inverse), ones * dtype(inverse), ones
    forward, backward, weights = metric_axis
    return ((np.asarray(forward) * inverse).astype(dtype), (np.asarray(backward) * inverse).astype(dtype),
            np.asarray(weights).astype(dtype))


_NO_GRADIENT = np.zeros((1, 1, 3))


def _run(field, spacing, periodic, taps, c2, c4, normalisation, out, gradient=True, metric=None,
         store_density=True):
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
    real = field.dtype.type
    narrow = tuple(taps) == NARROW_TAPS
    r = 1 if narrow else PAD_WIDTH
    per_axis = [_factors(n, h, real, None if metric is None else metric[a])
                for a, (n, h) in enumerate(zip(field.shape[:3], (hx, hy, hz)))]
    (fx, bx, wx), (fy, by, wy), (fz, bz, wz) = per_axis
    density = _buffer("density", (nx, ny, nz), field.dtype)
    padded_shape = (nx + 2 * r, ny + 2 * r, nz + 2 * r)
    buf = _buffer(("field", r), (3,) + padded_shape, field.dtype)
    slabs = max(1, min(nb.get_num_threads(), nx))
    rings = _buffer(("rings", periodic, r), (slabs, 2 * r + 1, 18) + padded_shape[1:], field.dtype, zero=True)
    _to_padded_planes(field, r, periodic, buf)
    _fused(buf, r, narrow, tuple(float(t) for t in taps), fx, bx, fy, by, fz, bz, wx, wy, wz, float(c2), float(c4),
           periodic, real(scale), gradient, store_density, rings, parts, density,
           out.reshape(nx, ny, 3 * nz) if gradient else _NO_GRADIENT.astype(real))
    pieces = scale * parts.sum(axis=0)
    return pieces, (normalisation * density.astype(np.float64) if store_density else None), out


def value_and_grad(field: np.ndarray, spacing, periodic: bool, taps, c2: float, c4: float,
                   normalisation: float, out: np.ndarray | None = None, metric=None):
    """Energy (float64) and tangent-projected gradient (the field's dtype, border zeroed
    on fixed boxes) of c2 * dirichlet + c4 * skyrme_faddeev; ``taps`` are the scheme's
    difference coefficients over `solitons.lattice.grid.TAP_OFFSETS` (`Stencil.taps`).  ``out``
    (the field's shape and dtype) receives the gradient when given: a relaxation reuses
    two buffers instead of asking the system for fresh pages at every evaluation.
    ``metric`` (stretched grids, see `solitons.model.energy.grid_metric`): metric[axis] =
    (forward difference factors, backward difference factors, site weights), 1-D arrays
    along that axis; None for a uniform grid."""
    pieces, _, out = _run(field, spacing, periodic, taps, c2, c4, normalisation, out, metric=metric,
                          store_density=False)
    return float(pieces.sum()), out


def energy_pieces(field: np.ndarray, spacing, periodic: bool, taps, c2: float, c4: float,
                  normalisation: float, metric=None):
    """The energy split as (E2 along x, y, z; E4 of the planes xy, xz, yz) and the
    normalised energy density per site (per unit physical volume; a copy).  The Derrick
    derivatives follow from the scaling of each piece (see `virial`)."""
    pieces, density, _ = _run(field, spacing, periodic, taps, c2, c4, normalisation, None,
                              gradient=False, metric=metric)
    return pieces, density


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
