"""The compact L-BFGS direction of solitons.lattice.fieldops against the two-loop recursion.

The compact form (Byrd, Nocedal & Schnabel, Math. Prog. 63 (1994) 129, eq. 3.13; Nocedal &
Wright, Numerical Optimization, 2nd ed., eq. 7.24) and the two-loop recursion (Nocedal &
Wright Alg. 7.4) are the same inverse-Hessian approximation, so for one history they give
one direction up to rounding.  The reference below is written in plain numpy from the book,
including the preconditioned initial matrix H0 = gamma W, gamma = s.y / (y . W y)."""

import numpy as np
import pytest

from solitons.lattice import fieldops


def two_loop_reference(gradient, pairs, weights):
    """H g by Nocedal & Wright Alg. 7.4 with H0 = gamma diag(weights); pairs oldest first."""
    q = gradient.copy()
    alphas = []
    for s, y in reversed(pairs):
        rho = 1.0 / np.dot(s, y)
        alpha = rho * np.dot(s, q)
        q -= alpha * y
        alphas.append(alpha)
    s, y = pairs[-1]
    gamma = np.dot(s, y) / np.dot(y, weights * y)
    r = gamma * weights * q
    for (s, y), alpha in zip(pairs, reversed(alphas)):
        rho = 1.0 / np.dot(s, y)
        beta = rho * np.dot(y, r)
        r += (alpha - beta) * s
    return r


def project(field, vectors, mask):
    sites = vectors.reshape(-1, 3)
    n = field.reshape(-1, 3)
    tangent = sites - np.sum(sites * n, axis=1, keepdims=True) * n
    return (tangent * mask.reshape(-1, 3)).reshape(-1)


@pytest.mark.parametrize("weighted", [False, True])
@pytest.mark.parametrize("count", [1, 2, 4])
def test_compact_direction_equals_two_loop(weighted, count):
    rng = np.random.default_rng(count + 10 * weighted)
    sites = 5000  # not a multiple of the block size: the last block is partial
    field = rng.standard_normal((sites, 3))
    field /= np.linalg.norm(field, axis=1, keepdims=True)
    gradient = rng.standard_normal(3 * sites)
    memory = 4
    # float32 history as in the minimiser; curvature s . y > 0 (y = A s + noise, A > 0)
    s_hist = rng.standard_normal((memory, 3 * sites)).astype(np.float32)
    y_hist = (s_hist * rng.uniform(0.5, 2.0, 3 * sites) + 0.05 * rng.standard_normal((memory, 3 * sites))
              ).astype(np.float32)
    order = list(rng.permutation(memory)[:count])  # slots, oldest first, not in slot order
    weights3 = np.repeat(rng.uniform(0.2, 1.0, sites), 3) if weighted else np.zeros(0)
    mask = (rng.uniform(size=sites) > 0.1).astype(float)
    mask3 = np.repeat(mask, 3)
    scale = 0.37

    slots = np.asarray(order, dtype=np.int64)
    newest = order[-1]
    dots = fieldops.history_dots(gradient, s_hist, y_hist, y_hist[newest], slots, weights3)
    s64, y64 = s_hist.astype(np.float64), y_hist.astype(np.float64)
    w = weights3 if weighted else np.ones(3 * sites)
    for a, slot in enumerate(order):  # the fused pass against plain dot products
        expected = (s64[slot] @ gradient, y64[slot] @ (w * gradient), s64[slot] @ y64[newest],
                    y64[slot] @ (w * y64[newest]))
        np.testing.assert_allclose(dots[:, a], expected, rtol=1e-10)
    sy = np.array([[s64[i] @ y64[j] for j in order] for i in order])
    yy = np.array([[y64[i] @ (w * y64[j]) for j in order] for i in order])
    gamma = sy[-1, -1] / yy[-1, -1]
    p, q = fieldops.compact_coefficients(scale * dots[0], scale * dots[1], sy, yy, gamma)
    out = np.empty(3 * sites)
    largest, slope = fieldops.compact_direction(field.reshape(-1), gradient, gradient, scale, gamma, s_hist, y_hist,
                                                slots, p, q, weights3, mask, out)

    reference = -project(field, two_loop_reference(scale * gradient, [(s64[k], y64[k]) for k in order], w), mask3)
    assert np.abs(out - reference).max() < 1e-10 * np.abs(reference).max()
    assert abs(slope - gradient @ out) < 1e-10 * abs(slope)
    assert abs(largest - np.linalg.norm(out.reshape(-1, 3), axis=1).max()) < 1e-12 * largest


def test_compact_direction_propagates_nan():
    """A NaN gradient entry must reach the step length (the line search then stops)."""
    sites = 100
    field = np.tile([0.0, 0.0, 1.0], sites)
    gradient = np.ones(3 * sites)
    gradient[7] = np.nan
    out = np.empty(3 * sites)
    history = np.zeros((1, 3 * sites), dtype=np.float32)
    largest, _ = fieldops.compact_direction(field, gradient, gradient, 1.0, 1.0, history, history,
                                            np.zeros(0, np.int64),
                                            np.zeros(0), np.zeros(0), np.zeros(0), np.ones(sites), out)
    assert np.isnan(largest)
