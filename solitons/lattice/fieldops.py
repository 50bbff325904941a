"""Fused, threaded vector operations on fields viewed as (P, 3) arrays (numba): the linear
algebra of L-BFGS on the product of spheres in as few passes over memory as the algorithm
allows.  Each function is one parallel pass; sums are accumulated in float64."""

from __future__ import annotations

import numba as nb
import numpy as np


@nb.njit(parallel=True, cache=True)
def max_weighted_norm(a, weights):
    """Largest per-site length times the site's weight; NaN if any entry is not finite."""
    largest = 0.0
    poison = 0.0
    for p in nb.prange(a.shape[0]):
        length = weights[p] * np.sqrt(a[p, 0] * a[p, 0] + a[p, 1] * a[p, 1] + a[p, 2] * a[p, 2])
        largest = max(largest, length)
        poison += length - length
    return largest + poison


@nb.njit(parallel=True, cache=True)
def retract(field, step, alpha, out):
    """out <- (field + alpha step) / |field + alpha step| per site."""
    for p in nb.prange(field.shape[0]):
        v0 = field[p, 0] + alpha * step[p, 0]
        v1 = field[p, 1] + alpha * step[p, 1]
        v2 = field[p, 2] + alpha * step[p, 2]
        inv = 1.0 / np.sqrt(v0 * v0 + v1 * v1 + v2 * v2)
        out[p, 0], out[p, 1], out[p, 2] = v0 * inv, v1 * inv, v2 * inv


@nb.njit(parallel=True, cache=True)
def max_norm(a):
    """Largest per-site length; NaN if any entry is not finite (max() alone would skip NaN)."""
    largest = 0.0
    poison = 0.0  # stays 0 unless some length is inf or NaN
    for p in nb.prange(a.shape[0]):
        length = np.sqrt(a[p, 0] * a[p, 0] + a[p, 1] * a[p, 1] + a[p, 2] * a[p, 2])
        largest = max(largest, length)
        poison += length - length
    return largest + poison


@nb.njit(parallel=True, cache=True)
def curvature_pair(new_field, step, alpha, gradient, new_gradient, mask, inv_scale, s_out, y_out):
    """Transport the step and the old gradient to the new tangent planes:
    s = P(alpha step) mask, y = (g_new - P(g_old) mask) / scale; returns (s.y, s.s, y.y)."""
    sy = 0.0
    ss = 0.0
    yy = 0.0
    for p in nb.prange(new_field.shape[0]):
        n0, n1, n2 = new_field[p, 0], new_field[p, 1], new_field[p, 2]
        m = mask[p]
        a0, a1, a2 = alpha * step[p, 0], alpha * step[p, 1], alpha * step[p, 2]
        along = a0 * n0 + a1 * n1 + a2 * n2
        s0, s1, s2 = m * (a0 - along * n0), m * (a1 - along * n1), m * (a2 - along * n2)
        g0, g1, g2 = gradient[p, 0], gradient[p, 1], gradient[p, 2]
        along = g0 * n0 + g1 * n1 + g2 * n2
        y0 = (new_gradient[p, 0] - m * (g0 - along * n0)) * inv_scale
        y1 = (new_gradient[p, 1] - m * (g1 - along * n1)) * inv_scale
        y2 = (new_gradient[p, 2] - m * (g2 - along * n2)) * inv_scale
        s_out[p, 0], s_out[p, 1], s_out[p, 2] = s0, s1, s2
        y_out[p, 0], y_out[p, 1], y_out[p, 2] = y0, y1, y2
        sy += s0 * y0 + s1 * y1 + s2 * y2
        ss += s0 * s0 + s1 * s1 + s2 * s2
        yy += y0 * y0 + y1 * y1 + y2 * y2
    return sy, ss, yy


# ---- compact L-BFGS (Byrd, Nocedal & Schnabel, Math. Prog. 63 (1994) 129, eq. 3.13;
# Nocedal & Wright, Numerical Optimization, 2nd ed., eq. 7.24): the direction is
# H g = gamma W g + S p + gamma W Y q with (p, q) from k x k matrices, so one pass reads
# the history for the 2 k dot products and one more forms the direction; the two-loop
# recursion (Nocedal & Wright Alg. 7.4; the reference in tests/test_lbfgs_compact.py)
# needs 2 k passes, each reading three arrays and writing one.

CHUNK = 3 * 2048  # entries per block: a block of every history vector stays in L1/L2


