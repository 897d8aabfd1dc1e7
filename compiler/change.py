"""The change of an estimate between two tiers, as a size and a direction.

``relative`` = |b − b₁| / |b₁|, the size of the change relative to the first estimate b₁
(the change-in-estimate criterion of Mickey & Greenland 1989, Am J Epidemiol 129:125–137,
from memory), never negative; ``direction`` says which way b went:

- ``none``: b = b₁;
- ``sign reversed``: b and b₁ have opposite signs (b ≠ 0);
- ``away from zero``: same sign, |b| > |b₁|;
- ``toward zero``: same sign, |b| < |b₁|, or b = 0.

A signed relative change (b − b₁)/|b₁| cannot tell an effect that grows away from zero
(−5.95 → −7.12) from one that shrinks toward it (1.567 → 1.254): both are −19.7 %.
"""

from __future__ import annotations

from .fitted import Change
from .inference import finite_or_none
from .rules_text import fmt_percent


def change_between(first: float, later: float) -> Change:
    """The change from ``first`` (non-zero, finite) to ``later`` (finite)."""
    if first == 0.0:
        raise ValueError("a relative change from 0 is not defined")
    relative = finite_or_none(abs(later - first) / abs(first))
    return Change(relative, direction(first, later))


def direction(first: float, later: float) -> str:
    """Which way ``later`` moved from ``first`` (≠ 0): see the module's list."""
    if later == first:
        return "none"
    if later != 0.0 and (later > 0.0) != (first > 0.0):
        return "sign reversed"
    return "away from zero" if abs(later) > abs(first) else "toward zero"


def in_words(change: Change) -> str:
    """"moved 19.8 % away from zero", "did not move", "moved 150 % and reversed its sign"."""
    if change.direction == "none":
        return "did not move"
    size = "an amount too large to state" if change.relative is None else (
        fmt_percent(change.relative))
    if change.direction == "sign reversed":
        return f"moved {size} and reversed its sign"
    return f"moved {size} {change.direction}"
