"""Multiplicity procedures over a family of p-values: pure functions, plain Python.

Each procedure takes the family's p-values in the plan's stated order and returns one
:class:`Adjusted` per member, in the same order. In every procedure a member is rejected
exactly when its adjusted p-value is below the family α (strictly, as every rule here
reads "p < α"), so the adjusted p alone tells the verdict.

A member whose p-value is None (it could not be computed, or its verdict is undetermined)
takes part as p = 1: it is never rejected and it still counts towards m, which can only make
the others' adjustment more conservative, never less.

Sources: Holm (1979) step-down; Hochberg (1988) step-up; Bonferroni; the fixed-sequence
(hierarchical) procedure tests in the stated order at the full α and stops at the first
failure. Adjusted p-values follow the usual definitions (Holm: running maximum of
(m − j + 1)·p₍ⱼ₎ in ascending order; Hochberg: running minimum from the largest;
fixed sequence: running maximum in the stated order), each capped at 1.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Sequence

Pvalues = Sequence[float | None]


@dataclass(frozen=True)
class Adjusted:
    """One member's outcome under a procedure.

    ``alpha_used`` is the level this member's own p-value was compared with: α/m for
    Bonferroni, α/(m − j + 1) at its step j for Holm and Hochberg, α for fixed sequence
    (None for a member the fixed sequence never reached). ``rank`` is the member's 1-based
    step: its place in ascending p order (Holm, Hochberg), or in the stated order.
    ``stopped_by`` is, for a member the fixed sequence never reached, the index (0-based,
    stated order) of the member whose failure stopped it.
    """

    p: float | None
    p_adjusted: float | None
    rejected: bool
    alpha_used: float | None
    rank: int
    tested: bool = True
    stopped_by: int | None = None


def _filled(p_values: Pvalues) -> list[float]:
    return [1.0 if p is None else float(p) for p in p_values]


def _ascending(p: list[float]) -> list[int]:
    """Indices in ascending p order; ties keep the stated order, so the result is stable."""
    return sorted(range(len(p)), key=lambda i: (p[i], i))


def _outcomes(p_values: Pvalues, adjusted: list[float], alpha: float,
              alpha_used: list[float | None], rank: list[int]) -> tuple[Adjusted, ...]:
    return tuple(
        Adjusted(p=p, p_adjusted=None if p is None else adjusted[i],
                 rejected=p is not None and adjusted[i] < alpha,
                 alpha_used=alpha_used[i], rank=rank[i])
        for i, p in enumerate(p_values))


def bonferroni(p_values: Pvalues, alpha: float) -> tuple[Adjusted, ...]:
    m = len(p_values)
    p = _filled(p_values)
    return _outcomes(p_values, [min(1.0, m * x) for x in p], alpha, [alpha / m] * m,
                     list(range(1, m + 1)))


def holm(p_values: Pvalues, alpha: float) -> tuple[Adjusted, ...]:
    m = len(p_values)
    p = _filled(p_values)
    adjusted, alpha_used, rank = [0.0] * m, [0.0] * m, [0] * m
    running = 0.0
    for j, i in enumerate(_ascending(p), start=1):
        running = max(running, min(1.0, (m - j + 1) * p[i]))
        adjusted[i], alpha_used[i], rank[i] = running, alpha / (m - j + 1), j
    return _outcomes(p_values, adjusted, alpha, alpha_used, rank)


def hochberg(p_values: Pvalues, alpha: float) -> tuple[Adjusted, ...]:
    m = len(p_values)
    p = _filled(p_values)
    order = _ascending(p)
    adjusted, alpha_used, rank = [0.0] * m, [0.0] * m, [0] * m
    running = 1.0
    for j in range(m, 0, -1):
        i = order[j - 1]
        running = min(running, (m - j + 1) * p[i])
        adjusted[i], alpha_used[i], rank[i] = min(1.0, running), alpha / (m - j + 1), j
    return _outcomes(p_values, adjusted, alpha, alpha_used, rank)


def fixed_sequence(p_values: Pvalues, alpha: float) -> tuple[Adjusted, ...]:
    out: list[Adjusted] = []
    running, stop = 0.0, None
    for i, p in enumerate(p_values):
        running = max(running, 1.0 if p is None else float(p))
        if stop is not None:
            out.append(Adjusted(p, None if p is None else running, False, None, i + 1,
                                tested=False, stopped_by=stop))
            continue
        rejected = p is not None and running < alpha
        out.append(Adjusted(p, None if p is None else running, rejected, alpha, i + 1))
        if not rejected:
            stop = i
    return tuple(out)


PROCEDURES: dict[str, Callable[[Pvalues, float], tuple[Adjusted, ...]]] = {
    "bonferroni": bonferroni,
    "holm": holm,
    "hochberg": hochberg,
    "fixed-sequence": fixed_sequence,
}


def adjust(method: str, p_values: Pvalues, alpha: float) -> tuple[Adjusted, ...]:
    """Apply the named procedure (a plan's ``multiplicity[].method``)."""
    return PROCEDURES[method](p_values, alpha)
