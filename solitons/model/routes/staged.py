"""The staged numba route: energy, gradient, per-term energies, density and virial of any
model built from the built-in terms, on every scheme, grid kind, boundary and precision.

`solitons.model.routes.kernels` fuses the two terms of the plain model into one loop.  A correction
term would have to be fused into that loop as well, once per combination; instead each
row of sites (fixed x-plane i and row j, all k) goes through three stages:

1. ``_stage_row`` writes the row's local fields into a small scratch array (rows of
   length Nz, in L1 cache): the six one-sided differences (18 rows, the layout of the
   derivative planes of `solitons.model.routes.kernels`), n (3 rows) and, when a term asks for it, the
   Laplacian (3 rows) and its per-axis scaling parts (9 rows, for the virial).
2. The plain model's site algebra (`solitons.model.routes.kernels._site`) and then one row function
   per active correction term add the derivatives of w * coupling * density with respect
   to every local field into the row's derivative plane (rows 0-17 differences, each
   already times its difference factor, as the gather expects; 18-20 n, 21-23 Laplacian), the density into the density row, and return the term's energy and
   its per-axis virial piece ``Q_a = sum_sites w dens/d(local) . (scaling of local under
   h_a)``, so that h_a dE/dh_a = E - Q_a (derived: each difference along a carries 1/h_a,
   the Laplacian's axis-a part 1/h_a^2 (1/h_a for the stretched correction), the cell
   volume h_x h_y h_z).  A term's row function is independent of the others: adding a
   built-in term to this route is one record in `solitons.model.routes.fast_terms`, one row
   function and its branch, one test.
3. The difference rows are gathered into dE/dn by `solitons.model.routes.kernels._plane_gradient` (or its narrow form); the n and Laplacian
   rows by ``_plane_gradient_extra`` (the Laplacian with the transposed central stencil).

Terms the row functions do not know (user terms, a second term of a kind already taken)
come in as precomputed derivative rows from `solitons.model.routes.evaluators` (jax evaluates their
density pointwise on the staged local fields, ``stage_all``).

Octant averages: with f_a, b_a the forward and backward difference along axis a,
F_a = |f_a|^2, B_a = |b_a|^2, m_a = (F_a + B_a) / 2, M_a = f_a f_a^T + b_a b_a^T, the
average over the eight octants is, in closed form (derived; the tests compare with the
literal eight-octant average of `solitons.model.energy`):

- (dn . dn)^2:        sum_a (F_a^2 + B_a^2) / 2 + 2 sum_{a<b} m_a m_b
- sum_ij (d_i.d_j)^2: sum_a (F_a^2 + B_a^2) / 2 + (1/2) sum_{a<b} <M_a, M_b>
- n . curl n:         linear in d, so n . curl((f + b) / 2)
- sextic, log_quartic: the eight octants through the twelve axis pairs (``_pair_row``).
"""

from __future__ import annotations

import numba as nb
import numpy as np

from solitons.model.routes import fast_terms
from solitons.model.routes.kernels import _FAST, _site, _wrap_plane_frame, gather_plane

# the layout of the coefficient vector and the energy slots, from the records of the fast
# terms (c2, c4, then per extra kind its coupling and constants)
COEFFICIENTS, EXTRA_KINDS, _EXTRA_INDEX = fast_terms.COEFFICIENTS, fast_terms.EXTRA_KINDS, fast_terms.EXTRA_INDEX
# the positions the row loop reads by number (numba compiles them in): checked at import
_POTENTIAL_POWER, _LOG_CONSTANTS = 5, (10, 11, 12, 13)
if (COEFFICIENTS.index("potential_power") != _POTENTIAL_POWER
        or tuple(COEFFICIENTS.index(n) for n in ("log_c0", "log_c1", "log_scale4", "log_delta")) != _LOG_CONSTANTS
        or len(EXTRA_KINDS) != 7):
    raise ImportError("solitons.model.routes.fast_terms changed the coefficient layout: update the row loop "
                      "of solitons.model.routes.staged (_plane_staged) and its constant positions")
SLOTS = 6 + len(EXTRA_KINDS) + 3  # base pieces, extra energies, extra Q_a
LOCAL_ROWS, LAPLACIAN_ROWS = 21, 33  # staged rows without / with the Laplacian
DERIVATIVE_ROWS = 24
N_ROW, LAP_ROW, SCALE_ROW = 18, 21, 24
_EXTRA_INDEX = (2, 3, 4, 6, 7, 8, 9)  # EXTRA_KINDS -> position of the coupling in COEFFICIENTS


# ---- stage 1: local fields of one row ----

@nb.njit(cache=True, fastmath=_FAST, error_model="numpy")
def _stage_wide(buf, r, ci, cj, taps, ixf, ixb, iyf, iyb, fz, bz, loc):
    """n and the six one-sided differences of the wide stencils (r = PAD_WIDTH): one k loop
    per component over 1-D row views indexed from 0 (one fused loop instead of one per
    axis: 37 against 46 ns per site for the whole staged pass at 128^3, sixth order)."""
    nz = loc.shape[1]
    real = buf.dtype.type
    t0, t2, t3, t4, t5 = real(taps[0]), real(taps[2]), real(taps[3]), real(taps[4]), real(taps[5])
    for c in range(3):
        v = buf[c, ci, cj, r:r + nz]
        xp1, xm1 = buf[c, ci + 1, cj, r:r + nz], buf[c, ci - 1, cj, r:r + nz]
        xp2, xm2 = buf[c, ci + 2, cj, r:r + nz], buf[c, ci - 2, cj, r:r + nz]
        xp3, xm3 = buf[c, ci + 3, cj, r:r + nz], buf[c, ci - 3, cj, r:r + nz]
        xp4, xm4 = buf[c, ci + 4, cj, r:r + nz], buf[c, ci - 4, cj, r:r + nz]
        yp1, ym1 = buf[c, ci, cj + 1, r:r + nz], buf[c, ci, cj - 1, r:r + nz]
        yp2, ym2 = buf[c, ci, cj + 2, r:r + nz], buf[c, ci, cj - 2, r:r + nz]
        yp3, ym3 = buf[c, ci, cj + 3, r:r + nz], buf[c, ci, cj - 3, r:r + nz]
        yp4, ym4 = buf[c, ci, cj + 4, r:r + nz], buf[c, ci, cj - 4, r:r + nz]
        zp1, zm1 = buf[c, ci, cj, r + 1:r + 1 + nz], buf[c, ci, cj, r - 1:r - 1 + nz]
        zp2, zm2 = buf[c, ci, cj, r + 2:r + 2 + nz], buf[c, ci, cj, r - 2:r - 2 + nz]
        zp3, zm3 = buf[c, ci, cj, r + 3:r + 3 + nz], buf[c, ci, cj, r - 3:r - 3 + nz]
        zp4, zm4 = buf[c, ci, cj, r + 4:r + 4 + nz], buf[c, ci, cj, r - 4:r - 4 + nz]
        own = loc[N_ROW + c]
        fxr, bxr, fyr, byr, fzr, bzr = loc[c], loc[3 + c], loc[6 + c], loc[9 + c], loc[12 + c], loc[15 + c]
        for k in range(nz):
            n = v[k]
            own[k] = n
            fxr[k] = (t0 * (xm1[k] - n) + t2 * (xp1[k] - n) + t3 * (xp2[k] - n) + t4 * (xp3[k] - n)
                      + t5 * (xp4[k] - n)) * ixf
            bxr[k] = -(t0 * (xp1[k] - n) + t2 * (xm1[k] - n) + t3 * (xm2[k] - n) + t4 * (xm3[k] - n)
                       + t5 * (xm4[k] - n)) * ixb
            fyr[k] = (t0 * (ym1[k] - n) + t2 * (yp1[k] - n) + t3 * (yp2[k] - n) + t4 * (yp3[k] - n)
                      + t5 * (yp4[k] - n)) * iyf
            byr[k] = -(t0 * (yp1[k] - n) + t2 * (ym1[k] - n) + t3 * (ym2[k] - n) + t4 * (ym3[k] - n)
                       + t5 * (ym4[k] - n)) * iyb
            fzr[k] = (t0 * (zm1[k] - n) + t2 * (zp1[k] - n) + t3 * (zp2[k] - n) + t4 * (zp3[k] - n)
                      + t5 * (zp4[k] - n)) * fz[k]
            bzr[k] = -(t0 * (zp1[k] - n) + t2 * (zm1[k] - n) + t3 * (zm2[k] - n) + t4 * (zm3[k] - n)
                       + t5 * (zm4[k] - n)) * bz[k]


