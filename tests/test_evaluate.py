"""`solitons.evaluate`: a field's numbers without relaxing it, and `relax(initial=...)`.

Checks against facts outside the code: the Hopf map has Hopf charge 1 (Whitehead 1947,
common practice); on the lattice E2 scales exactly as h and E4 as 1/h, so the virial
h dE/dh / E of the plain model is (E2 - E4) / E exactly (derived); a global isorotation
about the vacuum axis leaves every term's energy unchanged (exact symmetry of the model
and of the lattice sums)."""

import numpy as np
import pytest

import solitons
from solitons.lattice.grid import Grid
from solitons.relaxation.initial import hopf_map

GRID = {"points": 33, "spacing": 0.3, "boundary": "fixed"}


def field():
    return hopf_map(Grid.centred(33, 0.3, "fixed"), 1.0)


def test_numbers_of_the_hopf_map():
    result = solitons.evaluate(field(), grid=GRID)
    assert result.hopf_charge == pytest.approx(1.0, abs=0.02)
    e2, e4 = result.terms["dirichlet"], result.terms["skyrme_faddeev"]
    assert result.energy == pytest.approx(e2 + e4, rel=1e-12)
    assert result.virial == pytest.approx((e2 - e4) / result.energy, abs=1e-9)
    assert result.max_force > result.rms_force > 0
    assert result.density.shape == (33, 33, 33)
    assert result.evidence.core_thickness > 0


def test_isorotation_about_the_vacuum_axis_changes_nothing():
    n = field()
    angle = 0.7
    c, s = np.cos(angle), np.sin(angle)
    turned = np.stack((c * n[..., 0] - s * n[..., 1], s * n[..., 0] + c * n[..., 1], n[..., 2]), -1)
    a, b = solitons.evaluate(n, grid=GRID), solitons.evaluate(turned, grid=GRID)
    for name in a.terms:
        assert b.terms[name] == pytest.approx(a.terms[name], rel=1e-11)
    assert b.hopf_charge == pytest.approx(a.hopf_charge, abs=1e-9)


def test_bad_fields_are_refused_by_name():
    with pytest.raises(ValueError, match=r"shape \(33, 33, 32, 3\)"):
        solitons.evaluate(field()[:, :, :32], grid=GRID)
    broken = field()
    broken[3, 4, 5, 0] = np.nan
    with pytest.raises(ValueError, match=r"site \(3, 4, 5\)"):
        solitons.evaluate(broken, grid=GRID)


def test_relax_starts_from_a_given_field():
    """The run's monitor at step 0 reads the given array's virial and charge, and its first
    step lowers the array's energy."""
    n = field()
    before = solitons.evaluate(n, grid=GRID)
    result = solitons.relax(grid=GRID, relax={"max_steps": 5, "coarse_start": False, "saddle_check": False},
                            initial=n)
    assert result.history["monitor_step"][0] == 0
    assert result.history["virial"][0] == pytest.approx(before.virial, abs=1e-10)
    assert result.history["hopf_charge"][0] == pytest.approx(before.hopf_charge, abs=1e-9)
    assert result.history["energy"][0] < before.energy
    with pytest.raises(solitons.run.RunError, match="initial"):
        solitons.relax(grid=GRID, initial=n[:-1])
