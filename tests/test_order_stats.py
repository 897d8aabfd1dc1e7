"""Quartiles from one sort (compiler/order_stats.py), checked bit for bit against numpy.quantile.

Reference: numpy.quantile with its default (linear, Hyndman–Fan 7) method, on the same values.
"""

from __future__ import annotations

import numpy as np
import pytest

from compiler.order_stats import quartiles


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