@nb.njit(cache=True, fastmath=_FAST, error_model="numpy")
def _stage_narrow(buf, r, ci, cj, ixf, ixb, iyf, iyb, fz, bz, loc):
    """`_stage_wide` for the one-site difference of the second-order scheme (r = 1)."""
    nz = loc.shape[1]
    for c in range(3):
        v = buf[c, ci, cj, r:r + nz]
        xp1, xm1 = buf[c, ci + 1, cj, r:r + nz], buf[c, ci - 1, cj, r:r + nz]
        yp1, ym1 = buf[c, ci, cj + 1, r:r + nz], buf[c, ci, cj - 1, r:r + nz]
        zp1, zm1 = buf[c, ci, cj, r + 1:r + 1 + nz], buf[c, ci, cj, r - 1:r - 1 + nz]
        own = loc[N_ROW + c]
        fxr, bxr, fyr, byr, fzr, bzr = loc[c], loc[3 + c], loc[6 + c], loc[9 + c], loc[12 + c], loc[15 + c]
        for k in range(nz):
            n = v[k]
            own[k] = n
            fxr[k] = (xp1[k] - n) * ixf
            bxr[k] = (n - xm1[k]) * ixb
            fyr[k] = (yp1[k] - n) * iyf
            byr[k] = (n - ym1[k]) * iyb
            fzr[k] = (zp1[k] - n) * fz[k]
            bzr[k] = (n - zm1[k]) * bz[k]


@nb.njit(cache=True, fastmath=_FAST, error_model="numpy")
def _stage_row(buf, r, ci, cj, taps, ixf, ixb, iyf, iyb, fz, bz, lap, lap_x, lap_y, lap_z, reach, loc):
    """loc[0:18] = differences (x+, x-, y+, y-, z+, z-; three components each), loc[18:21] =
    n; with ``lap``: loc[21:24] = sum_a sum_o s_a[o] n(x + o e_a) and loc[24 + 3a + c] the
    axis-a part scaled as h_a d/dh_a needs (see `laplacian_coefficients`).  lap_x (2, 7)
    holds the coefficients of this x-plane (row 0 the Laplacian, row 1 the virial scaling),
    lap_y (2, 7) of this row, lap_z (2, 7, Nz) per site."""
    nz = loc.shape[1]
    real = buf.dtype.type
    if r == 1:
        _stage_narrow(buf, r, ci, cj, ixf, ixb, iyf, iyb, fz, bz, loc)
    else:
        _stage_wide(buf, r, ci, cj, taps, ixf, ixb, iyf, iyb, fz, bz, loc)
    if not lap:
        return
    if reach == 3:
        _stage_laplacian_wide(buf, r, ci, cj, lap_x, lap_y, lap_z, loc)
        return
    for c in range(3):
        total = loc[LAP_ROW + c]
        for k in range(nz):
            total[k] = real(0.0)
        for axis in range(3):
            part = loc[SCALE_ROW + 3 * axis + c]
            for k in range(nz):
                part[k] = real(0.0)
            for o in range(-reach, reach + 1):
                if axis == 0:
                    values = buf[c, ci + o, cj, r:r + nz]
                    s, v = lap_x[0, o + 3], lap_x[1, o + 3]
                    for k in range(nz):
                        total[k] += s * values[k]
                        part[k] += v * values[k]
                elif axis == 1:
                    values = buf[c, ci, cj + o, r:r + nz]
                    s, v = lap_y[0, o + 3], lap_y[1, o + 3]
                    for k in range(nz):
                        total[k] += s * values[k]
                        part[k] += v * values[k]
                else:
                    values = buf[c, ci, cj, r + o:r + o + nz]
                    sz, vz = lap_z[0, o + 3], lap_z[1, o + 3]
                    for k in range(nz):
                        total[k] += sz[k] * values[k]
                        part[k] += vz[k] * values[k]


@nb.njit(cache=True, fastmath=_FAST, error_model="numpy")
def _stage_laplacian_wide(buf, r, ci, cj, lap_x, lap_y, lap_z, loc):
    """The Laplacian rows of `_stage_row` for the seven-point central stencils (reach 3),
    one fused k loop per component."""
    nz = loc.shape[1]
    sx0, sx1, sx2, sx3, sx4, sx5, sx6 = lap_x[0, 0], lap_x[0, 1], lap_x[0, 2], lap_x[0, 3], lap_x[0, 4], \
        lap_x[0, 5], lap_x[0, 6]
    vx0, vx1, vx2, vx3, vx4, vx5, vx6 = lap_x[1, 0], lap_x[1, 1], lap_x[1, 2], lap_x[1, 3], lap_x[1, 4], \
        lap_x[1, 5], lap_x[1, 6]
    sy0, sy1, sy2, sy3, sy4, sy5, sy6 = lap_y[0, 0], lap_y[0, 1], lap_y[0, 2], lap_y[0, 3], lap_y[0, 4], \
        lap_y[0, 5], lap_y[0, 6]
    vy0, vy1, vy2, vy3, vy4, vy5, vy6 = lap_y[1, 0], lap_y[1, 1], lap_y[1, 2], lap_y[1, 3], lap_y[1, 4], \
        lap_y[1, 5], lap_y[1, 6]
    sz0, sz1, sz2, sz3, sz4, sz5, sz6 = lap_z[0, 0], lap_z[0, 1], lap_z[0, 2], lap_z[0, 3], lap_z[0, 4], \
        lap_z[0, 5], lap_z[0, 6]
    vz0, vz1, vz2, vz3, vz4, vz5, vz6 = lap_z[1, 0], lap_z[1, 1], lap_z[1, 2], lap_z[1, 3], lap_z[1, 4], \
        lap_z[1, 5], lap_z[1, 6]
    for c in range(3):
        x0, x1, x2 = buf[c, ci - 3, cj, r:r + nz], buf[c, ci - 2, cj, r:r + nz], buf[c, ci - 1, cj, r:r + nz]
        x3 = buf[c, ci, cj, r:r + nz]
        x4, x5, x6 = buf[c, ci + 1, cj, r:r + nz], buf[c, ci + 2, cj, r:r + nz], buf[c, ci + 3, cj, r:r + nz]
        y0, y1, y2 = buf[c, ci, cj - 3, r:r + nz], buf[c, ci, cj - 2, r:r + nz], buf[c, ci, cj - 1, r:r + nz]
        y4, y5, y6 = buf[c, ci, cj + 1, r:r + nz], buf[c, ci, cj + 2, r:r + nz], buf[c, ci, cj + 3, r:r + nz]
        z0, z1, z2 = buf[c, ci, cj, r - 3:r - 3 + nz], buf[c, ci, cj, r - 2:r - 2 + nz], \
            buf[c, ci, cj, r - 1:r - 1 + nz]
        z4, z5, z6 = buf[c, ci, cj, r + 1:r + 1 + nz], buf[c, ci, cj, r + 2:r + 2 + nz], \
            buf[c, ci, cj, r + 3:r + 3 + nz]
        total, px, py, pz = loc[LAP_ROW + c], loc[SCALE_ROW + c], loc[SCALE_ROW + 3 + c], loc[SCALE_ROW + 6 + c]
        for k in range(nz):
            n = x3[k]
            ax = sx0 * x0[k] + sx1 * x1[k] + sx2 * x2[k] + sx3 * n + sx4 * x4[k] + sx5 * x5[k] + sx6 * x6[k]
            ay = sy0 * y0[k] + sy1 * y1[k] + sy2 * y2[k] + sy3 * n + sy4 * y4[k] + sy5 * y5[k] + sy6 * y6[k]
            az = (sz0[k] * z0[k] + sz1[k] * z1[k] + sz2[k] * z2[k] + sz3[k] * n + sz4[k] * z4[k] + sz5[k] * z5[k]
                  + sz6[k] * z6[k])
            total[k] = ax + ay + az
            px[k] = vx0 * x0[k] + vx1 * x1[k] + vx2 * x2[k] + vx3 * n + vx4 * x4[k] + vx5 * x5[k] + vx6 * x6[k]
            py[k] = vy0 * y0[k] + vy1 * y1[k] + vy2 * y2[k] + vy3 * n + vy4 * y4[k] + vy5 * y5[k] + vy6 * y6[k]
            pz[k] = (vz0[k] * z0[k] + vz1[k] * z1[k] + vz2[k] * z2[k] + vz3[k] * n + vz4[k] * z4[k]
                     + vz5[k] * z5[k] + vz6[k] * z6[k])


# ---- stage 2: row functions of the correction terms ----
# Each adds w * coupling * d(density)/d(local) into plane[q, cj, r:] and coupling * density
# into dens, and returns (energy sum of w * coupling * density, Q_x, Q_y, Q_z).

