"""Quartiles from one sort, for the sample's characteristics and the residual plots.

numpy.quantile finds each order statistic it needs by partitioning its own copy; where the
values are to be sorted anyway (the residual plots draw them sorted) or a sort is cheaper
than the partition (numpy's SIMD sort, on the characteristics' columns), ``quartiles`` takes
the same order statistics from the sorted array and interpolates them exactly as
numpy.quantile's default method does.
"""

from __future__ import annotations

import numpy as np

_QUARTILE_POINTS = np.array([0.25, 0.5, 0.75])


def quartiles(values: np.ndarray) -> np.ndarray:
    """Q1, median and Q3 of ``values`` (no NaN), which it sorts in place: numpy.quantile's
    default method, step for step (numpy/lib/_function_base_impl.py: ``_get_indexes``,
    ``_get_gamma``, ``_lerp``), taken from the sorted array instead of a partition.

    numpy's SIMD sort orders a million values in less than half the time the three-point
    partition of numpy.quantile takes, and leaves the minimum and maximum at the ends. The
    order statistics are the same values, so the quartiles are the same bits, but for one
    thing: equal values may come out of the sort in another order than out of numpy's
    partition, which shows only as the sign of a zero (tests/test_order_stats.py compares
    them with numpy.quantile itself)."""
    values.sort()
    n = len(values)
    virtual = (n - 1) * _QUARTILE_POINTS
    below = np.floor(virtual)
    above = below + 1
    at_end = virtual >= n - 1  # numpy takes the last value there (and so its gamma)
    below[at_end] = above[at_end] = -1
    gamma = virtual - below
    low, high = values[below.astype(np.intp)], values[above.astype(np.intp)]
    step = high - low
    result = low + step * gamma
    np.subtract(high, step * (1 - gamma), out=result, where=gamma >= 0.5)
    return result
