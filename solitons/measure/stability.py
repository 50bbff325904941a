"""Is the energy bounded below, and is a relaxed state a minimum?

* `probe_density`: the derived criterion for quartic combinations (`terms.quartic_bound`)
  plus a numerical probe of the whole model density on random local fields (random unit
  n, random tangent derivatives, random Laplacian) stretched and squeezed over five
  decades of gradient strength.  A negative value means some local state lowers the
  energy; for first-derivative densities a helix n = (sin t cos kz, sin t sin kz, cos t)
  realises constant strain everywhere, so a negative density there makes the energy
  extensive and negative: not bounded below in infinite space.
* `lowest_modes`: the lowest eigenvalues of the Hessian on the tangent space of the
  product of spheres, by Lanczos (scipy.sparse.linalg.eigsh) on jax Hessian-vector
  products.  The Riemannian Hessian of E restricted to |n| = 1 is
  Hess[v] = P(D^2E[v]) - (n . dE/dn) v for tangent v (P: projection on the tangent
  plane; Absil, Mahony & Sepulchre, Optimization Algorithms on Matrix Manifolds, 2008,
  Prop. 5.5.4 for the sphere).  Eigenvalues are in Euler-Lagrange units (divided by
  NORMALISATION * cell volume), i.e. 1/length^2 like the squares of vibration
  frequencies.  Modes that lie mostly (overlap > 1/2) in the span of the translation
  generators d_i n, or of the rotation generators (spatial (x x grad) n and target
  e3 x n), are reported apart as symmetry (near-)zero modes; only other modes below
  NEGATIVE_MODE count as negative.
"""

from __future__ import annotations

import jax
import jax.numpy as jnp
import numpy as np
import scipy.sparse.linalg

from solitons.model.energy import Model, project_tangent
from solitons.model.terms import quartic_bound

NEGATIVE_MODE = -0.02  # eigenvalue below this (1/length^2) counts as clearly negative