@nb.njit(cache=True, fastmath=_FAST, error_model="numpy")
def _dirichlet_squared_row(loc, plane, cj, r, dens, wrow, c, ixf, ixb, iyf, iyb, fz, bz):
    real = loc.dtype.type
    c, half, two = real(c), real(0.5), real(2.0)
    fx0, fx1, fx2, bx0, bx1, bx2 = loc[0], loc[1], loc[2], loc[3], loc[4], loc[5]
    fy0, fy1, fy2, by0, by1, by2 = loc[6], loc[7], loc[8], loc[9], loc[10], loc[11]
    fz0, fz1, fz2, bz0, bz1, bz2 = loc[12], loc[13], loc[14], loc[15], loc[16], loc[17]
    g0, g1, g2, g3, g4, g5 = (plane[0, cj, r:], plane[1, cj, r:], plane[2, cj, r:], plane[3, cj, r:],
                              plane[4, cj, r:], plane[5, cj, r:])
    g6, g7, g8, g9, g10, g11 = (plane[6, cj, r:], plane[7, cj, r:], plane[8, cj, r:], plane[9, cj, r:],
                                plane[10, cj, r:], plane[11, cj, r:])
    g12, g13, g14, g15, g16, g17 = (plane[12, cj, r:], plane[13, cj, r:], plane[14, cj, r:], plane[15, cj, r:],
                                    plane[16, cj, r:], plane[17, cj, r:])
    e = qx = qy = qz = real(0.0)
    for k in range(wrow.shape[0]):
        w = wrow[k]
        ffx = fx0[k] * fx0[k] + fx1[k] * fx1[k] + fx2[k] * fx2[k]
        bbx = bx0[k] * bx0[k] + bx1[k] * bx1[k] + bx2[k] * bx2[k]
        ffy = fy0[k] * fy0[k] + fy1[k] * fy1[k] + fy2[k] * fy2[k]
        bby = by0[k] * by0[k] + by1[k] * by1[k] + by2[k] * by2[k]
        ffz = fz0[k] * fz0[k] + fz1[k] * fz1[k] + fz2[k] * fz2[k]
        bbz = bz0[k] * bz0[k] + bz1[k] * bz1[k] + bz2[k] * bz2[k]
        mx, my, mz = half * (ffx + bbx), half * (ffy + bby), half * (ffz + bbz)
        rho = c * (half * (ffx * ffx + bbx * bbx + ffy * ffy + bby * bby + ffz * ffz + bbz * bbz)
                   + two * (mx * my + mx * mz + my * mz))
        dens[k] += rho
        e += w * rho
        cw = two * c * w
        afx, abx = cw * (ffx + my + mz), cw * (bbx + my + mz)
        afy, aby = cw * (ffy + mx + mz), cw * (bby + mx + mz)
        afz, abz = cw * (ffz + mx + my), cw * (bbz + mx + my)
        sfx, sbx, sfy, sby, sfz, sbz = afx * ixf, abx * ixb, afy * iyf, aby * iyb, afz * fz[k], abz * bz[k]
        g0[k] += sfx * fx0[k]
        g1[k] += sfx * fx1[k]
        g2[k] += sfx * fx2[k]
        g3[k] += sbx * bx0[k]
        g4[k] += sbx * bx1[k]
        g5[k] += sbx * bx2[k]
        g6[k] += sfy * fy0[k]
        g7[k] += sfy * fy1[k]
        g8[k] += sfy * fy2[k]
        g9[k] += sby * by0[k]
        g10[k] += sby * by1[k]
        g11[k] += sby * by2[k]
        g12[k] += sfz * fz0[k]
        g13[k] += sfz * fz1[k]
        g14[k] += sfz * fz2[k]
        g15[k] += sbz * bz0[k]
        g16[k] += sbz * bz1[k]
        g17[k] += sbz * bz2[k]
        qx += afx * ffx + abx * bbx
        qy += afy * ffy + aby * bby
        qz += afz * ffz + abz * bbz
    return e, qx, qy, qz


@nb.njit(cache=True, fastmath=_FAST, error_model="numpy")
def _strain_squared_row(loc, plane, cj, r, dens, wrow, c, ixf, ixb, iyf, iyb, fz, bz):
    real = loc.dtype.type
    c, half, two = real(c), real(0.5), real(2.0)
    fx0, fx1, fx2, bx0, bx1, bx2 = loc[0], loc[1], loc[2], loc[3], loc[4], loc[5]
    fy0, fy1, fy2, by0, by1, by2 = loc[6], loc[7], loc[8], loc[9], loc[10], loc[11]
    fz0, fz1, fz2, bz0, bz1, bz2 = loc[12], loc[13], loc[14], loc[15], loc[16], loc[17]
    g0, g1, g2, g3, g4, g5 = (plane[0, cj, r:], plane[1, cj, r:], plane[2, cj, r:], plane[3, cj, r:],
                              plane[4, cj, r:], plane[5, cj, r:])
    g6, g7, g8, g9, g10, g11 = (plane[6, cj, r:], plane[7, cj, r:], plane[8, cj, r:], plane[9, cj, r:],
                                plane[10, cj, r:], plane[11, cj, r:])
    g12, g13, g14, g15, g16, g17 = (plane[12, cj, r:], plane[13, cj, r:], plane[14, cj, r:], plane[15, cj, r:],
                                    plane[16, cj, r:], plane[17, cj, r:])
    e = qx = qy = qz = real(0.0)
    for k in range(wrow.shape[0]):
        w = wrow[k]
        a0, a1, a2, b0, b1, b2 = fx0[k], fx1[k], fx2[k], bx0[k], bx1[k], bx2[k]
        x00, x11, x22 = a0 * a0 + b0 * b0, a1 * a1 + b1 * b1, a2 * a2 + b2 * b2
        x01, x02, x12 = a0 * a1 + b0 * b1, a0 * a2 + b0 * b2, a1 * a2 + b1 * b2
        ffx, bbx = a0 * a0 + a1 * a1 + a2 * a2, b0 * b0 + b1 * b1 + b2 * b2
        a0, a1, a2, b0, b1, b2 = fy0[k], fy1[k], fy2[k], by0[k], by1[k], by2[k]
        y00, y11, y22 = a0 * a0 + b0 * b0, a1 * a1 + b1 * b1, a2 * a2 + b2 * b2
        y01, y02, y12 = a0 * a1 + b0 * b1, a0 * a2 + b0 * b2, a1 * a2 + b1 * b2
        ffy, bby = a0 * a0 + a1 * a1 + a2 * a2, b0 * b0 + b1 * b1 + b2 * b2
        a0, a1, a2, b0, b1, b2 = fz0[k], fz1[k], fz2[k], bz0[k], bz1[k], bz2[k]
        z00, z11, z22 = a0 * a0 + b0 * b0, a1 * a1 + b1 * b1, a2 * a2 + b2 * b2
        z01, z02, z12 = a0 * a1 + b0 * b1, a0 * a2 + b0 * b2, a1 * a2 + b1 * b2
        ffz, bbz = a0 * a0 + a1 * a1 + a2 * a2, b0 * b0 + b1 * b1 + b2 * b2
        xy = x00 * y00 + x11 * y11 + x22 * y22 + two * (x01 * y01 + x02 * y02 + x12 * y12)
        xz = x00 * z00 + x11 * z11 + x22 * z22 + two * (x01 * z01 + x02 * z02 + x12 * z12)
        yz = y00 * z00 + y11 * z11 + y22 * z22 + two * (y01 * z01 + y02 * z02 + y12 * z12)
        sq = ffx * ffx + bbx * bbx + ffy * ffy + bby * bby + ffz * ffz + bbz * bbz
        rho = c * half * (sq + xy + xz + yz)
        dens[k] += rho
        e += w * rho
        cw = c * w
        # d/df_a = 2 F_a f_a + (M_b + M_c) f_a, times c w
        k00, k11, k22 = cw * (y00 + z00), cw * (y11 + z11), cw * (y22 + z22)
        k01, k02, k12 = cw * (y01 + z01), cw * (y02 + z02), cw * (y12 + z12)
        sf, sb = two * cw * ffx, two * cw * bbx
        a0, a1, a2, b0, b1, b2 = fx0[k], fx1[k], fx2[k], bx0[k], bx1[k], bx2[k]
        tf, tb = ixf, ixb
        g0[k] += tf * (sf * a0 + k00 * a0 + k01 * a1 + k02 * a2)
        g1[k] += tf * (sf * a1 + k01 * a0 + k11 * a1 + k12 * a2)
        g2[k] += tf * (sf * a2 + k02 * a0 + k12 * a1 + k22 * a2)
        g3[k] += tb * (sb * b0 + k00 * b0 + k01 * b1 + k02 * b2)
        g4[k] += tb * (sb * b1 + k01 * b0 + k11 * b1 + k12 * b2)
        g5[k] += tb * (sb * b2 + k02 * b0 + k12 * b1 + k22 * b2)
        k00, k11, k22 = cw * (x00 + z00), cw * (x11 + z11), cw * (x22 + z22)
        k01, k02, k12 = cw * (x01 + z01), cw * (x02 + z02), cw * (x12 + z12)
        sf, sb = two * cw * ffy, two * cw * bby
        a0, a1, a2, b0, b1, b2 = fy0[k], fy1[k], fy2[k], by0[k], by1[k], by2[k]
        tf, tb = iyf, iyb
        g6[k] += tf * (sf * a0 + k00 * a0 + k01 * a1 + k02 * a2)
        g7[k] += tf * (sf * a1 + k01 * a0 + k11 * a1 + k12 * a2)
        g8[k] += tf * (sf * a2 + k02 * a0 + k12 * a1 + k22 * a2)
        g9[k] += tb * (sb * b0 + k00 * b0 + k01 * b1 + k02 * b2)
        g10[k] += tb * (sb * b1 + k01 * b0 + k11 * b1 + k12 * b2)
        g11[k] += tb * (sb * b2 + k02 * b0 + k12 * b1 + k22 * b2)
        k00, k11, k22 = cw * (x00 + y00), cw * (x11 + y11), cw * (x22 + y22)
        k01, k02, k12 = cw * (x01 + y01), cw * (x02 + y02), cw * (x12 + y12)
        sf, sb = two * cw * ffz, two * cw * bbz
        a0, a1, a2, b0, b1, b2 = fz0[k], fz1[k], fz2[k], bz0[k], bz1[k], bz2[k]
        tf, tb = fz[k], bz[k]
        g12[k] += tf * (sf * a0 + k00 * a0 + k01 * a1 + k02 * a2)
        g13[k] += tf * (sf * a1 + k01 * a0 + k11 * a1 + k12 * a2)
        g14[k] += tf * (sf * a2 + k02 * a0 + k12 * a1 + k22 * a2)
        g15[k] += tb * (sb * b0 + k00 * b0 + k01 * b1 + k02 * b2)
        g16[k] += tb * (sb * b1 + k01 * b0 + k11 * b1 + k12 * b2)
        g17[k] += tb * (sb * b2 + k02 * b0 + k12 * b1 + k22 * b2)
        # Q_a = 2 (F_a^2 + B_a^2) + <M_a, M_b> + <M_a, M_c>, times c w
        qx += cw * (two * (ffx * ffx + bbx * bbx) + xy + xz)
        qy += cw * (two * (ffy * ffy + bby * bby) + xy + yz)
        qz += cw * (two * (ffz * ffz + bbz * bbz) + xz + yz)
    return e, qx, qy, qz


