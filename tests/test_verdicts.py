"""Verdicts reproduce Derrick's theorem and the derived quartic bound; a potential keeps
Q = 1 and makes it smaller; the lattice is named when it decides.  Box of side 8 (41^3,
h = 0.2, fixed border) unless said."""

import numpy as np
import pytest

from solitons.config import load
from solitons.run import relax

BASE = ["grid.points=41", "grid.spacing=0.2", "relax.checkpoint_every=0"]


def run(tmp_path, extra, steps=400):
    spec = load(None, BASE + [f"relax.max_steps={steps}"] + extra, text="")
    return relax(spec, tmp_path, stream=None)


def test_two_derivative_term_alone_collapses(tmp_path):
    """Derrick: E2 scales as lambda^-1, so with no quartic term a texture lowers its energy
    by shrinking; on the lattice it thins to the spacing and unwinds (docs/references.md [R11])."""
    summary = run(tmp_path, ["terms.skyrme_faddeev.coupling=0"], steps=200)
    assert summary["verdict"] == "collapsed"
    assert summary["evidence"]["min_thickness_over_spacing"] <= 2.0


@pytest.mark.parametrize("scheme", ["second", "sixth"])
@pytest.mark.parametrize("points", [33, 41, 49])
def test_quartic_term_alone_spreads(tmp_path, scheme, points):
    """Derrick: E4 scales as lambda^+1, so alone it makes the soliton grow until the box
    stops it (docs/references.md [R11]); on every scheme and box (sides 6.4, 8, 9.6 at h = 0.2).  The
    former Richardson fourth-order scheme ran to E = -7.86 here (41^3) with verdict
    `unbounded`."""
    summary = run(tmp_path, ["terms.dirichlet.coupling=0", f"grid.points={points}", f'grid.scheme="{scheme}"'],
                  steps=300)
    assert summary["verdict"] == "spread", summary["warnings"]
    assert summary["energy"] > 0.0
    assert summary["evidence"]["size"] > 1.5 * summary["evidence"]["initial_size"]


def test_both_terms_give_a_stable_charge_one_soliton(tmp_path):
    """Both terms balance (Derrick): a stable Q = 1 soliton, saddle check included.  The
    box of side 8 squeezes it (virial -0.08, 2.5 % of its energy; README) and is reported
    `box too small`; stretched grids of the same points (side 24 at h = 0.25, 14.5 at
    h = 0.2) are not."""
    stretched = ["grid.spacing=0.25", "grid.stretch=2.0"]
    summary = run(tmp_path, stretched)
    assert summary["verdict"] == "stable" and summary["converged"]
    assert abs(summary["hopf_charge"] - 1) < 1e-3
    stable_size = summary["evidence"]["size"]
    # the massive core is thinner: h = 0.25 is reported under-resolved, h = 0.2 resolves it
    massive = run(tmp_path / "massive", ["grid.stretch=2.0", 'terms.mass.kind="potential"', "terms.mass.coupling=1.0"])
    # Foster, arXiv:1012.2595: the massive model keeps Hopf solitons; a potential term
    # (Derrick weight 0, scaling lambda^-3) favours a smaller soliton (derived)
    assert massive["verdict"] == "stable" and abs(massive["hopf_charge"] - 1) < 1e-3
    assert massive["evidence"]["size"] < 0.95 * stable_size
    assert massive["terms"]["mass"] > 0


@pytest.mark.parametrize("b", [-0.3, -0.05])
def test_quartic_combination_outside_the_bound_is_never_stable(tmp_path, b):
    """H^2 + b (dn.dn)^2 is not bounded below for b < 0 (derived).  A witness that does not
    use the tool's probe: on a periodic lattice the twist n = (sin kx, 0, cos kx) has
    H^2 = 0 and, with the second-order scheme, |D_x n|^2 = (2 sin(kh/2) / h)^2 = k_h^2 at
    every site exactly, so E = N V (k_h^2 + b k_h^4) (N the normalisation, V the box
    volume): negative once k_h^2 > 1/|b| and without lower bound as k grows.  The model
    must evaluate exactly that, and no relaxation of the model may be called stable."""
    from solitons.lattice.grid import Grid
    from solitons.model.energy import NORMALISATION, Model
    from solitons.model.terms import BUILTIN_TERMS, Term

    grid = Grid.centred(32, 0.05, "periodic")
    terms = (Term("dirichlet", BUILTIN_TERMS["dirichlet"]), Term("skyrme_faddeev", BUILTIN_TERMS["skyrme_faddeev"]),
             Term("ext", BUILTIN_TERMS["dirichlet_squared"], b))
    model = Model(terms, grid, "second")
    x = grid.mesh()[0]
    volume = (32 * 0.05) ** 3
    energies = []
    for m in (1, 2, 4, 6):
        k = 2 * np.pi * m / (32 * 0.05)
        field = np.stack((np.sin(k * x), np.zeros_like(x), np.cos(k * x)), axis=-1)
        k_h2 = (2 * np.sin(k * 0.05 / 2) / 0.05) ** 2
        parts = model.energies(field)
        assert parts["dirichlet"] == pytest.approx(NORMALISATION * volume * k_h2, rel=1e-12)
        assert parts["ext"] == pytest.approx(NORMALISATION * volume * b * k_h2**2, rel=1e-12)
        assert abs(parts["skyrme_faddeev"]) < 1e-12 * parts["dirichlet"]
        energies.append(sum(parts.values()))
    assert energies[-1] < 0 and energies[-1] < energies[-2]  # below the vacuum, and falling with k
    summary = run(tmp_path, ['terms.ext.kind="dirichlet_squared"', f"terms.ext.coupling={b}"], steps=60)
    assert summary["verdict"] != "stable"
    assert summary["bounded_below_probe"]["negative"]
    assert any("not bounded below" in w for w in summary["warnings"])


