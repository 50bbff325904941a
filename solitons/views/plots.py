"""Figures of relaxed solitons (matplotlib, Agg backend; PNG files).

Nothing here is imported by the numerical core; the driver and the ``show`` command call
these functions at the edge.
"""

from __future__ import annotations

import sys
import textwrap
from pathlib import Path

import matplotlib

if "ipykernel" not in sys.modules:  # a notebook keeps its inline backend (figures shown)
    matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib import colors  # noqa: E402
from mpl_toolkits.mplot3d.art3d import Line3DCollection, Poly3DCollection  # noqa: E402
from skimage.measure import marching_cubes  # noqa: E402

from solitons.lattice.grid import Grid  # noqa: E402
from solitons.measure.curves import preimage_chains, projection_basis, projection_crossings  # noqa: E402

DPI = 110
DEFAULT_LEVEL = -0.8  # isosurface n3 = level: a tube around the position curve (n3 = -1)
PROJECTION = (0.25, 0.15, 1.0)  # generic view direction for crossings


def energy_centre(density: np.ndarray, grid: Grid) -> np.ndarray:
    """Site index nearest to the energy-weighted centre."""
    weights = np.clip(density, 0, None)
    total = weights.sum()
    if total == 0:
        return np.array([n // 2 for n in grid.shape])
    index = [np.arange(n) for n in grid.shape]
    centre = [float((weights.sum(axis=tuple(a for a in range(3) if a != k)) * index[k]).sum() / total)
              for k in range(3)]
    return np.round(centre).astype(int)


def _title_text(meta: dict) -> str:
    """Label, charge and energy; the model (terms and couplings) on a second line."""
    parts = []
    if meta.get("label"):
        parts.append(meta["label"])
    if meta.get("hopf_charge") is not None:
        parts.append(f"Q = {meta['hopf_charge']:.3f}")
    if meta.get("energy") is not None:
        parts.append(f"E = {meta['energy']:.4f}")
    text = "   ".join(parts)
    if meta.get("model"):
        text += f"\nmodel: {meta['model']}"
    return text


def soliton_window(field, grid: Grid, density, margin: float = 0.3) -> list[tuple[float, float]]:
    """Per axis, the physical interval holding the soliton: the sites where n3 < 0.9 or
    the density exceeds 1e-3 of its maximum, widened by ``margin`` of its width on each
    side and clipped to the box (the whole box when nothing qualifies)."""
    inside = (np.asarray(field)[..., 2] < 0.9) | (density > 1e-3 * max(float(np.max(density)), 1e-300))
    window = []
    for axis, x in enumerate(grid.axes()):
        hit = np.flatnonzero(np.any(inside, axis=tuple(a for a in range(3) if a != axis)))
        if not len(hit):
            window.append((float(x[0]), float(x[-1])))
            continue
        low, high = float(x[hit[0]]), float(x[hit[-1]])
        pad = margin * max(high - low, 4 * grid.spacing[axis])
        window.append((max(float(x[0]), low - pad), min(float(x[-1]), high + pad)))
    return window


def plot_slices(field, grid: Grid, density, path, meta: dict | None = None) -> Path:
    """n3 and energy density on the three coordinate planes through the energy centre."""
    meta = meta or {}
    centre = energy_centre(density, grid)
    axes_coords = grid.axes()
    names = "xyz"
    fig, axes = plt.subplots(2, 3, figsize=(13, 8), dpi=DPI, constrained_layout=True)
    emax = float(np.max(density)) if np.max(density) > 0 else 1.0
    window = soliton_window(field, grid, density)
    for col, normal in enumerate(range(3)):
        others = [a for a in range(3) if a != normal]
        index = [slice(None)] * 3
        index[normal] = centre[normal]
        extent = [axes_coords[others[0]][0], axes_coords[others[0]][-1],
                  axes_coords[others[1]][0], axes_coords[others[1]][-1]]
        plane = f"{names[normal]} = {axes_coords[normal][centre[normal]]:.2f}"
        for row, (values, cmap, norm, label) in enumerate((
            (field[tuple(index)][..., 2], "RdBu_r", colors.Normalize(-1, 1), "$n_3$"),
            (density[tuple(index)], "magma", colors.Normalize(0, emax), "energy density"),
        )):
            ax = axes[row, col]
            if grid.stretched:  # cells of unequal size: draw each at its physical place
                image = ax.pcolormesh(axes_coords[others[0]], axes_coords[others[1]], values.T, cmap=cmap,
                                      norm=norm, shading="nearest")
                ax.set_aspect("equal")
            else:
                image = ax.imshow(values.T, origin="lower", extent=extent, cmap=cmap, norm=norm,
                                  interpolation="nearest")
            if row == 0:
                ax.contour(axes_coords[others[0]], axes_coords[others[1]], values.T,
                           levels=[0.0], colors="k", linewidths=0.6)
            ax.set_xlim(*window[others[0]])
            ax.set_ylim(*window[others[1]])
            ax.set_xlabel(names[others[0]])
            ax.set_ylabel(names[others[1]])
            ax.set_title(f"{label} on {plane}")
            bar = fig.colorbar(image, ax=ax, shrink=0.85)
            bar.set_label("$n_3$ (dimensionless)" if row == 0 else "energy / length$^3$ (normalised)")
    spacing = ", ".join(f"{h:g}" for h in grid.spacing)
    if grid.stretched:
        spacing += " at the centre, stretch " + ", ".join(f"{s:g}" for s in grid.stretch)
    box = "x".join(f"{side:.3g}" for side in grid.side)
    fig.suptitle(f"{_title_text(meta)}\ngrid {'x'.join(map(str, grid.shape))}, h = {spacing}, box {box} "
                 f"(view zoomed to the soliton; model length units; black line: $n_3 = 0$)")
    return save_figure(fig, path)


def isosurface_mesh(field, grid: Grid, level: float = DEFAULT_LEVEL, refine: int = 1):
    """Marching-cubes mesh of n3 = level: vertices (model coordinates), faces, and the
    phase of n1 + i n2 at every vertex.  ``refine`` > 1 first interpolates the field
    (cubic splines) onto a grid that many times finer, in the box around the surface
    only: smaller facets for figures (the topology checks use refine = 1)."""
    from scipy.ndimage import map_coordinates, zoom

    n3 = field[..., 2]
    if not (n3.min() < level < n3.max()):
        return np.zeros((0, 3)), np.zeros((0, 3), int), np.zeros(0)
    offset = np.zeros(3)
    values = field
    if refine > 1:
        near = np.argwhere(n3 < level + 0.5 * (1.0 - level))
        low = np.maximum(near.min(axis=0) - 2, 0)
        high = np.minimum(near.max(axis=0) + 3, np.array(n3.shape))
        values = field[low[0]:high[0], low[1]:high[1], low[2]:high[2]]
        values = np.stack([zoom(values[..., c], refine, order=3, mode="nearest") for c in range(3)], axis=-1)
        offset = low.astype(float)
    verts, faces, _, _ = marching_cubes(values[..., 2], level)
    n1 = map_coordinates(values[..., 0], verts.T, order=1)
    n2 = map_coordinates(values[..., 1], verts.T, order=1)
    if refine > 1:  # fine index -> coarse fractional index (zoom maps the end points onto each other)
        counts = np.array(values.shape[:3], dtype=float)
        coarse = (high - low - 1).astype(float)
        verts = offset + verts * coarse / np.maximum(counts - 1, 1)
    coords = grid.index_to_position(verts)
    return coords, faces, np.arctan2(n2, n1)


def euler_characteristic(faces: np.ndarray) -> tuple[int, bool, int]:
    """(V - E + F, closed, components) of a triangle mesh; closed when every edge has
    exactly two faces."""
    if len(faces) == 0:
        return 0, True, 0
    edges = np.sort(np.concatenate([faces[:, [0, 1]], faces[:, [1, 2]], faces[:, [2, 0]]]), axis=1)
    unique, counts = np.unique(edges, axis=0, return_counts=True)
    vertices = np.unique(faces)
    # connected components by union-find over edges
    parent = {int(v): int(v) for v in vertices}

    def find(a):
        while parent[a] != a:
            parent[a] = parent[parent[a]]
            a = parent[a]
        return a

    for a, b in unique:
        ra, rb = find(int(a)), find(int(b))
        if ra != rb:
            parent[ra] = rb
    components = len({find(int(v)) for v in vertices})
    return len(vertices) - len(unique) + len(faces), bool(np.all(counts == 2)), components


def _shade(verts, faces, phase_at_faces):
    """Face colours: the phase colour times a Lambert brightness from vertex normals
    (area-weighted means of the adjacent faces' normals, averaged over each face's
    corners), which hides the facets that face normals show at h = 0.2."""
    face_normals = np.cross(verts[faces[:, 1]] - verts[faces[:, 0]], verts[faces[:, 2]] - verts[faces[:, 0]])
    vertex_normals = np.zeros_like(verts)
    for corner in range(3):
        np.add.at(vertex_normals, faces[:, corner], face_normals)
    vertex_normals /= np.maximum(np.linalg.norm(vertex_normals, axis=1, keepdims=True), 1e-300)
    light = np.array([0.4, -0.5, 0.75])
    light /= np.linalg.norm(light)
    brightness = (0.45 + 0.55 * np.abs(vertex_normals @ light))[faces].mean(axis=1)
    rgba = plt.get_cmap("hsv")((phase_at_faces + np.pi) / (2 * np.pi))
    rgba[:, :3] *= brightness[:, None]
    return rgba


def _set_equal_3d(ax, points):
    centre = 0.5 * (points.max(axis=0) + points.min(axis=0))
    radius = 0.55 * float(np.max(points.max(axis=0) - points.min(axis=0))) or 1.0
    for setter, c in zip((ax.set_xlim, ax.set_ylim, ax.set_zlim), centre):
        setter(c - radius, c + radius)
    ax.set_box_aspect((1, 1, 1), zoom=1.15)


def plot_isosurface(field, grid: Grid, path, meta: dict | None = None,
                    level: float = DEFAULT_LEVEL) -> Path:
    """Shaded isosurface n3 = level coloured by the phase of n1 + i n2."""
    meta = meta or {}
    verts, faces, phase = isosurface_mesh(field, grid, level, refine=2)
    fig = plt.figure(figsize=(8, 7.5), dpi=DPI)
    ax = fig.add_axes((0.0, 0.0, 0.86, 0.9), projection="3d")
    if len(faces):
        face_phase = np.angle(np.exp(1j * phase[faces]).mean(axis=1))
        shade = _shade(verts, faces, face_phase)  # edges in the face colour hide the seams between faces
        poly = Poly3DCollection(verts[faces], facecolors=shade, edgecolors=shade, linewidths=0.3)
        ax.add_collection3d(poly)
        _set_equal_3d(ax, verts)
        mappable = plt.cm.ScalarMappable(cmap="hsv", norm=colors.Normalize(-np.pi, np.pi))
        bar = fig.colorbar(mappable, ax=ax, shrink=0.6, pad=0.08)
        bar.set_label("phase of $n_1 + i n_2$ (rad)")
        bar.set_ticks([-np.pi, 0, np.pi], labels=[r"$-\pi$", "0", r"$\pi$"])
    else:
        ax.text2D(0.5, 0.5, f"no isosurface n3 = {level}", transform=ax.transAxes, ha="center")
    ax.set_xlabel("x")
    ax.set_ylabel("y")
    ax.set_zlabel("z")
    ax.view_init(elev=35, azim=-60)
    ax.set_title(f"{_title_text(meta)}\nisosurface $n_3 = {level}$")
    return save_figure(fig, path)


def plot_curves(field, grid: Grid, path, meta: dict | None = None, direction=PROJECTION) -> Path:
    """The position curve (preimage of a value next to -e3) and the preimage of a second
    value (n3 = -0.27; the values of solitons.measure.knots), in 3D and projected; their Gauss
    linking number is the Hopf charge
    (docs/references.md [R7]), given in the title with the crossings of the position
    curves' projection (the input of the knot type)."""
    from solitons.measure.curves import linking_number
    from solitons.measure.knots import POSITION_VALUE, SHARE_VALUE

    meta = meta or {}
    chains = preimage_chains(field, grid, POSITION_VALUE)
    others = preimage_chains(field, grid, SHARE_VALUE)
    fig = plt.figure(figsize=(13, 6.8), dpi=DPI, constrained_layout=True)
    ax3 = fig.add_subplot(1, 2, 1, projection="3d")
    ax2 = fig.add_subplot(1, 2, 2)
    palette = plt.get_cmap("tab10")
    u, v, _ = projection_basis(direction)
    all_points = []
    for index, (points, closed) in enumerate(chains):
        loop = np.vstack([points, points[:1]]) if closed else points
        colour = palette(index % 10)
        ax3.add_collection3d(Line3DCollection([loop], colors=[colour], linewidths=2.5))
        ax2.plot(loop @ u, loop @ v, color=colour, lw=2,
                 label=f"position curve {index + 1}{'' if closed else ' (open: cut by the box)'}")
        all_points.append(points)
    for index, (points, closed) in enumerate(others):
        loop = np.vstack([points, points[:1]]) if closed else points
        ax3.add_collection3d(Line3DCollection([loop], colors=["0.45"], linewidths=1.2, linestyles="--"))
        ax2.plot(loop @ u, loop @ v, color="0.45", lw=1.0, ls="--",
                 label=f"second preimage ($n_3 = {SHARE_VALUE[2]:.2f}$)" if index == 0 else None)
        all_points.append(points)
    closed_curves = [p for p, c in chains if c]
    closed_others = [p for p, c in others if c]
    crossings = projection_crossings(closed_curves, direction)
    for point, over, under in crossings:
        ax2.plot(*point, "o", ms=9, mfc="white", mec="k", zorder=5)
    # oriented along B the Gauss linking number is -Q in this package's sign convention (knots.py)
    link = -sum(linking_number(p, q) for p in closed_curves for q in closed_others)
    if all_points:
        _set_equal_3d(ax3, np.vstack(all_points))
        ax2.legend(loc="upper right", fontsize=8)
    else:
        ax2.text(0.5, 0.5, "no position curve found", transform=ax2.transAxes, ha="center")
    ax3.set_xlabel("x")
    ax3.set_ylabel("y")
    ax3.set_zlabel("z")
    ax3.set_title(f"position curve $n \\approx -e_3$ (solid),\nsecond preimage (dashed): linking number {link:.3f}")
    ax2.set_aspect("equal")
    ax2.set_xlabel("u")
    ax2.set_ylabel("v")
    ax2.set_title(f"projection along {tuple(round(c, 2) for c in direction)}\ncircles: the "
                  f"{len(crossings)} crossings of the position curves")
    fig.suptitle(_title_text(meta))
    return save_figure(fig, path)


def plot_history(history: dict, path, meta: dict | None = None) -> Path:
    """Energy above its final value, largest force, virial and charge against step."""
    meta = meta or {}
    step = np.asarray(history["step"])
    energy = np.asarray(history["energy"])
    force = np.asarray(history["force"])
    fig, axes = plt.subplots(2, 2, figsize=(12, 8), dpi=DPI, constrained_layout=True)
    if len(step):
        excess = energy - energy.min()
        positive = excess > 0
        axes[0, 0].semilogy(step[positive], excess[positive], lw=1.2)
        axes[0, 1].semilogy(step, force, lw=1.2, color="tab:red")
    axes[0, 0].set_title(f"energy above final ({energy.min():.6f})" if len(step) else "energy")
    axes[0, 1].set_title("largest tangent force (Euler-Lagrange units)")
    monitor = np.asarray(history.get("monitor_step", []))
    if len(monitor):
        axes[1, 0].plot(monitor, history["virial"], "o-", ms=3)
        axes[1, 0].axhline(0, color="k", lw=0.6)
        charge = np.asarray(history["hopf_charge"])
        axes[1, 1].plot(monitor, charge, "o-", ms=3, color="tab:green")
        axes[1, 1].ticklabel_format(axis="y", useOffset=False)
        spread = max(float(np.ptp(charge)), 1e-3)
        middle = 0.5 * (charge.max() + charge.min())
        axes[1, 1].set_ylim(middle - 0.75 * spread, middle + 0.75 * spread)
        axes[1, 1].set_title(f"Hopf charge (final {charge[-1]:.6f})")
    else:
        axes[1, 1].set_title("Hopf charge")
    axes[1, 0].set_title("virial residual  (sum over axes of h dE/dh) / E")
    for ax in axes.flat:
        ax.set_xlabel("step")
        ax.grid(alpha=0.3)
    fig.suptitle(f"relaxation history   {_title_text(meta)}")
    return save_figure(fig, path)


def plot_gallery(entries: list[dict], path, columns: int = 4, level: float = DEFAULT_LEVEL) -> Path:
    """One panel per solution: its isosurface, zoomed to fill the panel, with label, Q, E
    and the surface's largest extent (panels differ in scale); one shared phase colour bar.
    ``entries`` hold ``field``, ``grid`` and the keys used in titles (label, hopf_charge,
    energy, model).  With ``path`` None the figure is returned."""
    columns = max(1, min(columns, len(entries)))
    rows = max(1, -(-len(entries) // columns))
    panel = 3.6  # inches per panel
    bar_width = 0.9
    header = 0.55  # inches for the figure title
    fig = plt.figure(figsize=(panel * columns + bar_width, panel * rows + header), dpi=DPI)
    width_fraction = panel * columns / (panel * columns + bar_width)
    top = 1.0 - header / (panel * rows + header)
    for k, entry in enumerate(entries):
        row, col = divmod(k, columns)
        box = (col * width_fraction / columns, top * (1.0 - (row + 1) / rows),
               width_fraction / columns, top / rows)
        ax = fig.add_axes(box, projection="3d")
        verts, faces, phase = isosurface_mesh(entry["field"], entry["grid"], level, refine=2)
        extent = ""
        if len(faces):
            face_phase = np.angle(np.exp(1j * phase[faces]).mean(axis=1))
            shade = _shade(verts, faces, face_phase)
            ax.add_collection3d(Poly3DCollection(verts[faces], facecolors=shade, edgecolors=shade,
                                                 linewidths=0.2))
            _set_equal_3d(ax, verts)
            ax.set_box_aspect((1, 1, 1), zoom=1.3)
            extent = f"   extent {float(np.max(np.ptp(verts, axis=0))):.2f}"
        else:
            ax.text2D(0.5, 0.5, f"no surface n3 = {level}", transform=ax.transAxes, ha="center")
        ax.view_init(elev=35, azim=-60)
        ax.set_axis_off()
        numbers = _title_text({"hopf_charge": entry.get("hopf_charge"), "energy": entry.get("energy")})
        model = ("\n" + textwrap.fill(entry["model"], 60)) if entry.get("model") else ""
        ax.text2D(0.5, 0.99, f"{entry.get('label') or ''}\n{numbers}{extent}{model}", transform=ax.transAxes,
                  ha="center", va="top", fontsize=9 if not model else 8)
    bar_ax = fig.add_axes((width_fraction + 0.15 * bar_width / fig.get_figwidth(), 0.15,
                           0.22 * bar_width / fig.get_figwidth(), 0.65))
    bar = fig.colorbar(plt.cm.ScalarMappable(cmap="hsv", norm=colors.Normalize(-np.pi, np.pi)), cax=bar_ax)
    bar.set_label("phase of $n_1 + i n_2$ (rad)")
    bar.set_ticks([-np.pi, 0, np.pi], labels=[r"$-\pi$", "0", r"$\pi$"])
    fig.suptitle(f"isosurfaces $n_3 = {level}$ coloured by the phase of $n_1 + i n_2$\neach panel zoomed to "
                 "its surface (extent in model length units)", fontsize=10, y=0.995, va="top")
    return save_figure(fig, path)


def plot_continuum(report: dict, path) -> Path:
    """Energy and virial of each level against h^p with the fitted lines and limits
    (report of `solitons.campaigns.continuum.summarise`)."""
    order, rows, fits = report["order"], report["levels"], report["fits"]
    x = np.array([r["spacing"] for r in rows]) ** order
    h_line = np.linspace(0.0, 1.01 * max(r["spacing"] for r in rows), 80)
    fig, axes = plt.subplots(1, 2, figsize=(12, 4.5), dpi=DPI, constrained_layout=True)
    for ax, key, label in ((axes[0], "energy", "E"), (axes[1], "virial", "virial")):
        fit = fits[key]
        ax.plot(x, [r[key] for r in rows], "o", ms=6, label="lattice")
        curve = fit["limit"] + fit["slope"] * h_line**order + fit.get("correction", 0.0) * h_line ** (order + 2)
        terms = f" + c h$^{{{order}}}$" + (f" + d h$^{{{order + 2}}}$" if fit.get("correction") else "")
        ax.plot(h_line**order, curve, "-", lw=1, label=f"fit {label}$_\\infty${terms}")
        ax.errorbar([0.0], [fit["limit"]], yerr=[fit["error"]], fmt="s", color="tab:red", capsize=4,
                    label=f"{label}$_\\infty$ = {fit['limit']:.6f} $\\pm$ {fit['error']:.1e}")
        ax.set_xlabel(f"h$^{{{order}}}$ (model length units$^{{{order}}}$)")
        ax.set_ylabel(f"{label} (Battye-Sutcliffe units)" if key == "energy" else label)
        ax.ticklabel_format(axis="y", useOffset=False)
        ax.grid(alpha=0.3)
        ax.legend(fontsize=8)
    fig.suptitle(f"continuum limit over {len(rows)} resolutions, box side {rows[0]['box_side']:.4g}")
    return save_figure(fig, path)


def save_figure(fig, path):
    """Write a PNG atomically (temporary name, then rename) and close the figure; with
    ``path`` None return the figure instead (the Python API's `Result.figures`)."""
    if path is None:
        plt.close(fig)  # out of pyplot's keeping; the object still draws and displays
        return fig
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.tmp.png")
    fig.savefig(tmp)
    plt.close(fig)
    tmp.replace(path)
    return path


def write_figures(result: dict, out_dir, level: float = DEFAULT_LEVEL) -> list[Path]:
    """All single-run figures of a loaded result (see `solitons.io.results.read_result`)."""
    out = Path(out_dir)
    summary = result["summary"]
    meta = {"label": summary.get("label"), "hopf_charge": summary.get("hopf_charge"),
            "energy": summary.get("energy"), "model": summary.get("model")}
    field, grid = result["field"], result["grid"]
    return [
        plot_slices(field, grid, result["energy_density"], out / "slices.png", meta),
        plot_isosurface(field, grid, out / "isosurface.png", meta, level),
        plot_curves(field, grid, out / "curves.png", meta),
        plot_history(result["history"], out / "history.png", meta),
    ]