@nb.njit(cache=True, fastmath=_FAST, error_model="numpy")
def _potential_row(loc, plane, cj, r, dens, wrow, c, power):
    """coupling mass^2 max(1 - n3, 0)^power: no derivatives of n, so Q_a = 0."""
    real = loc.dtype.type
    c, p, one, zero = real(c), real(power), real(1.0), real(0.0)
    n2 = loc[N_ROW + 2]
    g = plane[N_ROW + 2, cj, r:]
    e = real(0.0)
    if power == 1.0:
        for k in range(wrow.shape[0]):
            t = max(one - n2[k], zero)
            rho = c * t
            dens[k] += rho
            e += wrow[k] * rho
            g[k] -= c * wrow[k] if t > zero else zero
    else:
        for k in range(wrow.shape[0]):
            t = max(one - n2[k], zero)
            rho = c * t ** p
            dens[k] += rho
            e += wrow[k] * rho
            g[k] -= c * wrow[k] * p * t ** (p - one) if t > zero else zero
    return e, zero, zero, zero


@nb.njit(cache=True, fastmath=_FAST, error_model="numpy")
def _laplacian_squared_row(loc, plane, cj, r, dens, wrow, c):
    real = loc.dtype.type
    c, two = real(c), real(2.0)
    l0, l1, l2 = loc[LAP_ROW], loc[LAP_ROW + 1], loc[LAP_ROW + 2]
    sx0, sx1, sx2 = loc[SCALE_ROW], loc[SCALE_ROW + 1], loc[SCALE_ROW + 2]
    sy0, sy1, sy2 = loc[SCALE_ROW + 3], loc[SCALE_ROW + 4], loc[SCALE_ROW + 5]
    sz0, sz1, sz2 = loc[SCALE_ROW + 6], loc[SCALE_ROW + 7], loc[SCALE_ROW + 8]
    g0, g1, g2 = plane[LAP_ROW, cj, r:], plane[LAP_ROW + 1, cj, r:], plane[LAP_ROW + 2, cj, r:]
    e = qx = qy = qz = real(0.0)
    for k in range(wrow.shape[0]):
        rho = c * (l0[k] * l0[k] + l1[k] * l1[k] + l2[k] * l2[k])
        dens[k] += rho
        e += wrow[k] * rho
        a = two * c * wrow[k]
        a0, a1, a2 = a * l0[k], a * l1[k], a * l2[k]
        g0[k] += a0
        g1[k] += a1
        g2[k] += a2
        qx += a0 * sx0[k] + a1 * sx1[k] + a2 * sx2[k]
        qy += a0 * sy0[k] + a1 * sy1[k] + a2 * sy2[k]
        qz += a0 * sz0[k] + a1 * sz1[k] + a2 * sz2[k]
    return e, qx, qy, qz


@nb.njit(cache=True, fastmath=_FAST, error_model="numpy")
def _chiral_row(loc, plane, cj, r, dens, wrow, c, ixf, ixb, iyf, iyb, fz, bz):
    """n . curl n; linear in the differences, so the octant average is n . curl of the
    mean difference (f_a + b_a) / 2."""
    real = loc.dtype.type
    c, half = real(c), real(0.5)
    fx1, fx2, bx1, bx2 = loc[1], loc[2], loc[4], loc[5]
    fy0, fy2, by0, by2 = loc[6], loc[8], loc[9], loc[11]
    fz0, fz1, bz0, bz1 = loc[12], loc[13], loc[15], loc[16]
    n0, n1, n2 = loc[N_ROW], loc[N_ROW + 1], loc[N_ROW + 2]
    g1, g2, g4, g5 = plane[1, cj, r:], plane[2, cj, r:], plane[4, cj, r:], plane[5, cj, r:]
    g6, g8, g9, g11 = plane[6, cj, r:], plane[8, cj, r:], plane[9, cj, r:], plane[11, cj, r:]
    g12, g13, g15, g16 = plane[12, cj, r:], plane[13, cj, r:], plane[15, cj, r:], plane[16, cj, r:]
    gn0, gn1, gn2 = plane[N_ROW, cj, r:], plane[N_ROW + 1, cj, r:], plane[N_ROW + 2, cj, r:]
    e = qx = qy = qz = real(0.0)
    for k in range(wrow.shape[0]):
        ax1, ax2 = half * (fx1[k] + bx1[k]), half * (fx2[k] + bx2[k])
        ay0, ay2 = half * (fy0[k] + by0[k]), half * (fy2[k] + by2[k])
        az0, az1 = half * (fz0[k] + bz0[k]), half * (fz1[k] + bz1[k])
        m0, m1, m2 = n0[k], n1[k], n2[k]
        curl0, curl1, curl2 = ay2 - az1, az0 - ax2, ax1 - ay0
        rho = c * (m0 * curl0 + m1 * curl1 + m2 * curl2)
        dens[k] += rho
        e += wrow[k] * rho
        cw = c * wrow[k]
        gn0[k] += cw * curl0
        gn1[k] += cw * curl1
        gn2[k] += cw * curl2
        h = half * cw
        # d rho / d dbar_x = (0, n2, -n1), d/d dbar_y = (-n2, 0, n0), d/d dbar_z = (n1, -n0, 0)
        hf, hb = h * ixf, h * ixb
        g1[k] += hf * m2
        g2[k] -= hf * m1
        g4[k] += hb * m2
        g5[k] -= hb * m1
        hf, hb = h * iyf, h * iyb
        g6[k] -= hf * m2
        g8[k] += hf * m0
        g9[k] -= hb * m2
        g11[k] += hb * m0
        hf, hb = h * fz[k], h * bz[k]
        g12[k] += hf * m1
        g13[k] -= hf * m0
        g15[k] += hb * m1
        g16[k] -= hb * m0
        qx += cw * (ax1 * m2 - ax2 * m1)
        qy += cw * (ay2 * m0 - ay0 * m2)
        qz += cw * (az0 * m1 - az1 * m0)
    return e, qx, qy, qz


# Octant terms through the twelve axis pairs.  The octant o = (s_x, s_y, s_z) takes one
# difference per axis, and H^2_o = sum_{a<b} |d_a x d_b|^2 = C_xy[s_x s_y] + C_xz[s_x s_z]
# + C_yz[s_y s_z] with C[st] = |d_s|^2 |d_t|^2 - (d_s . d_t)^2: twelve pair values give all
# eight H^2_o.  A term phi(H^2_o) (+ H^2_o D_o for the sextic, D_o = sum_a |d_a|^2) has
# d/d d_s = sum over the pairs (s, t) of W_st dC_st/dd_s, dC_st/dd_s = 2 (|d_t|^2 d_s -
# (d_s . d_t) d_t), W_st = the sum of phi'_o over the two octants that hold the pair
# (derived; the tests compare with jax autodiff of the literal eight-octant average).
# Letters: a, b = f_x, b_x; p, q = f_y, b_y; u, v = f_z, b_z; octants in the order
# (a p u), (a p v), (a q u), (a q v), (b p u), (b p v), (b q u), (b q v).


