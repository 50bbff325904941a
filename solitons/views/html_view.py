"""An interactive 3D view of a relaxed soliton as one self-contained HTML file (plotly).

The page holds the isosurface n3 = level coloured by the phase of n1 + i n2 (rotate and
zoom with the mouse), the position curves (n close to -e3, solid) and the preimage of a
second value (dashed), whose linking number is the Hopf charge, and a table of the run's
numbers.  plotly.js is written into the file, so the page works offline and from any
directory; nothing is fetched.  I/O at the edge: the numerical core never imports this.
"""

from __future__ import annotations

import html
from pathlib import Path

import numpy as np

from solitons.lattice.grid import Grid

# plotly's cyclic hue scale matches matplotlib's "hsv" used by the PNG figures
PHASE_SCALE = "HSV"
_ROUND = 5  # decimals kept for vertex coordinates (model length units): keeps the file small


def _mesh_trace(field, grid: Grid, level: float):
    import plotly.graph_objects as go

    from solitons.views.plots import isosurface_mesh

    verts, faces, phase = isosurface_mesh(field, grid, level, refine=2)
    if not len(faces):
        return None, verts
    verts = np.round(verts, _ROUND)
    trace = go.Mesh3d(
        x=verts[:, 0], y=verts[:, 1], z=verts[:, 2], i=faces[:, 0], j=faces[:, 1], k=faces[:, 2],
        intensity=np.round(phase, 4), intensitymode="vertex", colorscale=PHASE_SCALE, cmin=-np.pi, cmax=np.pi,
        flatshading=False, lighting={"ambient": 0.45, "diffuse": 0.75, "specular": 0.15, "roughness": 0.6},
        colorbar={"title": {"text": "phase of n1 + i n2 (rad)"}, "tickvals": [-np.pi, 0, np.pi],
                  "ticktext": ["-π", "0", "π"], "len": 0.6},
        name=f"isosurface n3 = {level}", showlegend=True, hovertemplate="x %{x:.2f}<br>y %{y:.2f}<br>z %{z:.2f}<extra></extra>",
    )
    return trace, verts


def _curve_traces(field, grid: Grid):
    import plotly.graph_objects as go

    from solitons.measure.curves import linking_number, preimage_chains
    from solitons.measure.knots import POSITION_VALUE, SHARE_VALUE

    traces, points = [], []
    chains = preimage_chains(field, grid, POSITION_VALUE)
    others = preimage_chains(field, grid, SHARE_VALUE)
    for index, (curve, closed) in enumerate(chains):
        loop = np.vstack([curve, curve[:1]]) if closed else curve
        traces.append(go.Scatter3d(
            x=loop[:, 0], y=loop[:, 1], z=loop[:, 2], mode="lines", line={"width": 7, "color": "black"},
            name=f"position curve {index + 1}" + ("" if closed else " (open: cut by the box)")))
        points.append(curve)
    for index, (curve, closed) in enumerate(others):
        loop = np.vstack([curve, curve[:1]]) if closed else curve
        traces.append(go.Scatter3d(
            x=loop[:, 0], y=loop[:, 1], z=loop[:, 2], mode="lines",
            line={"width": 4, "color": "rgb(110,110,110)", "dash": "dash"},
            name=f"second preimage (n3 = {SHARE_VALUE[2]:.2f})", showlegend=index == 0,
            legendgroup="second"))
        points.append(curve)
    # oriented along B the Gauss linking number is -Q in this package's convention (solitons.measure.knots)
    link = -sum(linking_number(p, q) for p, c in chains if c for q, d in others if d)
    return traces, points, float(link)


