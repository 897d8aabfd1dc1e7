"""Quartiles from one sort (compiler/order_stats.py), checked bit for bit against numpy.quantile.

Reference: numpy.quantile with its default (linear, Hyndman–Fan 7) method, on the same values.
"""

from __future__ import annotations

import numpy as np
import pytest

from compiler.order_stats import order_statistic, quartiles, quartiles_of_sorted


@pytest.mark.parametrize("n", [*range(1, 41), 999, 1000, 1001, 250_001])
def test_quartiles_from_the_sorted_values_are_numpys(n):
    # Reference: numpy.quantile, default (linear) method, on the same values. Every size up
    # to 40 meets each case of numpy's index arithmetic (one value; a quartile on an order
    # statistic; between two); ties and tiny magnitudes check that nothing is rounded anew.
    rng = np.random.default_rng(n)
    samples = {"normal": rng.standard_normal(n),
               "ties": rng.integers(-3, 4, n).astype(float) + 0.5,
               "tiny": rng.exponential(size=n) * 1e-300,
               "large": rng.standard_normal(n) * 1e300}
    for name, values in samples.items():
        expected = np.quantile(values, [0.25, 0.5, 0.75])
        got = quartiles(values.copy())
        assert got.tobytes() == expected.tobytes(), name


def test_quartiles_agree_with_numpy_where_zeros_of_both_signs_tie():
    # Reference: numpy.quantile. Equal values may come out of a sort and of numpy's partition
    # in different orders, which shows only in the sign of a zero: -0.0 == 0.0.
    values = np.round(np.random.default_rng(38).standard_normal(38), 1)
    assert np.count_nonzero(values == 0.0) >= 2
    assert list(quartiles(values.copy())) == list(np.quantile(values, [0.25, 0.5, 0.75]))


@pytest.mark.parametrize("n", [*range(1, 25), 1000, 1001, 100_003])
@pytest.mark.parametrize("groups", [1, 2, 5])
def test_quartiles_of_sorted_parts_are_numpys_on_their_union(n, groups):
    # Reference: numpy.quantile (default method) on the unsorted union. Parts of every size,
    # empty ones included; ties within and across parts.
    rng = np.random.default_rng(n * 7 + groups)
    for values in (rng.standard_normal(n), rng.integers(-2, 3, n).astype(float)):
        labels = rng.integers(0, groups, n)
        parts = [np.sort(values[labels == g]) for g in range(groups)]
        expected = np.quantile(values, [0.25, 0.5, 0.75])
        assert quartiles_of_sorted(parts).tobytes() == expected.tobytes()


def test_every_order_statistic_of_sorted_parts_is_the_sorted_union():
    # Reference: numpy.sort of the union, position by position.
    rng = np.random.default_rng(5)
    values = rng.integers(0, 9, 60).astype(float)
    labels = rng.integers(0, 3, 60)
    parts = [np.sort(values[labels == g]) for g in range(3)] + [np.empty(0)]
    union = np.sort(values)
    assert [order_statistic(parts, k) for k in range(60)] == list(union)
    with pytest.raises(IndexError):
        order_statistic(parts, 60)
