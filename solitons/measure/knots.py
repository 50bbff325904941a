"""Knot types of closed polylines and a label for a whole solution.

The knot type of a closed curve is read from a planar diagram: the curve is projected
along a generic direction, its self-crossings (with over / under and sign) are turned into
a diagram by spherogram's `Crossing` / `Link`, simplified by Reidemeister moves, and the
knot Floer homology of the result (Ozsvath-Szabo's invariant, computed by the
``knot_floer_homology`` package that spherogram uses) gives the Alexander polynomial as
its graded Euler characteristic, Delta(t) = sum (-1)^m rank(HFK_m(a)) t^a, and the Seifert
genus.  The pair names the knot for the small knots tabulated below (Rolfsen's table:
unknot 0_1, trefoil 3_1, figure-eight 4_1, 5_1 = T(2, 5), 5_2, 7_1 = T(2, 7) and
8_19 = T(3, 4); Alexander polynomials from the standard knot tables, common
practice); anything else is reported by its polynomial.

Label of a solution (README, "Solution labels"): the position curve (the preimage of a
value next to -e3) split into components; each component gets its knot name and its share
of the charge, the linking number of that component with the preimage of a second, distant
value.  The class follows the literature's A / K / L classes (Sutcliffe 2007):

- ``A_{a,b}``: the energy density is axially symmetric (`solitons.measure.symmetry`), whatever
  the position curve looks like (for A_{2,2} it is two linked circles).  b is the number of
  times the position curve winds about the symmetry axis (the b-fold circle Z0 = 0 of
  W = Z1^a / Z0^b), a = Q / b;
- otherwise ``K:`` one knotted component, ``L:`` several components, ``A~:`` one
  unknotted component without axial symmetry (a buckled or twisted unknot); e.g.
  ``K:trefoil[7]``, ``L:unknot[2]+unknot[3] lk=1``, ``A~:unknot[3]``.
"""

from __future__ import annotations

import numpy as np

from solitons.measure.curves import linking_number, preimage_chains, projection_basis
from solitons.measure.topology import topological_field

# Alexander polynomial (coefficients from the lowest power, symmetric, Delta(1) = 1) and
# Seifert genus -> name.  Standard knot tables (common practice).
KNOWN_KNOTS = {
    ((1,), 0): "unknot",
    ((1, -1, 1), 1): "trefoil",
    ((-1, 3, -1), 1): "figure-eight",
    ((1, -1, 1, -1, 1), 2): "5_1",
    ((2, -3, 2), 1): "5_2",
    ((1, -1, 1, -1, 1, -1, 1), 3): "7_1",
    ((1, -1, 0, 1, 0, -1, 1), 3): "8_19",
}

# Two generic directions in the target: the value whose preimage is the "position curve"
# (tilted 0.05 rad from -e3 so that multiple curves of symmetric maps are resolved) and a
# distant value whose preimage measures each component's share of the charge.
POSITION_VALUE = (np.sin(0.05) * np.cos(0.7), np.sin(0.05) * np.sin(0.7), -np.cos(0.05))
SHARE_VALUE = (np.sin(1.3) * np.cos(2.9), np.sin(1.3) * np.sin(2.9), -np.cos(1.3))