def probe_density(terms, samples: int = 4000, seed: int = 0) -> dict:
    rng = np.random.default_rng(seed)
    n = rng.standard_normal((samples, 3))
    n /= np.linalg.norm(n, axis=-1, keepdims=True)
    d = rng.standard_normal((samples, 3, 3))
    d -= np.sum(d * n[:, None, :], -1, keepdims=True) * n[:, None, :]
    # rank-1 strains (a helix) as well as generic ones
    d[: samples // 4, 1:, :] = 0.0
    lap = rng.standard_normal((samples, 3))
    lowest = np.inf
    for stretch in (1e-2, 1e-1, 1.0, 10.0, 100.0):
        total = 0.0
        for term in terms:
            values = term.kind.density(jnp.asarray(n), jnp.asarray(stretch * d),
                                       jnp.asarray(stretch**2 * lap), **term.parameter_values())
            total = total + term.coupling * np.asarray(values)
        scale = np.max(np.abs(total)) or 1.0
        lowest = min(lowest, float(np.min(total) / scale))
    bound = quartic_bound(terms)
    negative = lowest < -1e-9 or not bound["bounded"]
    return {"negative": bool(negative), "lowest_relative": lowest, "quartic": bound}


def _tangent_basis(field: np.ndarray):
    """Two orthonormal tangent vectors per site, (Nx, Ny, Nz, 3) each."""
    helper = np.zeros_like(field)
    helper[..., 0] = 1.0
    near_x = np.abs(field[..., 0]) > 0.9
    helper[near_x] = np.array([0.0, 1.0, 0.0])
    e1 = helper - np.sum(helper * field, -1, keepdims=True) * field
    e1 /= np.linalg.norm(e1, axis=-1, keepdims=True)
    e2 = np.cross(field, e1)
    return e1, e2


def lowest_modes(model: Model, field, count: int = 8, tol: float = 1e-6, max_iterations: int | None = None) -> dict:
    """Lowest ``count`` Hessian eigenvalues of a (relaxed) field, with translation
    overlaps.  Held border sites are excluded."""
    if model.grid.stretched:
        raise ValueError("the Hessian study needs a uniform grid: on a stretched grid the eigenproblem "
                         "would need the site volumes as a metric (not built)")
    field = np.asarray(field, dtype=np.float64)
    scale = model.force_scale()
    free = model.grid.free_mask()[..., 0] > 0
    e1, e2 = _tangent_basis(field)
    field_j = jnp.asarray(field)
    e1_j, e2_j = jnp.asarray(e1), jnp.asarray(e2)
    free_j = jnp.asarray(free)
    size = int(free.sum())

    grad_fn = jax.grad(lambda f: model.energy(f))
    raw_gradient = grad_fn(field_j)
    normal_part = jnp.sum(raw_gradient * field_j, axis=-1, keepdims=True)

    def to_vectors(coefficients):
        a = jnp.zeros(free.shape).at[free_j].set(coefficients[:size])
        b = jnp.zeros(free.shape).at[free_j].set(coefficients[size:])
        return a[..., None] * e1_j + b[..., None] * e2_j

    def to_coefficients(vectors):
        return jnp.concatenate((jnp.sum(vectors * e1_j, -1)[free_j], jnp.sum(vectors * e2_j, -1)[free_j]))

    @jax.jit
    def hessian_vector(coefficients):
        v = to_vectors(coefficients)
        _, second = jax.jvp(grad_fn, (field_j,), (v,))
        return to_coefficients(project_tangent(field_j, second) - normal_part * v) / scale

    operator = scipy.sparse.linalg.LinearOperator(
        (2 * size, 2 * size), matvec=lambda x: np.asarray(hessian_vector(jnp.asarray(x))), dtype=np.float64)
    values, vectors = scipy.sparse.linalg.eigsh(operator, k=count, which="SA", tol=tol,
                                                maxiter=max_iterations)
    order = np.argsort(values)
    values, vectors = values[order], vectors[:, order]

    # symmetry generators, tangent vectors normalised: translations d_i n (central
    # differences), spatial rotations (x x grad)_i n, and the target rotation e3 x n
    coords = [c[..., None] for c in model.grid.mesh()]
    d = [(np.roll(field, -1, a) - np.roll(field, 1, a)) / (2 * h) for a, h in enumerate(model.grid.spacing)]
    rotations = [coords[1] * d[2] - coords[2] * d[1], coords[2] * d[0] - coords[0] * d[2],
                 coords[0] * d[1] - coords[1] * d[0]]
    internal = np.cross(np.array([0.0, 0.0, 1.0]), field)

    def normalised(vectors):
        c = np.asarray(to_coefficients(jnp.asarray(vectors)))
        norm = np.linalg.norm(c)
        return c / norm if norm > 0 else c

    def overlap(generators, k):
        basis, _ = np.linalg.qr(np.array([normalised(g) for g in generators]).T)
        return float(np.sum((basis.T @ vectors[:, k]) ** 2))

    translation_overlap = [overlap(d, k) for k in range(count)]
    rotation_overlap = [overlap(rotations + [internal], k) for k in range(count)]
    symmetric = [max(t, r) > 0.5 for t, r in zip(translation_overlap, rotation_overlap)]
    negative = [float(v) for v, sym in zip(values, symmetric) if v < NEGATIVE_MODE and not sym]
    return {
        "eigenvalues": [float(v) for v in values],
        "translation_overlap": translation_overlap,
        "rotation_overlap": rotation_overlap,
        "translation_modes": [float(v) for v, t in zip(values, translation_overlap) if t > 0.5],
        "rotation_modes": [float(v) for v, r, t in zip(values, rotation_overlap, translation_overlap)
                           if r > 0.5 and t <= 0.5],
        "negative_modes": len(negative),
        "threshold": NEGATIVE_MODE,
    }
