"""The decided/undecided rule on synthetic intervals (common practice: two values are
ordered when their difference exceeds the sum of their error bars)."""

import math

import pytest

from solitons.measure.ordering import order_states


def state(name, energy, error):
    return {"name": name, "energy": energy, "error": error}


def test_separated_intervals_are_decided():
    # [1.0 +- 0.01] against [1.05 +- 0.01]: gap 0.05 > 0.02
    result = order_states([state("link", 1.05, 0.01), state("knot", 1.0, 0.01)])
    assert result["decided"] and result["lowest"] == "knot" and result["next"] == "link"
    assert result["gap"] == pytest.approx(0.05)
    assert result["separation"] == pytest.approx(2.5)


def test_overlapping_intervals_are_undecided():
    # gap 0.015 < 0.01 + 0.01
    result = order_states([state("a", 1.0, 0.01), state("b", 1.015, 0.01)])
    assert not result["decided"] and "overlap" in result["reason"]


def test_touching_is_not_enough():
    """A gap equal to the summed error bars does not order the two (strict inequality)."""
    result = order_states([state("a", 1.0, 0.25), state("b", 1.5, 0.25)])
    assert not result["decided"]


def test_only_the_two_lowest_matter():
    """A third, far state does not change the decision of the lowest pair."""
    two = order_states([state("a", 1.0, 0.001), state("b", 1.003, 0.001)])
    three = order_states([state("a", 1.0, 0.001), state("b", 1.003, 0.001), state("c", 2.0, 0.5)])
    assert two["decided"] == three["decided"] and three["next"] == "b"


def test_missing_error_bar_or_energy_is_undecided():
    assert not order_states([state("a", 1.0, None), state("b", 2.0, 0.01)])["decided"]
    result = order_states([state("a", 1.0, 0.01), state("b", math.nan, 0.01)])
    assert not result["decided"] and "b" in result["reason"]
    assert not order_states([state("a", 1.0, None)])["decided"]


def test_single_candidate_with_error_bar_is_decided():
    assert order_states([state("a", 1.0, 0.01)])["decided"]


def test_bad_input_is_refused():
    with pytest.raises(ValueError):
        order_states([])
    with pytest.raises(ValueError):
        order_states([state("a", 1.0, -0.1)])
