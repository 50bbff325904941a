"""Position curves (preimages of a point of S^2) as closed polylines, Gauss linking
numbers, and crossings of a planar projection.

The preimage of a regular value p is a set of closed curves.  After a rotation of the
target that takes p to -e3 (followed by a fixed rotation about e3, so that lattice
symmetry planes do not make the construction degenerate), the curves are where n1 = 0 and
n2 = 0 with n3 < 0: we take the surface n1 = 0 from marching cubes (scikit-image), find
on each of its triangles the segment where the linearly interpolated n2 vanishes, keep the
segments with n3 < 0 and chain them through the mesh edges they cross.
"""

from __future__ import annotations

from collections import defaultdict

import numpy as np
from scipy.ndimage import map_coordinates
from skimage.measure import marching_cubes

from solitons.lattice.grid import Grid
from solitons.measure.topology import topological_field

_GENERIC_ANGLE = 0.3141592  # rotation about e3 applied before extracting curves


def _rotation_taking(p: np.ndarray, target: np.ndarray) -> np.ndarray:
    """Rotation matrix R with R p = target (unit vectors), by Rodrigues' formula."""
    p = p / np.linalg.norm(p)
    target = target / np.linalg.norm(target)
    axis = np.cross(p, target)
    sin = np.linalg.norm(axis)
    cos = float(np.dot(p, target))
    if sin < 1e-12:
        if cos > 0:
            return np.eye(3)
        # antipodal: rotate by pi about any axis perpendicular to p
        helper = np.array([1.0, 0, 0]) if abs(p[0]) < 0.9 else np.array([0, 1.0, 0])
        axis = np.cross(p, helper)
        axis /= np.linalg.norm(axis)
        return 2 * np.outer(axis, axis) - np.eye(3)
    axis = axis / sin
    k = np.array([[0, -axis[2], axis[1]], [axis[2], 0, -axis[0]], [-axis[1], axis[0], 0]])
    return np.eye(3) + sin * k + (1 - cos) * k @ k


def preimage_chains(field: np.ndarray, grid: Grid, value=(0.0, 0.0, -1.0), b_field=None):
    """Curves where the field equals ``value``, as (points, closed) pairs: points (M, 3)
    in model coordinates (last point not repeated); closed is False for a chain cut by
    the box.

    Each chain is oriented along the topological field B (B_k = (1/2) eps_kij F_ij is
    tangent to every preimage curve): the orientation induced from those of R^3 and S^2.
    The Gauss linking number of two preimages so oriented equals the bare Whitehead
    integral (helicity of B; Pontryagin), which is minus our Q: with the sign convention
    of solitons.measure.topology, which makes the Hopf map Q = +1, linking = -Q (checked in the
    tests for the Hopf map and axial maps up to Q = 4).  ``b_field`` may be passed to
    reuse it."""
    c, s = np.cos(_GENERIC_ANGLE), np.sin(_GENERIC_ANGLE)
    spin = np.array([[c, -s, 0], [s, c, 0], [0, 0, 1.0]])
    rotation = spin @ _rotation_taking(np.asarray(value, float), np.array([0, 0, -1.0]))
    rotated = field @ rotation.T
    n1, n2, n3 = rotated[..., 0], rotated[..., 1], rotated[..., 2]
    if n1.min() >= 0 or n1.max() <= 0:
        return []
    verts, faces, _, _ = marching_cubes(n1, 0.0)  # vertices in index units
    n2v = map_coordinates(n2, verts.T, order=1)
    n3v = map_coordinates(n3, verts.T, order=1)

    segments = []  # pairs of edge keys
    points = {}
    for tri in faces:
        crossings = []
        for a, b in ((tri[0], tri[1]), (tri[1], tri[2]), (tri[2], tri[0])):
            va, vb = n2v[a], n2v[b]
            if (va < 0) != (vb < 0):
                t = va / (va - vb)
                key = (min(a, b), max(a, b))
                if key not in points:
                    points[key] = (verts[a] + t * (verts[b] - verts[a]), n3v[a] + t * (n3v[b] - n3v[a]))
                crossings.append(key)
        if len(crossings) == 2 and points[crossings[0]][1] < 0 and points[crossings[1]][1] < 0:
            segments.append(tuple(crossings))

    neighbours = defaultdict(list)
    for a, b in segments:
        neighbours[a].append(b)
        neighbours[b].append(a)
    spacing = np.asarray(grid.spacing)
    chains, seen = [], set()
    # start open chains at their ends first, then the closed loops
    starts = [k for k in neighbours if len(neighbours[k]) == 1] + list(neighbours)
    for start in starts:
        if start in seen:
            continue
        chain, previous, current = [start], None, start
        seen.add(start)
        closed = False
        while True:
            nxt = [k for k in neighbours[current] if k != previous]
            if not nxt:
                break
            candidate = nxt[0]
            if candidate == start:
                closed = True
                break
            if candidate in seen:
                break
            chain.append(candidate)
            seen.add(candidate)
            previous, current = current, candidate
        if len(chain) >= 3:
            index_coords = np.array([points[k][0] for k in chain])
            chains.append((index_coords, closed))
    if not chains:
        return []
    if b_field is None:
        b_field = np.asarray(topological_field(field, grid))
    oriented = []
    for index_coords, closed in chains:
        b_at = np.stack([map_coordinates(b_field[..., k], index_coords.T, order=1) for k in range(3)], -1)
        tangent = np.gradient(index_coords * spacing, axis=0)  # computational coordinates, like B
        if np.sum(tangent * b_at) < 0:
            index_coords = index_coords[::-1]
        oriented.append((grid.index_to_position(index_coords), closed))
    return oriented