@nb.njit(inline="always", fastmath=_FAST, error_model="numpy")
def _pair_grad(weight_sum, d0, d1, d2, w1, dot1, e1, w2, dot2, e2, w3, dot3, e3, w4, dot4, e4):
    """sum_t W_st (|d_t|^2 d_s - (d_s . d_t) d_t) over the four partners t of d_s, with
    weight_sum = sum_t W_st |d_t|^2 (+ the sextic's H^2 sum); e_t = (t0, t1, t2)."""
    c1, c2, c3, c4 = w1 * dot1, w2 * dot2, w3 * dot3, w4 * dot4
    return (weight_sum * d0 - c1 * e1[0] - c2 * e2[0] - c3 * e3[0] - c4 * e4[0],
            weight_sum * d1 - c1 * e1[1] - c2 * e2[1] - c3 * e3[1] - c4 * e4[1],
            weight_sum * d2 - c1 * e1[2] - c2 * e2[2] - c3 * e3[2] - c4 * e4[2])


@nb.njit(inline="always", fastmath=_FAST, error_model="numpy")
def _pair_h2(a, b, p, q, u, v):
    """Norms, the twelve pair dots and the eight H^2_o of one site (letters as above)."""
    na = a[0] * a[0] + a[1] * a[1] + a[2] * a[2]
    nb_ = b[0] * b[0] + b[1] * b[1] + b[2] * b[2]
    np_ = p[0] * p[0] + p[1] * p[1] + p[2] * p[2]
    nq = q[0] * q[0] + q[1] * q[1] + q[2] * q[2]
    nu = u[0] * u[0] + u[1] * u[1] + u[2] * u[2]
    nv = v[0] * v[0] + v[1] * v[1] + v[2] * v[2]
    ap = a[0] * p[0] + a[1] * p[1] + a[2] * p[2]
    aq = a[0] * q[0] + a[1] * q[1] + a[2] * q[2]
    bp = b[0] * p[0] + b[1] * p[1] + b[2] * p[2]
    bq = b[0] * q[0] + b[1] * q[1] + b[2] * q[2]
    au = a[0] * u[0] + a[1] * u[1] + a[2] * u[2]
    av = a[0] * v[0] + a[1] * v[1] + a[2] * v[2]
    bu = b[0] * u[0] + b[1] * u[1] + b[2] * u[2]
    bv = b[0] * v[0] + b[1] * v[1] + b[2] * v[2]
    pu = p[0] * u[0] + p[1] * u[1] + p[2] * u[2]
    pv = p[0] * v[0] + p[1] * v[1] + p[2] * v[2]
    qu = q[0] * u[0] + q[1] * u[1] + q[2] * u[2]
    qv = q[0] * v[0] + q[1] * v[1] + q[2] * v[2]
    cap, caq, cbp, cbq = na * np_ - ap * ap, na * nq - aq * aq, nb_ * np_ - bp * bp, nb_ * nq - bq * bq
    cau, cav, cbu, cbv = na * nu - au * au, na * nv - av * av, nb_ * nu - bu * bu, nb_ * nv - bv * bv
    cpu, cpv, cqu, cqv = np_ * nu - pu * pu, np_ * nv - pv * pv, nq * nu - qu * qu, nq * nv - qv * qv
    hs = (cap + cau + cpu, cap + cav + cpv, caq + cau + cqu, caq + cav + cqv,
          cbp + cbu + cpu, cbp + cbv + cpv, cbq + cbu + cqu, cbq + cbv + cqv)
    return (na, nb_, np_, nq, nu, nv), (ap, aq, bp, bq, au, av, bu, bv, pu, pv, qu, qv), hs


@nb.njit(cache=True, fastmath=_FAST, error_model="numpy")
def _sextic_row(loc, plane, cj, r, dens, wrow, c, constants, logs, ixf, ixb, iyf, iyb, fz, bz):
    return _pair_row(loc, plane, cj, r, dens, wrow, c, 0, constants, logs, ixf, ixb, iyf, iyb, fz, bz)


@nb.njit(cache=True, fastmath=_FAST, error_model="numpy")
def _log_quartic_row(loc, plane, cj, r, dens, wrow, c, constants, logs, ixf, ixb, iyf, iyb, fz, bz):
    _row_logarithms(loc, constants, logs)
    return _pair_row(loc, plane, cj, r, dens, wrow, c, 1, constants, logs, ixf, ixb, iyf, iyb, fz, bz)


_LN2_HI, _LN2_LO = 6.93147180369123816490e-01, 1.90821492927058770002e-10  # fdlibm's split of ln 2
_MANTISSA, _ONE_BITS = 0x000FFFFFFFFFFFFF, 0x3FF0000000000000


# ln m = 2 s + s z P(z), z = s^2 <= 0.0294: P is the degree-6 Chebyshev least-squares fit
# of the atanh series 2 (1/3 + z/5 + z^2/7 + ...) on [0, 0.0294] (4001 Chebyshev nodes,
# numpy.polynomial; computed for this module): largest error 6e-16 in P, below 1e-17
# relative in ln m.  Seven terms where the series itself needs twelve.
_P0, _P1, _P2, _P3 = 0.6666666666666671, 0.39999999999869174, 0.2857142863543568, 0.22222209893871528
_P4, _P5, _P6 = 0.18182967142341924, 0.15329392430696023, 0.14642966939012375


@nb.njit(cache=True, fastmath=_FAST, error_model="numpy")
def vector_log(values, work, exponents):
    """In place: values[k] = ln(values[k]) for positive normal float64 values, in loops
    that vectorise (libm's log is a scalar call).  x = 2^e m with m in [sqrt(1/2),
    sqrt(2)); ln m = 2 atanh(s) = 2 s + s z P(z), s = (m - 1) / (m + 1), |s| < 0.172,
    z = s^2, P the fitted polynomial above; ln 2 split in two parts (fdlibm's constants).  Within 4 units in the last place of np.log
    (tested).  ``work`` (int64) and ``exponents`` (float64): rows as long, distinct from
    ``values``."""
    bits = values.view(np.int64)
    n = values.shape[0]
    for k in range(n):
        b = bits[k]
        work[k] = (b & _MANTISSA) | _ONE_BITS
        exponents[k] = np.float64((b >> 52) - 1023)
    mantissa = work.view(np.float64)
    for k in range(n):
        m = mantissa[k]
        e = exponents[k]
        big = m > 1.4142135623730951
        m = m * 0.5 if big else m
        e = e + 1.0 if big else e
        s = (m - 1.0) / (m + 1.0)
        z = s * s
        w = z * z
        tail = z * (_P0 + w * (_P2 + w * (_P4 + w * _P6))) + w * (_P1 + w * (_P3 + w * _P5))
        values[k] = e * _LN2_HI + (s * (2.0 + tail) + e * _LN2_LO)


@nb.njit(cache=True, fastmath=_FAST, error_model="numpy")
def _row_logarithms(loc, constants, logs):
    """logs[o, k] = ln((H^2 + delta m4) / m4) of octant o (the order of `_pair_row`);
    logs (10, Nz) float64, rows 8 and 9 work space."""
    c0, c1, m4, dm4, two = constants
    nz = logs.shape[1]
    fx0, fx1, fx2, bx0, bx1, bx2 = loc[0], loc[1], loc[2], loc[3], loc[4], loc[5]
    fy0, fy1, fy2, by0, by1, by2 = loc[6], loc[7], loc[8], loc[9], loc[10], loc[11]
    fz0, fz1, fz2, bz0, bz1, bz2 = loc[12], loc[13], loc[14], loc[15], loc[16], loc[17]
    inverse = 1.0 / np.float64(m4)
    for k in range(nz):
        hs = _pair_h2((fx0[k], fx1[k], fx2[k]), (bx0[k], bx1[k], bx2[k]), (fy0[k], fy1[k], fy2[k]),
                      (by0[k], by1[k], by2[k]), (fz0[k], fz1[k], fz2[k]), (bz0[k], bz1[k], bz2[k]))[2]
        logs[0, k] = (hs[0] + dm4) * inverse
        logs[1, k] = (hs[1] + dm4) * inverse
        logs[2, k] = (hs[2] + dm4) * inverse
        logs[3, k] = (hs[3] + dm4) * inverse
        logs[4, k] = (hs[4] + dm4) * inverse
        logs[5, k] = (hs[5] + dm4) * inverse
        logs[6, k] = (hs[6] + dm4) * inverse
        logs[7, k] = (hs[7] + dm4) * inverse
    work = logs[8].view(np.int64)
    for o in range(8):
        vector_log(logs[o], work, logs[9])