@nb.njit(parallel=True, cache=True, fastmath={"reassoc", "contract", "nsz"})
def history_dots(gradient, s_hist, y_hist, y_new, slots, weights):
    """One pass over the history, flat (entry-wise, so the inner loops vectorise): per slot
    s_i . g, y_i . W g, s_i . y_new, y_i . W y_new, with gradient and y_new (3P,), histories
    (m, 3P), W = diag(weights) per entry (3P,) or 1 when weights is empty.  With an operator
    W (the preconditioned minimiser) pass y_hist = W Y and empty weights.  Returns a (4, k)
    array in the order of ``slots``.  Inner loops run over block views from index 0 (a loop
    from a run-time start stayed scalar)."""
    k = slots.shape[0]
    size = gradient.shape[0]
    blocks = (size + CHUNK - 1) // CHUNK
    weighted = weights.shape[0] > 0
    partial = np.zeros((blocks, 4, k))
    for t in nb.prange(blocks):
        lo, hi = t * CHUNK, min(size, (t + 1) * CHUNK)
        g, n = gradient[lo:hi], y_new[lo:hi]  # n may be float32: products below in float64
        w = weights[lo:hi] if weighted else gradient[lo:lo]
        for a in range(k):
            s_row, y_row = s_hist[slots[a], lo:hi], y_hist[slots[a], lo:hi]
            sg = yg = sn = yn = 0.0
            if weighted:
                for e in range(hi - lo):
                    sg += s_row[e] * g[e]
                    yg += w[e] * y_row[e] * g[e]
                    sn += np.float64(s_row[e]) * n[e]
                    yn += w[e] * y_row[e] * n[e]
            else:
                for e in range(hi - lo):
                    sg += s_row[e] * g[e]
                    yg += y_row[e] * g[e]
                    sn += np.float64(s_row[e]) * n[e]
                    yn += np.float64(y_row[e]) * n[e]
            partial[t, 0, a], partial[t, 1, a], partial[t, 2, a], partial[t, 3, a] = sg, yg, sn, yn
    return partial.sum(axis=0)


@nb.njit(parallel=True, cache=True, fastmath={"contract", "nsz"})
def compact_direction(field, gradient, base, scale, gamma, s_hist, y_hist, slots, p_coef, q_coef, weights, mask,
                      out):
    """out <- -P_n(gamma W (b~ + sum_i q_i y_i) + sum_i p_i s_i) on free sites, b~ = scale base;
    base = g with W = diag(weights) (or 1 when weights is empty); for an operator W pass
    base = W g, y_hist = W Y and empty weights.  Arrays flat (3P,) (histories (m, 3P)) except
    ``mask``, one value per site; returns (largest per-site length of out, g . out).  NaN
    propagates.  Blocks: the linear combination entry-wise (vectorised) into a block
    buffer, then the tangent projection site by site."""
    k = slots.shape[0]
    size = gradient.shape[0]
    blocks = (size + CHUNK - 1) // CHUNK
    weighted = weights.shape[0] > 0
    largest = np.zeros(blocks)
    poisons = np.zeros(blocks)
    slope = np.zeros(blocks)
    for t in nb.prange(blocks):
        lo, hi = t * CHUNK, min(size, (t + 1) * CHUNK)
        g, b, n, o = gradient[lo:hi], base[lo:hi], field[lo:hi], out[lo:hi]
        m = mask[lo // 3:hi // 3]  # CHUNK is a multiple of 3: blocks hold whole sites
        u = np.empty(hi - lo)
        v = np.zeros(hi - lo)
        for e in range(hi - lo):
            u[e] = scale * b[e]
        for a in range(k):
            s_row, y_row, pa, qa = s_hist[slots[a], lo:hi], y_hist[slots[a], lo:hi], p_coef[a], q_coef[a]
            for e in range(hi - lo):
                u[e] += qa * y_row[e]
                v[e] += pa * s_row[e]
        if weighted:
            w = weights[lo:hi]
            for e in range(hi - lo):
                u[e] = gamma * w[e] * u[e] + v[e]
        else:
            for e in range(hi - lo):
                u[e] = gamma * u[e] + v[e]
        best = 0.0
        poison = 0.0
        tilt = 0.0
        for site in range((hi - lo) // 3):
            e = 3 * site
            h0, h1, h2 = u[e], u[e + 1], u[e + 2]
            n0, n1, n2 = n[e], n[e + 1], n[e + 2]
            along = h0 * n0 + h1 * n1 + h2 * n2
            d0, d1, d2 = -m[site] * (h0 - along * n0), -m[site] * (h1 - along * n1), -m[site] * (h2 - along * n2)
            o[e], o[e + 1], o[e + 2] = d0, d1, d2
            length = np.sqrt(d0 * d0 + d1 * d1 + d2 * d2)
            best = max(best, length)
            poison += length - length
            tilt += g[e] * d0 + g[e + 1] * d1 + g[e + 2] * d2
        largest[t] = best
        poisons[t] = poison
        slope[t] = tilt
    return largest.max() + poisons.sum(), slope.sum()  # numba's max() skips NaN; the sum does not


def compact_coefficients(a, b, sy, yy, gamma):
    """(p, q) of the compact form from a = S^T g~, b = Y^T W g~ (time order, oldest first),
    sy[i, j] = s_i . y_j and yy[i, j] = y_i . W y_j:
    q = -R^-1 a,  p = R^-T ((D + gamma Y^T W Y) R^-1 a - gamma b),  R = upper(S^T Y)."""
    import scipy.linalg

    r = np.triu(sy)
    r_inv_a = scipy.linalg.solve_triangular(r, a, lower=False)
    inner = np.diag(np.diag(sy)) @ r_inv_a + gamma * (yy @ r_inv_a) - gamma * b
    p = scipy.linalg.solve_triangular(r, inner, lower=False, trans="T")
    return p, -r_inv_a