def test_massive_soliton_on_a_coarse_lattice_is_under_resolved_not_collapsed(tmp_path):
    """Massive Hopf solitons exist at every mass (Foster, arXiv:1012.2595, abstract); with
    mass 4 the core is thinner than h = 0.25 resolves (measured: 0.58 thick, 2.3 spacings,
    E = 1.9998 against 1.8633 at h = 0.1).  Formerly reported `collapsed` (it unwound);
    the verdict must name the lattice and a spacing that resolves the core (below h)."""
    summary = run(tmp_path, ["grid.points=49", "grid.spacing=0.25", 'terms.mass.kind="potential"',
                             "terms.mass.coupling=1.0", "terms.mass.mass=4.0"], steps=600)
    assert summary["verdict"] == "under-resolved", summary["warnings"]
    assert summary["evidence"]["resolving_spacing"] < 0.25
    assert any("rerun with h <=" in w for w in summary["warnings"])


@pytest.mark.slow
def test_axial_charge_three_is_found_to_be_a_saddle(tmp_path):
    """The axial A_{3,1} state is a saddle: the charge-3 minimum is not axial (Sutcliffe
    2007, arXiv:0705.1468, from memory; reported for this tool: with noise it falls 0.9 %
    lower).  Relaxed from the symmetric axial(3,1) data it converges, and the saddle check
    must find the lower state (measured on 61^3, h = 0.2: 0.68 % lower; here 41^3,
    h = 0.25, box 10)."""
    summary = run(tmp_path, ["grid.points=41", "grid.spacing=0.25", 'initial.a=3', "initial.size=1.4"],
                  steps=600)
    assert summary["verdict"] == "saddle", summary["warnings"]
    check = summary["evidence"]["saddle_check"]
    assert check["perturbed_energy"] < (1 - 1e-3) * check["reference_energy"]
    assert abs(check["perturbed_hopf_charge"] - 3) < 0.05


def test_a_box_that_squeezes_the_soliton_is_named(tmp_path):
    """Q = 1 in a box of side 8 (41^3, h = 0.2): converged with the charge kept, but the
    border holds a share of the energy and the virial is far from balance (measured with
    the former scheme: -0.082, E 2.5 % above the large-box value; README).  The verdict
    names the box and a side that would hold the soliton."""
    summary = run(tmp_path, [])
    assert summary["verdict"] == "box too small", summary["warnings"]
    assert summary["evidence"]["needed_box_side"] > 8.0
    assert abs(summary["hopf_charge"] - 1) < 1e-3


def test_a_run_the_energy_rule_stopped_says_so(tmp_path):
    """A loose energy rule (relative change below 1e-3 for 3 steps) stops the Q = 1
    relaxation while the largest force is still far above force_tol: the run counts as
    converged (the stopping rule was met) but its summary names the rule and warns; with
    the rule off the same run reaches the force rule (common practice: report which
    criterion stopped a minimiser)."""
    text = ("[grid]\npoints = 41\nspacing = 0.2\n[relax]\nmax_steps = 400\nforce_tol = 1e-3\n"
            "energy_tol = 1e-3\npatience = 3\nsaddle_check = false\n")
    loose = relax(load(None, text=text), tmp_path / "loose", stream=None)
    assert loose["converged"] and loose["stopped_by"] == "energy"
    assert loose["max_force"] > 10 * 1e-3
    assert any(w.startswith("stopped by the energy rule") and "x force_tol" in w for w in loose["warnings"])
    tight = relax(load(None, text=text.replace("energy_tol = 1e-3", "energy_tol = 0.0")), tmp_path / "tight",
                  stream=None)
    assert tight["converged"] and tight["stopped_by"] == "force" and tight["max_force"] < 1e-3
    assert not any(w.startswith("stopped by the energy rule") for w in tight["warnings"])


def test_a_value_just_past_a_threshold_keeps_the_milder_verdict_and_exit_0(tmp_path):
    """The knife edge of the issue: the plain model at h = 0.26 (81^3) converges with
    spacing / core thickness 0.302 against the limit 0.3 (measured).  Inside the 10 %
    margin it stays `stable`, with a warning naming the value and the limit, and the
    command's exit code is 0 (a converged run); the limit itself is the project's
    resolution rule (README, verdicts), the margin its documented band."""
    from solitons.cli import exit_code
    from solitons.config import load
    from solitons.judge.diagnose import SPACING_LIMIT, VERDICT_MARGIN
    from solitons.run import relax

    summary = relax(load(None, text="[grid]\nspacing = 0.26\n[relax]\nsaddle_check = false\n"), tmp_path / "edge",
                    stream=None)
    ratio = summary["evidence"]["spacing_over_thickness"]
    assert SPACING_LIMIT < ratio < SPACING_LIMIT * (1 + VERDICT_MARGIN)
    assert summary["converged"] and summary["verdict"] == "stable" and exit_code(summary) == 0
    assert any(f"{ratio:.3f}" in w and "limit 0.3" in w and "margin" in w for w in summary["warnings"])