@nb.njit(inline="always", fastmath=_FAST, error_model="numpy")
def _pair_row(loc, plane, cj, r, dens, wrow, c, mode, constants, logs, ixf, ixb, iyf, iyb, fz, bz):
    """Term ``mode`` (0 sextic H^2 D, 1 log_quartic H^2 (c0 + c1 ln((H^2 + delta m4) / m4)),
    its logarithms in ``logs`` from `_row_logarithms`) averaged over the eight octants,
    through the twelve axis pairs (see above).  ``mode`` is a constant in each caller, so
    after inlining the branches fold away."""
    real = loc.dtype.type
    c0, c1, m4, dm4, two = constants
    eighth = real(0.125) * real(c)
    fx0, fx1, fx2, bx0, bx1, bx2 = loc[0], loc[1], loc[2], loc[3], loc[4], loc[5]
    fy0, fy1, fy2, by0, by1, by2 = loc[6], loc[7], loc[8], loc[9], loc[10], loc[11]
    fz0, fz1, fz2, bz0, bz1, bz2 = loc[12], loc[13], loc[14], loc[15], loc[16], loc[17]
    g0, g1, g2, g3, g4, g5 = (plane[0, cj, r:], plane[1, cj, r:], plane[2, cj, r:], plane[3, cj, r:],
                              plane[4, cj, r:], plane[5, cj, r:])
    g6, g7, g8, g9, g10, g11 = (plane[6, cj, r:], plane[7, cj, r:], plane[8, cj, r:], plane[9, cj, r:],
                                plane[10, cj, r:], plane[11, cj, r:])
    g12, g13, g14, g15, g16, g17 = (plane[12, cj, r:], plane[13, cj, r:], plane[14, cj, r:], plane[15, cj, r:],
                                    plane[16, cj, r:], plane[17, cj, r:])
    e = qx = qy = qz = real(0.0)
    zero = real(0.0)
    for k in range(wrow.shape[0]):
        a, b = (fx0[k], fx1[k], fx2[k]), (bx0[k], bx1[k], bx2[k])
        p, q = (fy0[k], fy1[k], fy2[k]), (by0[k], by1[k], by2[k])
        u, v = (fz0[k], fz1[k], fz2[k]), (bz0[k], bz1[k], bz2[k])
        (na, nb_, np_, nq, nu, nv), (ap, aq, bp, bq, au, av, bu, bv, pu, pv, qu, qv), hs = _pair_h2(a, b, p, q, u, v)
        h1, h2, h3, h4, h5, h6, h7, h8 = hs
        if mode == 0:  # rho_o = H^2_o D_o: phi'_o = D_o, and D_o's own derivative 2 H^2_o d
            f1, f2, f3, f4 = na + np_ + nu, na + np_ + nv, na + nq + nu, na + nq + nv
            f5, f6, f7, f8 = nb_ + np_ + nu, nb_ + np_ + nv, nb_ + nq + nu, nb_ + nq + nv
            rho = h1 * f1 + h2 * f2 + h3 * f3 + h4 * f4 + h5 * f5 + h6 * f6 + h7 * f7 + h8 * f8
            sa, sb, sp = h1 + h2 + h3 + h4, h5 + h6 + h7 + h8, h1 + h2 + h5 + h6
            sq, su, sv = h3 + h4 + h7 + h8, h1 + h3 + h5 + h7, h2 + h4 + h6 + h8
        else:  # rho_o = H^2_o bracket_o, phi'_o = bracket_o + c1 H^2_o / (H^2_o + delta m4)
            k1, k2, k3, k4 = c0 + c1 * logs[0, k], c0 + c1 * logs[1, k], c0 + c1 * logs[2, k], c0 + c1 * logs[3, k]
            k5, k6, k7, k8 = c0 + c1 * logs[4, k], c0 + c1 * logs[5, k], c0 + c1 * logs[6, k], c0 + c1 * logs[7, k]
            rho = h1 * k1 + h2 * k2 + h3 * k3 + h4 * k4 + h5 * k5 + h6 * k6 + h7 * k7 + h8 * k8
            f1, f2 = k1 + c1 * h1 / (h1 + dm4), k2 + c1 * h2 / (h2 + dm4)
            f3, f4 = k3 + c1 * h3 / (h3 + dm4), k4 + c1 * h4 / (h4 + dm4)
            f5, f6 = k5 + c1 * h5 / (h5 + dm4), k6 + c1 * h6 / (h6 + dm4)
            f7, f8 = k7 + c1 * h7 / (h7 + dm4), k8 + c1 * h8 / (h8 + dm4)
            sa = sb = sp = sq = su = sv = zero
        rho = eighth * rho
        dens[k] += rho
        w = wrow[k]
        e += w * rho
        s = two * eighth * w
        # pair weights: the two octants holding each pair
        wap, waq, wbp, wbq = f1 + f2, f3 + f4, f5 + f6, f7 + f8
        wau, wav, wbu, wbv = f1 + f3, f2 + f4, f5 + f7, f6 + f8
        wpu, wpv, wqu, wqv = f1 + f5, f2 + f6, f3 + f7, f4 + f8
        ga = _pair_grad(wap * np_ + waq * nq + wau * nu + wav * nv + sa, a[0], a[1], a[2],
                        wap, ap, p, waq, aq, q, wau, au, u, wav, av, v)
        gb = _pair_grad(wbp * np_ + wbq * nq + wbu * nu + wbv * nv + sb, b[0], b[1], b[2],
                        wbp, bp, p, wbq, bq, q, wbu, bu, u, wbv, bv, v)
        gp = _pair_grad(wap * na + wbp * nb_ + wpu * nu + wpv * nv + sp, p[0], p[1], p[2],
                        wap, ap, a, wbp, bp, b, wpu, pu, u, wpv, pv, v)
        gq = _pair_grad(waq * na + wbq * nb_ + wqu * nu + wqv * nv + sq, q[0], q[1], q[2],
                        waq, aq, a, wbq, bq, b, wqu, qu, u, wqv, qv, v)
        gu = _pair_grad(wau * na + wbu * nb_ + wpu * np_ + wqu * nq + su, u[0], u[1], u[2],
                        wau, au, a, wbu, bu, b, wpu, pu, p, wqu, qu, q)
        gv = _pair_grad(wav * na + wbv * nb_ + wpv * np_ + wqv * nq + sv, v[0], v[1], v[2],
                        wav, av, a, wbv, bv, b, wpv, pv, p, wqv, qv, q)
        dfx0, dfx1, dfx2 = s * ga[0], s * ga[1], s * ga[2]
        dbx0, dbx1, dbx2 = s * gb[0], s * gb[1], s * gb[2]
        dfy0, dfy1, dfy2 = s * gp[0], s * gp[1], s * gp[2]
        dby0, dby1, dby2 = s * gq[0], s * gq[1], s * gq[2]
        dfz0, dfz1, dfz2 = s * gu[0], s * gu[1], s * gu[2]
        dbz0, dbz1, dbz2 = s * gv[0], s * gv[1], s * gv[2]
        tzf, tzb = fz[k], bz[k]
        g0[k] += ixf * dfx0
        g1[k] += ixf * dfx1
        g2[k] += ixf * dfx2
        g3[k] += ixb * dbx0
        g4[k] += ixb * dbx1
        g5[k] += ixb * dbx2
        g6[k] += iyf * dfy0
        g7[k] += iyf * dfy1
        g8[k] += iyf * dfy2
        g9[k] += iyb * dby0
        g10[k] += iyb * dby1
        g11[k] += iyb * dby2
        g12[k] += tzf * dfz0
        g13[k] += tzf * dfz1
        g14[k] += tzf * dfz2
        g15[k] += tzb * dbz0
        g16[k] += tzb * dbz1
        g17[k] += tzb * dbz2
        qx += dfx0 * a[0] + dfx1 * a[1] + dfx2 * a[2] + dbx0 * b[0] + dbx1 * b[1] + dbx2 * b[2]
        qy += dfy0 * p[0] + dfy1 * p[1] + dfy2 * p[2] + dby0 * q[0] + dby1 * q[1] + dby2 * q[2]
        qz += dfz0 * u[0] + dfz1 * u[1] + dfz2 * u[2] + dbz0 * v[0] + dbz1 * v[1] + dbz2 * v[2]
    return e, qx, qy, qz


# ---- one x-plane: stages 1 and 2 ----

