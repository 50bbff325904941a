"""Fused, threaded vector operations on fields viewed as (P, 3) arrays (numba): the linear
algebra of L-BFGS on the product of spheres in as few passes over memory as the algorithm
allows.  Each function is one parallel pass; sums are accumulated in float64."""

from __future__ import annotations

import numba as nb
import numpy as np


@nb.njit(parallel=True, cache=True)
def dot(a, b):
    total = 0.0
    for p in nb.prange(a.shape[0]):
        total += a[p, 0] * b[p, 0] + a[p, 1] * b[p, 1] + a[p, 2] * b[p, 2]
    return total


@nb.njit(parallel=True, cache=True)
def axpy_dot(q, alpha, y, s):
    """q <- q - alpha y in place; returns s . q (the new q)."""
    total = 0.0
    for p in nb.prange(q.shape[0]):
        q0 = q[p, 0] - alpha * y[p, 0]
        q1 = q[p, 1] - alpha * y[p, 1]
        q2 = q[p, 2] - alpha * y[p, 2]
        q[p, 0], q[p, 1], q[p, 2] = q0, q1, q2
        total += s[p, 0] * q0 + s[p, 1] * q1 + s[p, 2] * q2
    return total


@nb.njit(parallel=True, cache=True)
def scale_dot(q, factor, y):
    """q <- factor q in place; returns y . q."""
    total = 0.0
    for p in nb.prange(q.shape[0]):
        q0, q1, q2 = factor * q[p, 0], factor * q[p, 1], factor * q[p, 2]
        q[p, 0], q[p, 1], q[p, 2] = q0, q1, q2
        total += y[p, 0] * q0 + y[p, 1] * q1 + y[p, 2] * q2
    return total


@nb.njit(parallel=True, cache=True)
def tangent_direction(field, q, mask, out):
    """out <- -P_n(q) on free sites (mask 1), 0 on held ones; returns max |out| (NaN if any
    entry is not finite)."""
    largest = 0.0
    poison = 0.0
    for p in nb.prange(q.shape[0]):
        n0, n1, n2 = field[p, 0], field[p, 1], field[p, 2]
        along = q[p, 0] * n0 + q[p, 1] * n1 + q[p, 2] * n2
        m = mask[p]
        v0 = -m * (q[p, 0] - along * n0)
        v1 = -m * (q[p, 1] - along * n1)
        v2 = -m * (q[p, 2] - along * n2)
        out[p, 0], out[p, 1], out[p, 2] = v0, v1, v2
        length = np.sqrt(v0 * v0 + v1 * v1 + v2 * v2)
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


def two_loop(field, gradient, inv_scale, s_hist, y_hist, rho, order, mask, q, out):
    """L-BFGS direction -P(H g) (Nocedal & Wright Alg. 7.4) in 2 m + 1 fused passes.
    ``order`` lists the history slots oldest first; q is a work array; returns the
    largest per-site step length."""
    np.multiply(gradient, inv_scale, out=q)
    if not order:
        return tangent_direction(field, q, mask, out)
    newest = order[-1]
    alphas = {}
    projection = dot(s_hist[newest], q)
    for position in range(len(order) - 1, -1, -1):  # newest to oldest
        slot = order[position]
        alphas[slot] = rho[slot] * projection
        following = s_hist[order[position - 1]] if position > 0 else y_hist[order[0]]
        projection = axpy_dot(q, alphas[slot], y_hist[slot], following)
    sy = 1.0 / rho[newest]
    yy = dot(y_hist[newest], y_hist[newest])
    projection = scale_dot(q, sy / yy, y_hist[order[0]])
    for position, slot in enumerate(order):  # oldest to newest
        beta = rho[slot] * projection
        following = y_hist[order[position + 1]] if position + 1 < len(order) else s_hist[slot]
        projection = axpy_dot(q, beta - alphas[slot], s_hist[slot], following)
    return tangent_direction(field, q, mask, out)
