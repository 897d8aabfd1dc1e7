"""Quartiles by sort and by selection (compiler/order_stats.py), checked bit for bit against
numpy.quantile.

Reference: numpy.quantile with its default (linear, Hyndman–Fan 7) method, on the same values.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from compiler.order_stats import (_select, quartiles, quartiles_by_selection,
                                  quartiles_of_selected)

SIZES = [*range(1, 41), 999, 1000, 1001, 250_001]


def samples(n: int) -> dict[str, np.ndarray]:
    # Every size up to 40 meets each case of numpy's index arithmetic (one value; a quartile
    # on an order statistic; between two); ties and tiny or huge magnitudes check that
    # nothing is rounded anew.
    rng = np.random.default_rng(n)
    return {"normal": rng.standard_normal(n),
            "ties": rng.integers(-3, 4, n).astype(float) + 0.5,
            "tiny": rng.exponential(size=n) * 1e-300,
            "large": rng.standard_normal(n) * 1e300}


@pytest.mark.parametrize("n", SIZES)
def test_quartiles_from_the_sorted_values_are_numpys(n):
    # Reference: numpy.quantile, default (linear) method, on the same values.
    for name, values in samples(n).items():
        expected = np.quantile(values, [0.25, 0.5, 0.75])
        assert quartiles(values.copy()).tobytes() == expected.tobytes(), name


@pytest.mark.parametrize("n", SIZES)
def test_quartiles_by_selection_are_numpys(n):
    # Reference: numpy.quantile, default (linear) method, on the same values.
    for name, values in samples(n).items():
        expected = np.quantile(values, [0.25, 0.5, 0.75])
        assert quartiles_by_selection(values.copy()).tobytes() == expected.tobytes(), name


@pytest.mark.parametrize("quartiles_of", [quartiles, quartiles_by_selection])
def test_quartiles_agree_with_numpy_where_zeros_of_both_signs_tie(quartiles_of):
    # Reference: numpy.quantile. Equal values may stand in other orders than after numpy's
    # partition, which shows only in the sign of a zero: -0.0 == 0.0.
    values = np.round(np.random.default_rng(38).standard_normal(38), 1)
    assert np.count_nonzero(values == 0.0) >= 2
    assert list(quartiles_of(values.copy())) == list(np.quantile(values, [0.25, 0.5, 0.75]))


def test_selection_leaves_each_needed_order_statistic_between_its_neighbours():
    # Reference: numpy.sort of the same values, at the selected ranks; and the partition
    # property around each of them (nothing larger before it, nothing smaller after it).
    rng = np.random.default_rng(11)
    values = rng.integers(0, 50, 1001).astype(float)
    ranks = {0, 1, 2, 250, 251, 500, 998, 999, 1000}
    ordered = np.sort(values)
    _select(values, ranks)
    for k in ranks:
        assert values[k] == ordered[k]
        assert np.all(values[:k] <= values[k]) and np.all(values[k + 1:] >= values[k])


@pytest.mark.parametrize("n", [*range(1, 25), 1000, 1001, 100_003])
@pytest.mark.parametrize("groups", [1, 2, 5])
def test_quartiles_of_selected_parts_are_numpys_on_their_union(n, groups):
    # Reference: numpy.quantile (default method) on the unsorted union. Parts of every size,
    # empty ones and single values included; ties within and across parts.
    rng = np.random.default_rng(n * 7 + groups)
    for values in (rng.standard_normal(n), rng.integers(-2, 3, n).astype(float)):
        labels = rng.integers(0, groups, n)
        parts = [values[labels == g] for g in range(groups)]
        for part in parts:
            if len(part):
                quartiles_by_selection(part)
        expected = np.quantile(values, [0.25, 0.5, 0.75])
        assert quartiles_of_selected(parts).tobytes() == expected.tobytes()


def test_quartiles_of_parts_far_apart_and_of_parts_alike():
    # Reference: numpy.quantile on the union. Groups that do not overlap put every value of
    # one group inside the bracket; groups alike leave few there. Both give numpy's bits.
    rng = np.random.default_rng(3)
    for shift in (0.0, 0.1, 100.0):
        low, high = rng.standard_normal(4001), rng.standard_normal(2999) + shift
        expected = np.quantile(np.concatenate([low, high]), [0.25, 0.5, 0.75])
        parts = [low, high]
        for part in parts:
            quartiles_by_selection(part)
        assert quartiles_of_selected(parts).tobytes() == expected.tobytes(), shift


@settings(max_examples=300, deadline=None)
@given(st.lists(st.lists(st.floats(-1e6, 1e6, allow_nan=False, allow_infinity=False),
                         max_size=12), min_size=1, max_size=4)
       .filter(lambda parts: any(parts)))
def test_quartiles_of_any_selected_parts_are_numpys(lists):
    # Reference: numpy.quantile on the union; hypothesis draws the parts, empty ones,
    # repeated values and signed zeros included (compared as numbers: -0.0 == 0.0).
    parts = [np.array(part, dtype=float) for part in lists]
    union = np.concatenate(parts)
    for part in parts:
        if len(part):
            quartiles_by_selection(part)
    assert list(quartiles_of_selected(parts)) == list(np.quantile(union, [0.25, 0.5, 0.75]))