@nb.njit(cache=True, fastmath=_FAST, error_model="numpy")
def _plane_staged(buf, r, i, taps, fx, bx, fy, by, fz, bz, wx, wy, wz, coefs, lap, lap_x, lap_y, lap_z, reach,
                  plane, loc, wrow, spare, logs, density, store_density, user, user_der, clear_extra):
    """Derivative plane (24 rows) and the SLOTS energy/virial sums of x-plane i.  The
    density goes to density[i] when ``store_density``, else to the thread's ``spare`` row
    (a halo plane is computed by two threads)."""
    ny, nz = buf.shape[2] - 2 * r, buf.shape[3] - 2 * r
    real = buf.dtype.type
    c2, c4 = real(coefs[0]), real(coefs[1])
    h, half, quarter, two = real(0.5 * coefs[1]), real(0.5), real(0.25), real(2.0)
    constants = (c2, c4, h, half, quarter, two)
    sums = np.zeros(SLOTS)
    ci = i + r
    ixf, ixb = fx[i], bx[i]
    base = coefs[0] != 0.0 or coefs[1] != 0.0
    log_constants = (real(coefs[10]), real(coefs[11]), real(coefs[12]), real(coefs[12] * coefs[13]), two)
    sextic_constants = (real(0.0), real(0.0), real(0.0), real(0.0), two)
    for j in range(ny):
        cj = j + r
        iyf, iyb = fy[j], by[j]
        wxy = wx[i] * wy[j]
        for k in range(nz):
            wrow[k] = wxy * wz[k]
        _stage_row(buf, r, ci, cj, taps, ixf, ixb, iyf, iyb, fz, bz, lap, lap_x[i], lap_y[j], lap_z, reach, loc)
        dens = density[i, j] if store_density else spare
        rows = plane[:, cj, r:r + nz]
        for q in range(0 if not base else 18, DERIVATIVE_ROWS if clear_extra else 18):
            row = rows[q]
            for k in range(nz):
                row[k] = real(0.0)
        for k in range(nz):
            dens[k] = real(0.0)
        if base:
            d0, d1, d2, d3, d4, d5 = rows[0], rows[1], rows[2], rows[3], rows[4], rows[5]
            d6, d7, d8, d9, d10, d11 = rows[6], rows[7], rows[8], rows[9], rows[10], rows[11]
            d12, d13, d14, d15, d16, d17 = rows[12], rows[13], rows[14], rows[15], rows[16], rows[17]
            l0, l1, l2, l3, l4, l5 = loc[0], loc[1], loc[2], loc[3], loc[4], loc[5]
            l6, l7, l8, l9, l10, l11 = loc[6], loc[7], loc[8], loc[9], loc[10], loc[11]
            l12, l13, l14, l15, l16, l17 = loc[12], loc[13], loc[14], loc[15], loc[16], loc[17]
            r0 = r1 = r2 = r3 = r4 = r5 = real(0.0)
            for k in range(nz):
                (e0, e1, e2, e3, e4, e5, e, g0, g1, g2, g3, g4, g5, g6, g7, g8, g9, g10, g11, g12, g13, g14, g15,
                 g16, g17) = _site((l0[k], l1[k], l2[k], l3[k], l4[k], l5[k], l6[k], l7[k], l8[k], l9[k], l10[k],
                                    l11[k], l12[k], l13[k], l14[k], l15[k], l16[k], l17[k]),
                                   constants, wrow[k], (ixf, ixb, iyf, iyb, fz[k], bz[k]))
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
            sums[0] += r0
            sums[1] += r1
            sums[2] += r2
            sums[3] += r3
            sums[4] += r4
            sums[5] += r5
        for slot in range(len(EXTRA_KINDS)):
            c = coefs[_EXTRA_INDEX[slot]]
            if c == 0.0:
                continue
            if slot == 0:
                piece = _dirichlet_squared_row(loc, plane, cj, r, dens, wrow, c, ixf, ixb, iyf, iyb, fz, bz)
            elif slot == 1:
                piece = _strain_squared_row(loc, plane, cj, r, dens, wrow, c, ixf, ixb, iyf, iyb, fz, bz)
            elif slot == 2:
                piece = _potential_row(loc, plane, cj, r, dens, wrow, c, coefs[5])
            elif slot == 3:
                piece = _laplacian_squared_row(loc, plane, cj, r, dens, wrow, c)
            elif slot == 4:
                piece = _sextic_row(loc, plane, cj, r, dens, wrow, c, sextic_constants, logs, ixf, ixb, iyf, iyb,
                                    fz, bz)
            elif slot == 5:
                piece = _chiral_row(loc, plane, cj, r, dens, wrow, c, ixf, ixb, iyf, iyb, fz, bz)
            else:
                piece = _log_quartic_row(loc, plane, cj, r, dens, wrow, c, log_constants, logs, ixf, ixb, iyf, iyb,
                                         fz, bz)
            sums[6 + slot] += piece[0]
            sums[13] += piece[1]
            sums[14] += piece[2]
            sums[15] += piece[3]
        if user:  # precomputed rows: the difference rows (0-17) times their factors, as the row functions do
            for q in range(user_der.shape[0]):
                row = rows[q]
                extra = user_der[q, i, j]
                group = q // 3
                if group >= 6:
                    for k in range(nz):
                        row[k] += extra[k]
                elif group == 4 or group == 5:
                    factor_z = fz if group == 4 else bz
                    for k in range(nz):
                        row[k] += factor_z[k] * extra[k]
                else:
                    factor = (ixf, ixb, iyf, iyb)[group]
                    for k in range(nz):
                        row[k] += factor * extra[k]
    return sums


@nb.njit(cache=True, fastmath=_FAST, error_model="numpy")
def _plane_gradient_extra(buf, r, g, ring, span, lap, reach, gather_x, gather_y, gather_z, lo, w, acc, out):
    """Adds w P(dE/dn) of the n rows (18-20) and the Laplacian rows (21-23) of x-plane g:
    site x collects the n rows at x and, per axis, sum_o s_a(x - o e_a)[o] L(x - o e_a) (the
    transposed central stencil; ``gather_a[o + 3, i]`` = s_a at site i - o)."""
    ny, nz = out.shape[1], out.shape[2] // 3
    ci = g + r
    b, m = r + lo, nz - 2 * lo
    own = ring[g % span]
    for j in range(lo, ny - lo):
        cj = j + r
        n0, n1, n2 = buf[0, ci, cj, b:b + m], buf[1, ci, cj, b:b + m], buf[2, ci, cj, b:b + m]
        for c in range(3):
            total = acc[c, :m]
            source = own[N_ROW + c, cj, b:b + m]
            for k in range(m):
                total[k] = source[k]
            if lap:
                for o in range(-reach, reach + 1):
                    sx = gather_x[o + 3, g]
                    values = ring[(g - o) % span][LAP_ROW + c, cj, b:b + m]
                    for k in range(m):
                        total[k] += sx * values[k]
                    sy = gather_y[o + 3, j]
                    values = own[LAP_ROW + c, cj - o, b:b + m]
                    for k in range(m):
                        total[k] += sy * values[k]
                    sz = gather_z[o + 3, lo:lo + m]
                    values = own[LAP_ROW + c, cj, b - o:b - o + m]
                    for k in range(m):
                        total[k] += sz[k] * values[k]
        t0, t1, t2 = acc[0, :m], acc[1, :m], acc[2, :m]
        row = out[g, j, 3 * lo:]
        for k in range(m):
            along = t0[k] * n0[k] + t1[k] * n1[k] + t2[k] * n2[k]
            row[3 * k] += w * (t0[k] - along * n0[k])
            row[3 * k + 1] += w * (t1[k] - along * n1[k])
            row[3 * k + 2] += w * (t2[k] - along * n2[k])


@nb.njit(parallel=True, cache=True)
def _fused_staged(buf, r, narrow, taps, fx, bx, fy, by, fz, bz, wx, wy, wz, coefs, lap, lap_x, lap_y, lap_z,
                  gather_x, gather_y, gather_z, reach, extra_gather, periodic, w, gradient, store_density, rings,
                  scratch, logs, parts, density, user, user_der, out):
    """`solitons.model.routes.kernels._fused` for the staged route: one slab per thread with a ring of
    2 r + 1 derivative planes (24 rows each)."""
    nx = buf.shape[1] - 2 * r
    slabs = rings.shape[0]
    span = 2 * r + 1
    lo = 0 if periodic else 1
    nz = buf.shape[3] - 2 * r
    for t in nb.prange(slabs):
        i0 = t * nx // slabs
        i1 = (t + 1) * nx // slabs
        ring = rings[t]
        loc = scratch[t, :loc_rows(lap)]
        acc = scratch[t, LAPLACIAN_ROWS:LAPLACIAN_ROWS + 3]
        wrow = scratch[t, LAPLACIAN_ROWS + 3]
        spare = scratch[t, LAPLACIAN_ROWS + 4]
        first, last = (i0 - r, i1 + r) if gradient else (i0, i1)
        for ip in range(first, last):
            plane = ring[ip % span]
            owned = i0 <= ip < i1
            if not periodic and (ip < 0 or ip >= nx):
                plane[:] = 0.0
            else:
                i = ip % nx
                sums = _plane_staged(buf, r, i, taps, fx, bx, fy, by, fz, bz, wx, wy, wz, coefs, lap, lap_x, lap_y,
                                     lap_z, reach, plane, loc, wrow[:nz], spare[:nz], logs[t], density,
                                     store_density and owned, user, user_der, extra_gather)
                if owned:
                    for q in range(SLOTS):
                        parts[i, q] = sums[q]
                if periodic:
                    _wrap_plane_frame(plane, r)
            g = ip - r
            if gradient and g >= i0 and lo <= g < nx - lo:
                gather_plane(buf, r, g, narrow, taps, ring, lo, w, out)
                if extra_gather:
                    _plane_gradient_extra(buf, r, g, ring, span, lap, reach, gather_x, gather_y, gather_z, lo, w,
                                          acc, out)