def _self_crossings(curve: np.ndarray, u: np.ndarray, v: np.ndarray, w: np.ndarray):
    """Self-crossings of a closed polyline in the (u, v) projection: list of
    (position_over, position_under, sign) with positions = segment index + parameter."""
    nxt = np.roll(curve, -1, axis=0)
    p = np.stack((curve @ u, curve @ v), -1)
    d = np.stack((nxt @ u, nxt @ v), -1) - p
    depth, depth_next = curve @ w, nxt @ w
    m = len(curve)
    found = []
    for i in range(m - 2):
        j = np.arange(i + 2, m if i > 0 else m - 1)  # skip neighbours (and the closing pair)
        denom = d[i, 0] * d[j, 1] - d[i, 1] * d[j, 0]
        ok = np.abs(denom) > 1e-15
        diff = p[j] - p[i]
        safe = np.where(ok, denom, 1.0)
        t = (diff[:, 0] * d[j, 1] - diff[:, 1] * d[j, 0]) / safe
        s = (diff[:, 0] * d[i, 1] - diff[:, 1] * d[i, 0]) / safe
        hit = ok & (t >= 0) & (t < 1) & (s >= 0) & (s < 1)
        for jj, tt, ss in zip(j[hit], t[hit], s[hit]):
            zi = depth[i] + tt * (depth_next[i] - depth[i])
            zj = depth[jj] + ss * (depth_next[jj] - depth[jj])
            if zi > zj:
                over, under, d_over, d_under = i + tt, jj + ss, d[i], d[jj]
            else:
                over, under, d_over, d_under = jj + ss, i + tt, d[jj], d[i]
            sign = 1 if d_under[0] * d_over[1] - d_under[1] * d_over[0] > 0 else -1
            found.append((float(over), float(under), sign))
    return found


def diagram(curve: np.ndarray, direction=None):
    """spherogram Link of the closed polyline seen along ``direction`` (a fixed generic
    direction by default), or None when the projection has no crossing (an unknot)."""
    from spherogram import Crossing, Link

    if direction is None:
        direction = (0.2873, -0.4512, 0.8451)
    u, v, w = projection_basis(direction)
    crossings = _self_crossings(np.asarray(curve, float), u, v, w)
    if not crossings:
        return None
    # spherogram's convention: strands 0..3 counterclockwise, the under-strand enters at 0
    # and leaves at 2; the over-strand goes 1 -> 3 if it crosses the under-strand from
    # its right to its left (the cross product of under and over directions is positive),
    # else 3 -> 1.
    objects = [Crossing(f"c{k}") for k in range(len(crossings))]
    passages = []  # (position along the curve, crossing, slot entered, slot left)
    for k, (over, under, sign) in enumerate(crossings):
        passages.append((under, objects[k], 0, 2))
        passages.append((over, objects[k], 1, 3) if sign > 0 else (over, objects[k], 3, 1))
    passages.sort(key=lambda item: item[0])
    for here, there in zip(passages, passages[1:] + passages[:1]):
        here[1][here[3]] = there[1][there[2]]
    return Link(objects)


def alexander_from_hfk(ranks: dict) -> tuple[int, ...]:
    """Alexander polynomial coefficients (lowest power first) from knot Floer homology
    ranks {(alexander grading, maslov grading): rank}: the graded Euler characteristic."""
    coefficients: dict[int, int] = {}
    for (a, m), rank in ranks.items():
        coefficients[a] = coefficients.get(a, 0) + (-1) ** (m % 2) * rank
    powers = [a for a, c in coefficients.items() if c != 0]
    if not powers:
        return (0,)
    low, high = min(powers), max(powers)
    return tuple(coefficients.get(a, 0) for a in range(low, high + 1))


def knot_type(curve: np.ndarray, direction=None) -> dict:
    """Knot type of a closed polyline: name (or 'unknown'), Alexander polynomial
    coefficients, Seifert genus, and crossings before / after simplification."""
    link = diagram(curve, direction)
    if link is None:
        return {"name": "unknot", "alexander": (1,), "genus": 0, "crossings": 0, "simplified_crossings": 0}
    raw = len(link.crossings)
    link.simplify("global")
    if len(link.crossings) == 0:
        return {"name": "unknot", "alexander": (1,), "genus": 0, "crossings": raw, "simplified_crossings": 0}
    hfk = link.knot_floer_homology()
    alexander = alexander_from_hfk(hfk["ranks"])
    if alexander[0] < 0 and alexander not in {k for k, _ in KNOWN_KNOTS}:
        alexander = tuple(-c for c in alexander)
    name = KNOWN_KNOTS.get((alexander, hfk["seifert_genus"]), "unknown")
    return {"name": name, "alexander": alexander, "genus": int(hfk["seifert_genus"]),
            "crossings": raw, "simplified_crossings": len(link.crossings)}