def curve_length(points: np.ndarray, closed: bool = True) -> float:
    steps = np.diff(np.vstack([points, points[:1]]) if closed else points, axis=0)
    return float(np.linalg.norm(steps, axis=1).sum())


def linking_number(curve_a: np.ndarray, curve_b: np.ndarray) -> float:
    """Gauss linking integral of two closed polylines, (1/4 pi) sum over segment pairs of
    (r_a - r_b) . (dr_a x dr_b) / |r_a - r_b|^3 at segment midpoints (accurate when the
    curves are apart by more than a segment length; round to the nearest integer)."""
    a_next = np.roll(curve_a, -1, axis=0)
    b_next = np.roll(curve_b, -1, axis=0)
    da, db = a_next - curve_a, b_next - curve_b
    ma, mb = 0.5 * (a_next + curve_a), 0.5 * (b_next + curve_b)
    r = ma[:, None, :] - mb[None, :, :]
    cross = np.cross(da[:, None, :], db[None, :, :])
    dist3 = np.linalg.norm(r, axis=-1) ** 3
    return float(np.sum(np.sum(r * cross, axis=-1) / dist3) / (4 * np.pi))


def projection_crossings(curves: list[np.ndarray], direction=(0.0, 0.0, 1.0)):
    """Crossings of the closed polylines seen along ``direction``.

    Returns a list of (point_2d, over_curve, under_curve) with point_2d in the projection
    plane coordinates (u, v) of `projection_basis`."""
    u, v, w = projection_basis(direction)
    segs = []
    for index, curve in enumerate(curves):
        nxt = np.roll(curve, -1, axis=0)
        for k in range(len(curve)):
            segs.append((index, k, curve[k], nxt[k]))
    if not segs:
        return []
    p = np.array([[s[2] @ u, s[2] @ v] for s in segs])
    q = np.array([[s[3] @ u, s[3] @ v] for s in segs])
    depth_p = np.array([s[2] @ w for s in segs])
    depth_q = np.array([s[3] @ w for s in segs])
    owner = np.array([s[0] for s in segs])
    position = np.array([s[1] for s in segs])
    lengths = np.array([len(c) for c in curves])
    crossings = []
    d = q - p
    for i in range(len(segs)):
        # solve p_i + t d_i = p_j + s d_j for all j > i at once
        j = np.arange(i + 1, len(segs))
        denom = d[i, 0] * d[j, 1] - d[i, 1] * d[j, 0]
        ok = np.abs(denom) > 1e-14
        diff = p[j] - p[i]
        t = np.where(ok, (diff[:, 0] * d[j, 1] - diff[:, 1] * d[j, 0]) / np.where(ok, denom, 1), -1)
        s = np.where(ok, (diff[:, 0] * d[i, 1] - diff[:, 1] * d[i, 0]) / np.where(ok, denom, 1), -1)
        hit = ok & (t > 0) & (t < 1) & (s > 0) & (s < 1)
        same = owner[j] == owner[i]
        gap = np.abs(position[j] - position[i])
        adjacent = same & ((gap <= 1) | (gap >= lengths[owner[i]] - 1))
        for jj, tt, ss in zip(j[hit & ~adjacent], t[hit & ~adjacent], s[hit & ~adjacent]):
            zi = depth_p[i] + tt * (depth_q[i] - depth_p[i])
            zj = depth_p[jj] + ss * (depth_q[jj] - depth_p[jj])
            point = p[i] + tt * d[i]
            over, under = (owner[i], owner[jj]) if zi > zj else (owner[jj], owner[i])
            crossings.append((point, int(over), int(under)))
    return crossings


def projection_basis(direction):
    """Orthonormal (u, v, w) with w along ``direction``."""
    w = np.asarray(direction, float)
    w /= np.linalg.norm(w)
    helper = np.array([1.0, 0, 0]) if abs(w[0]) < 0.9 else np.array([0, 1.0, 0])
    u = np.cross(helper, w)
    u /= np.linalg.norm(u)
    return u, np.cross(w, u), w
