"""Quartiles as numpy.quantile gives them, for the sample's characteristics and the residual
plots.

numpy.quantile finds the order statistics it needs by partitioning its own copy at all of
them at once. Here they are found in the caller's own copy instead, two ways:

- ``quartiles`` sorts it, for the residual plots, which draw the residuals sorted anyway;
- ``quartiles_by_selection`` only puts each needed order statistic at its rank, one
  partition at a time, for the characteristics' columns; ``quartiles_of_selected`` then
  gives the quartiles of several such parts together (an exposure group's values make a
  part, all groups the overall column) without sorting or joining them.

Both interpolate exactly as numpy.quantile's default method does, so the quartiles are
numpy's bits, but for one thing: equal values may stand in another order than after
numpy's partition, which shows only as the sign of a zero (tests/test_order_stats.py
compares them with numpy.quantile itself).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

_QUARTILE_POINTS = np.array([0.25, 0.5, 0.75])


def quartiles(values: np.ndarray) -> np.ndarray:
    """Q1, median and Q3 of ``values`` (no NaN), which it sorts in place: numpy.quantile's
    default method, step for step (numpy/lib/_function_base_impl.py: ``_get_indexes``,
    ``_get_gamma``, ``_lerp``), taken from the sorted array instead of a partition."""
    values.sort()
    return _interpolated(len(values), values.__getitem__)


def quartiles_by_selection(values: np.ndarray) -> np.ndarray:
    """Q1, median and Q3 of ``values`` (no NaN, at least one), as ``quartiles`` gives them;
    ``values`` is reordered in place so that each order statistic they need stands at its
    own rank, with no larger value before it and no smaller one after it (``_select``).

    A selection does less work than a sort, and its cost does not hang on the sort's SIMD
    kernel: on a Zen 4 processor numpy's AVX-512 sort took 25–30 ms per 500,000 values, as
    long as its heapsort, and this 18 ms; with the AVX2 kernels, 6 ms against 3 ms."""
    n = len(values)
    below, above, _ = _positions(n)
    _select(values, {int(k) % n for k in (*below, *above)})
    return _interpolated(n, values.__getitem__)


def quartiles_of_selected(parts: Sequence[np.ndarray]) -> np.ndarray:
    """Q1, median and Q3 of the union of ``parts`` (at least one value in all), each of which
    ``quartiles_by_selection`` has reordered, without sorting or joining them.

    At each quartile point, the union's two order statistics (ranks b and b + 1 of its N
    values) lie between the least of the parts' own lower ones and the greatest of their
    upper ones: a part of n values with its lower one at rank ⌊(n − 1)p⌋ has at most that
    many values below it, and the parts' ⌊(n − 1)p⌋ add up to no more than b; it has at
    least ⌊(n − 1)p⌋ + 2 values up to its upper one (all n when n = 1), and those add up to
    more than b + 1. So the two are found among the values of that bracket, at their ranks
    less the count of values below it; when the groups are alike, the bracket is narrow.
    """
    parts = [part for part in parts if len(part)]
    n = sum(len(part) for part in parts)
    below, above, _ = _positions(n)
    own = [_positions(len(part))[:2] for part in parts]  # each part's ranks at each point
    found: dict[int, float] = {}
    for point in range(len(_QUARTILE_POINTS)):
        least = min(part[lower[point]] for part, (lower, _) in zip(parts, own))
        greatest = max(part[upper[point]] for part, (_, upper) in zip(parts, own))
        under = 0
        inside = []
        for part in parts:
            before = part < least
            under += int(np.count_nonzero(before))
            inside.append(part[~before & (part <= greatest)])
        bracket = np.concatenate(inside)
        ranks = {int(below[point]) % n - under, int(above[point]) % n - under}
        _select(bracket, ranks)
        found.update((rank + under, bracket[rank]) for rank in ranks)
    return _interpolated(n, lambda indices: np.array([found[int(i) % n] for i in indices]))


def _select(values: np.ndarray, ranks) -> None:
    """Reorder ``values`` in place so that for each rank k, values[k] is the k-th smallest
    (from 0), with no larger value before it and no smaller one after it.

    One partition at a time: numpy.partition at a single index runs the SIMD selection,
    which a partition at several indices does not. Each placed rank splits the work into the
    values before it and after it; a rank right after one just placed is the minimum of the
    values after that one."""
    pending = [(0, len(values), sorted(ranks))]
    while pending:
        start, stop, wanted = pending.pop()
        if not wanted:
            continue
        k = wanted[len(wanted) // 2]
        values[start:stop].partition(k - start)
        after = [rank for rank in wanted if rank > k]
        if after and after[0] == k + 1:
            rest = values[k + 1:stop]
            i = int(np.argmin(rest))
            rest[0], rest[i] = rest[i], rest[0]
            pending.append((k + 2, stop, after[1:]))
        else:
            pending.append((k + 1, stop, after))
        pending.append((start, k, [rank for rank in wanted if rank < k]))


def _positions(n: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """numpy.quantile's indices and weights at the quartiles for n ordered values: the
    order statistics below and above each point (-1 for the last, as numpy takes it at the
    end, with its gamma) and the weight of the one above."""
    virtual = (n - 1) * _QUARTILE_POINTS
    below = np.floor(virtual)
    above = below + 1
    at_end = virtual >= n - 1  # numpy takes the last value there (and so its gamma)
    below[at_end] = above[at_end] = -1
    gamma = virtual - below
    return below.astype(np.intp), above.astype(np.intp), gamma


def _interpolated(n: int, at) -> np.ndarray:
    """numpy.quantile's linear interpolation at the quartiles, for n ordered values of which
    ``at(indices)`` gives those at ``indices``."""
    below, above, gamma = _positions(n)
    low, high = at(below), at(above)
    step = high - low
    result = low + step * gamma
    np.subtract(high, step * (1 - gamma), out=result, where=gamma >= 0.5)
    return result
