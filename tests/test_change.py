"""The change of an exposure estimate from the first tier: a size and a direction.

relative = |b − b₁| / |b₁| (the change-in-estimate criterion of Mickey & Greenland 1989,
from memory); every expected value below is worked by hand. The first round printed a signed
(b − b₁)/|b₁|, which is −19.7 % both for −5.95 → −7.12 (away from zero) and for
1.567 → 1.258 (toward zero); the direction tells them apart.
"""

from __future__ import annotations

import pytest

from compiler import report_format as f
from compiler.change import change_between, in_words
from compiler.fitted import Change

CASES = [
    # first, later, relative (by hand), direction
    (-5.95, -7.12, 1.17 / 5.95, "away from zero"),      # 0.19664
    (1.567, 1.258, 0.309 / 1.567, "toward zero"),        # 0.19719
    (2.0, -1.0, 3.0 / 2.0, "sign reversed"),             # 1.5
    (-0.8, -0.8, 0.0, "none"),
]


@pytest.mark.parametrize("first, later, relative, direction", CASES)
def test_the_four_directions_with_hand_computed_sizes(first, later, relative, direction):
    change = change_between(first, later)
    assert change.relative == pytest.approx(relative, rel=1e-12)
    assert change.relative >= 0.0
    assert change.direction == direction


def test_an_estimate_moved_all_the_way_to_zero_moved_toward_it():
    assert change_between(3.0, 0.0) == Change(1.0, "toward zero")


def test_a_growing_positive_estimate_moves_away_from_zero():
    assert change_between(0.5, 0.75) == Change(0.5, "away from zero")


def test_no_relative_change_from_zero():
    with pytest.raises(ValueError):
        change_between(0.0, 1.0)


def test_the_words_of_a_verdict_reason():
    assert in_words(change_between(-5.95, -7.12)) == "moved 19.7% away from zero"
    assert in_words(change_between(1.567, 1.258)) == "moved 19.7% toward zero"
    assert in_words(change_between(2.0, -1.0)) == "moved 150% and reversed its sign"
    assert in_words(change_between(1.0, 1.0)) == "did not move"


def test_the_words_of_the_report():
    thin = f.THIN
    assert f.change({"relative": 0.198, "direction": "away from zero"}) == (
        f"19.8{thin}% away from zero")
    assert f.change({"relative": 0.0412, "direction": "toward zero"}) == (
        f"4.1{thin}% toward zero")
    assert f.change({"relative": 1.5, "direction": "sign reversed"}) == (
        f"150.0{thin}%, sign reversed")
    assert f.change({"relative": 0.0, "direction": "none"}) == "none"
