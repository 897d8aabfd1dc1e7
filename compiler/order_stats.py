"""Quartiles from one sort, for the sample's characteristics and the residual plots.

numpy.quantile finds each order statistic it needs by partitioning its own copy; where the
values are to be sorted anyway (the residual plots draw them sorted) or a sort is cheaper
than the partition (numpy's SIMD sort, on the characteristics' columns), ``quartiles`` takes
the same order statistics from the sorted array and interpolates them exactly as
numpy.quantile's default method does.
"""

from __future__ import annotations

from collections.abc import Sequence

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
    return _interpolated(len(values), values.__getitem__)


def quartiles_of_sorted(parts: Sequence[np.ndarray]) -> np.ndarray:
    """Q1, median and Q3 of the union of ``parts``, each sorted already, without sorting the
    union: the same arithmetic as ``quartiles``, with each of the few order statistics it
    needs found in the parts by binary search (``order_statistic``). The characteristics
    take the overall column's quartiles from its exposure groups' sorted values this way,
    instead of sorting the whole column a second time."""
    n = sum(len(part) for part in parts)

    def at(indices: np.ndarray) -> np.ndarray:  # index -1 is the last, as in ``quartiles``
        return np.array([order_statistic(parts, int(i) % n) for i in indices])

    return _interpolated(n, at)


def order_statistic(parts: Sequence[np.ndarray], k: int) -> float:
    """The k-th smallest value (from 0) of the union of sorted arrays (no NaN).

    In the part that holds it, the k-th smallest value v is the first element with more
    than k values ≤ it in the union, and it has at most k values below it; in any other
    part, the first such element is greater than v and has more than k values below it.
    """
    def count(value: float, side: str) -> int:
        return sum(int(np.searchsorted(part, value, side)) for part in parts)

    for part in parts:
        low, high = 0, len(part)
        while low < high:
            middle = (low + high) // 2
            if count(part[middle], "right") > k:
                high = middle
            else:
                low = middle + 1
        if low < len(part) and count(part[low], "left") <= k:
            return part[low]
    raise IndexError(f"order statistic {k} of {sum(len(p) for p in parts)} values")


def _interpolated(n: int, at) -> np.ndarray:
    """numpy.quantile's linear interpolation at the quartiles, for n sorted values of which
    ``at(indices)`` gives those at ``indices``."""
    virtual = (n - 1) * _QUARTILE_POINTS
    below = np.floor(virtual)
    above = below + 1
    at_end = virtual >= n - 1  # numpy takes the last value there (and so its gamma)
    below[at_end] = above[at_end] = -1
    gamma = virtual - below
    low, high = at(below.astype(np.intp)), at(above.astype(np.intp))
    step = high - low
    result = low + step * gamma
    np.subtract(high, step * (1 - gamma), out=result, where=gamma >= 0.5)
    return result