def _number_rows(summary: dict, grid: Grid, link: float, level: float) -> list[tuple[str, str]]:
    def number(key, fmt):
        value = summary.get(key)
        return "n/a" if value is None else format(value, fmt)

    rows = [
        ("model", str(summary.get("model") or "n/a")),
        ("energy E (Battye-Sutcliffe units)", number("energy", ".6f")),
    ]
    for name, value in (summary.get("terms") or {}).items():
        rows.append((f"  term {name}", f"{value:.6f}"))
    rows += [
        ("Hopf charge (Whitehead integral)", number("hopf_charge", ".6f")),
        ("linking number of the curves shown", f"{link:.3f}"),
        ("virial residual", number("virial", "+.2e")),
        ("verdict", str(summary.get("verdict", "n/a"))),
        ("status", str(summary.get("status", "n/a"))),
        ("label", str(summary.get("label") or "n/a")),
        ("grid", "x".join(map(str, grid.shape)) + f", h = {', '.join(f'{h:g}' for h in grid.spacing)}"
         + (f" at the centre, stretch {', '.join(f'{s:g}' for s in grid.stretch)}" if grid.stretched else "")
         + f", box {'x'.join(f'{s:.3g}' for s in grid.side)}, {grid.boundary}"),
        ("isosurface", f"n3 = {level}"),
    ]
    return rows


def view_html(field, grid: Grid, summary: dict, level: float) -> str:
    """The page as text: a plotly figure (its javascript inlined) and the numbers."""
    import plotly.graph_objects as go
    import plotly.io as pio

    mesh, verts = _mesh_trace(np.asarray(field), grid, level)
    curves, points, link = _curve_traces(np.asarray(field), grid)
    figure = go.Figure(([mesh] if mesh is not None else []) + curves)
    title = " · ".join(part for part in (
        summary.get("label"), f"Q = {summary['hopf_charge']:.3f}" if summary.get("hopf_charge") is not None else None,
        f"E = {summary['energy']:.4f}" if summary.get("energy") is not None else None) if part)
    if summary.get("model"):
        title += f"<br><sub>model: {html.escape(str(summary['model']))}</sub>"
    extent = np.vstack([verts] + points) if len(verts) or points else None
    scene = {"aspectmode": "data", "xaxis": {"title": {"text": "x"}}, "yaxis": {"title": {"text": "y"}},
             "zaxis": {"title": {"text": "z"}}, "camera": {"eye": {"x": 1.3, "y": -1.5, "z": 1.1}}}
    if extent is not None:
        low, high = extent.min(axis=0), extent.max(axis=0)
        pad = 0.08 * float(np.max(high - low))
        for axis, lo, hi in zip("xyz", low, high):
            scene[f"{axis}axis"]["range"] = [float(lo - pad), float(hi + pad)]
    figure.update_layout(title={"text": title}, scene=scene, height=720, margin={"l": 0, "r": 0, "t": 70, "b": 0},
                         legend={"x": 0.01, "y": 0.98, "bgcolor": "rgba(255,255,255,0.7)"})
    if mesh is None:
        figure.add_annotation(text=f"no isosurface n3 = {level} in this field", showarrow=False,
                              x=0.5, y=0.5, xref="paper", yref="paper")
    plot = pio.to_html(figure, include_plotlyjs=True, full_html=False,
                       config={"displaylogo": False, "responsive": True})
    table = "\n".join(f"<tr><th>{html.escape(k)}</th><td>{html.escape(v)}</td></tr>"
                      for k, v in _number_rows(summary, grid, link, level))
    warnings = "".join(f"<li>{html.escape(str(w))}</li>" for w in summary.get("warnings") or [])
    warning_block = f'<h2 class="warn">Warnings</h2><ul class="warn">{warnings}</ul>' if warnings else ""
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<title>{html.escape(summary.get('label') or 'soliton')} · solitons view</title>
<style>
body {{ font-family: sans-serif; margin: 0 1em; color: #222; }}
table {{ border-collapse: collapse; margin: 0.5em 0 1.5em; }}
th, td {{ text-align: left; padding: 2px 14px 2px 0; font-weight: normal; }}
th {{ color: #555; }}
.warn {{ color: #b00000; }}
</style></head>
<body>
{plot}
{warning_block}
<table>
{table}
</table>
<p>Drag to rotate, scroll to zoom; click a legend entry to hide it. Lengths in model units.</p>
</body></html>
"""


def write_view(result: dict, path, level: float) -> Path:
    """Write the page for a loaded result (`solitons.io.results.read_result`) atomically."""
    from solitons.io.results import atomic_write_text

    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    atomic_write_text(path, view_html(result["field"], result["grid"], result["summary"], level))
    return path