def alexander_text(coefficients) -> str:
    """Delta(t) as text, symmetric powers: (1, -1, 1) -> 't^-1 - 1 + t'."""
    shift = (len(coefficients) - 1) // 2
    terms = []
    for k, c in enumerate(coefficients):
        if c == 0:
            continue
        power = k - shift
        mono = "1" if power == 0 else ("t" if power == 1 else f"t^{power}")
        body = mono if abs(c) == 1 and power != 0 else f"{abs(c)}" + ("" if power == 0 else f" {mono}")
        terms.append(("-" if c < 0 else "+", body))
    if not terms:
        return "0"
    text = ("-" if terms[0][0] == "-" else "") + terms[0][1]
    for sign, body in terms[1:]:
        text += f" {sign} {body}"
    return text


def dirichlet_density(field: np.ndarray, grid) -> np.ndarray:
    """sum_i |d_i n|^2 by central differences on the grid's physical coordinates: a density
    every solution with a symmetry shares it with (for the axial test when no model
    density is given)."""
    total = np.zeros(field.shape[:3])
    for a, coordinate in enumerate(grid.axes()):
        derivative = np.gradient(field, coordinate, axis=a)
        total += np.sum(derivative * derivative, axis=-1)
    return total


def solution_label(field: np.ndarray, grid, b_field=None, density=None) -> dict:
    """Components of the position curve, their knot types, charge shares and mutual
    linking, the axial symmetry of ``density`` (the model's energy density; default the
    Dirichlet density of the field) and the label string (module docstring).  ``open``
    counts chains cut by the box (then the label is marked incomplete)."""
    from solitons.measure.symmetry import axial_deviation, winding_about

    if b_field is None:
        b_field = np.asarray(topological_field(field, grid))
    chains = preimage_chains(field, grid, POSITION_VALUE, b_field=b_field)
    others = preimage_chains(field, grid, SHARE_VALUE, b_field=b_field)
    closed = [c for c, is_closed in chains if is_closed]
    closed_others = [c for c, is_closed in others if is_closed]
    n_open = sum(1 for _, is_closed in chains + others if not is_closed)
    components = []
    for curve in closed:
        knot = knot_type(curve)
        # minus: oriented along B the Gauss linking number is -Q in our sign convention
        share = -sum(linking_number(curve, other) for other in closed_others)
        components.append({"knot": knot["name"], "alexander": list(knot["alexander"]), "genus": knot["genus"],
                           "share": share, "points": len(curve)})
    order = np.argsort([c["share"] for c in components], kind="stable")
    components = [components[k] for k in order]
    closed = [closed[k] for k in order]
    pair_links = {}
    for i in range(len(closed)):
        for j in range(i + 1, len(closed)):
            pair_links[f"{i},{j}"] = -linking_number(closed[i], closed[j])
    total_link = -sum(linking_number(p, q) for p in closed for q in closed_others)
    symmetry = axial_deviation(dirichlet_density(field, grid) if density is None else density, grid) \
        if components else None
    if not components:
        text = "none"
    elif symmetry["axial"]:
        windings = [winding_about(c, symmetry["centre"], symmetry["axis"]) for c in closed]
        b = round(sum(abs(w) for w in windings))
        q = round(sum(c["share"] for c in components))
        symmetry["windings"] = windings
        text = f"A_{{{q // b},{b}}}" if b > 0 and q % b == 0 else f"A_{{?,{b}}}"
    else:
        parts = "+".join(f"{c['knot']}[{round(c['share'])}]" for c in components)
        if len(components) > 1:
            letter = "L"
            links = [round(v) for v in pair_links.values()]
            parts += " lk=" + ",".join(str(v) for v in links)
        else:
            letter = "A~" if components[0]["knot"] == "unknot" else "K"
        text = f"{letter}:{parts}"
    if n_open:
        text += " (incomplete: curves cut by the box)"
    return {"label": text, "components": components, "pair_linking": pair_links,
            "linking_charge": total_link, "open_chains": n_open, "symmetry": symmetry}