@nb.njit(cache=True)
def loc_rows(lap):
    return LAPLACIAN_ROWS if lap else LOCAL_ROWS


@nb.njit(parallel=True, cache=True)
def _stage_all(buf, r, taps, fx, bx, fy, by, fz, bz, lap, lap_x, lap_y, lap_z, reach, out):
    """Stage 1 over the whole grid: out[q, i, j, k] (the local fields of every site)."""
    nx, ny = out.shape[1], out.shape[2]
    for i in nb.prange(nx):
        for j in range(ny):
            _stage_row(buf, r, i + r, j + r, taps, fx[i], bx[i], fy[j], by[j], fz, bz, lap, lap_x[i], lap_y[j],
                       lap_z, reach, out[:, i, j, :])


# ---- drivers (numpy in, numpy out) ----

def laplacian_coefficients(shape, spacing, stencil, stretch_terms=None, dtype=np.float64):
    """Per axis: the staging coefficients (n_a, 2, 7) (row 0 the Laplacian's, row 1 its
    virial scaling, twice row 0: under a scaling of every length B / h scales as 1 / h^2
    like A / h^2) and the gather coefficients (7, n_a) (site i
    collects the Laplacian rows of site i - o with the staging coefficient of that site).
    lap_a = A (sum_o l_o n(x + o e_a)) / h^2 + B (sum_o c_o n(x + o e_a)) / h, with A = 1 and
    B = 0 on a uniform axis, A = 1 / x'^2 and B = -x'' / x'^3 on a stretched one
    (``stretch_terms[a]`` = (A, B) arrays, see `solitons.model.routes.evaluators`)."""
    staging, gathering = [], []
    lap, central = np.asarray(stencil.laplacian), np.asarray(stencil.central)
    for axis, (n, h) in enumerate(zip(shape, spacing)):
        a, b = (np.ones(n), np.zeros(n)) if stretch_terms is None or stretch_terms[axis] is None \
            else stretch_terms[axis]
        s = np.empty((n, 2, 7))
        s[:, 0, :] = a[:, None] * lap[None, :] / h**2 + b[:, None] * central[None, :] / h
        s[:, 1, :] = 2.0 * s[:, 0, :]  # B = -x''/x'^3 is an inverse length: every part scales as 1/h^2
        g = np.empty((7, n))
        for o in range(-3, 4):
            g[o + 3] = s[(np.arange(n) - o) % n, 0, o + 3]
        staging.append(np.ascontiguousarray(s, dtype=dtype))
        gathering.append(np.ascontiguousarray(g, dtype=dtype))
    lap_z = np.ascontiguousarray(np.moveaxis(staging[2], 0, -1))  # (2, 7, nz)
    return staging[0], staging[1], lap_z, gathering[0], gathering[1], gathering[2]


def _geometry(field, spacing, metric, taps):
    from solitons.lattice.grid import PAD_WIDTH
    from solitons.model.routes.kernels import NARROW_TAPS, _factors

    real = field.dtype.type
    narrow = tuple(taps) == NARROW_TAPS
    r = 1 if narrow else PAD_WIDTH
    per_axis = [_factors(n, h, real, None if metric is None else metric[a])
                for a, (n, h) in enumerate(zip(field.shape[:3], spacing))]
    return narrow, r, per_axis


def _padded(field, r, periodic):
    from solitons.model.routes.kernels import _buffer, _to_padded_planes

    nx, ny, nz, _ = field.shape
    buf = _buffer(("field", r), (3, nx + 2 * r, ny + 2 * r, nz + 2 * r), field.dtype)
    _to_padded_planes(field, r, periodic, buf)
    return buf


def stage_all(field, spacing, periodic, taps, metric, lap_info):
    """The local fields of every site, (rows, Nx, Ny, Nz): `LOCAL_ROWS` rows, or
    `LAPLACIAN_ROWS` when ``lap_info`` (from `laplacian_coefficients`) is given."""
    field = np.ascontiguousarray(field)
    spacing = tuple(float(h) for h in spacing)
    narrow, r, ((fx, bx, _), (fy, by, _), (fz, bz, _)) = _geometry(field, spacing, metric, taps)
    buf = _padded(field, r, periodic)
    lap = lap_info is not None
    lap_x, lap_y, lap_z = lap_info[:3] if lap else _NO_LAPLACIAN[:3]
    out = np.empty((LAPLACIAN_ROWS if lap else LOCAL_ROWS,) + field.shape[:3], dtype=field.dtype)
    _stage_all(buf, r, tuple(float(t) for t in taps), fx, bx, fy, by, fz, bz, lap, lap_x.astype(field.dtype),
               lap_y.astype(field.dtype), lap_z.astype(field.dtype), 1 if narrow else 3, out)
    return out


_NO_LAPLACIAN = (np.zeros((1, 2, 7)), np.zeros((1, 2, 7)), np.zeros((2, 7, 1)), np.zeros((7, 1)), np.zeros((7, 1)),
                 np.zeros((7, 1)))


def run(field, spacing, periodic, taps, coefs, normalisation, metric=None, lap_info=None, out=None, gradient=True,
        store_density=True, user_der=None, extra_gather=False):
    """One pass of the staged route.  Returns (sums, density, gradient): sums (SLOTS,) of
    normalisation * cell volume * (base pieces as in `solitons.model.routes.kernels`, extra term
    energies in `EXTRA_KINDS` order, Q_x, Q_y, Q_z of the extra terms); density the
    normalised energy density of the built-in terms (or None); gradient as in
    `solitons.model.routes.kernels.value_and_grad` with ``user_der`` (rows, Nx, Ny, Nz; derivatives of
    the weighted unnormalised density of further terms with respect to the staged local
    fields) included.  ``extra_gather``: some term has n or Laplacian derivatives."""
    from solitons.model.routes.kernels import _NO_GRADIENT, _buffer

    field = np.ascontiguousarray(field)
    nx, ny, nz, _ = field.shape
    spacing = tuple(float(h) for h in spacing)
    scale = normalisation * spacing[0] * spacing[1] * spacing[2]
    real = field.dtype.type
    narrow, r, ((fx, bx, wx), (fy, by, wy), (fz, bz, wz)) = _geometry(field, spacing, metric, taps)
    if gradient:
        if out is None:
            out = np.empty_like(field)
        if not periodic:
            out[0], out[-1], out[:, 0], out[:, -1], out[:, :, 0], out[:, :, -1] = 0, 0, 0, 0, 0, 0
    lap = lap_info is not None
    info = lap_info if lap else _NO_LAPLACIAN
    lap_x, lap_y, lap_z, gather_x, gather_y, gather_z = (np.asarray(a, dtype=field.dtype) for a in info)
    buf = _padded(field, r, periodic)
    slabs = max(1, min(nb.get_num_threads(), nx))
    rings = _buffer(("staged rings", periodic, r), (slabs, 2 * r + 1, DERIVATIVE_ROWS, ny + 2 * r, nz + 2 * r),
                    field.dtype, zero=True)
    scratch = _buffer("staged scratch", (slabs, LAPLACIAN_ROWS + 5, nz), field.dtype)
    density = _buffer("density", (nx, ny, nz), field.dtype)
    parts = np.zeros((nx, SLOTS))
    user = user_der is not None
    if user:
        user_der = np.ascontiguousarray(user_der, dtype=field.dtype)
    else:
        user_der = np.zeros((1, 1, 1, 1), dtype=field.dtype)
    _fused_staged(buf, r, narrow, tuple(float(t) for t in taps), fx, bx, fy, by, fz, bz, wx, wy, wz,
                  np.asarray(coefs, dtype=np.float64), lap, lap_x, lap_y, lap_z, gather_x, gather_y, gather_z,
                  1 if narrow else 3, bool(extra_gather or user), periodic, real(scale), gradient,
                  store_density, rings, scratch, _buffer("staged logs", (slabs, 10, nz), np.float64), parts, density,
                  user, user_der,
                  out.reshape(nx, ny, 3 * nz) if gradient else _NO_GRADIENT.astype(real))
    sums = scale * parts.sum(axis=0)
    return sums, (normalisation * density.astype(np.float64) if store_density else None), out
