"""What `decide` hands on: one verdict per decision rule, each explaining itself."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal

VerdictWord = Literal["supported", "not supported", "undetermined"]


@dataclass(frozen=True)
class Verdict:
    """The outcome of one decision rule.

    ``reason`` is one plain sentence with the numbers in it; ``numbers`` holds the numbers
    themselves (estimate, standard_error, interval, natural, test_value, p, p_adjusted,
    alpha_used, margin, scale, ...: rules.NUMBER_KEYS), None where a value could not be
    computed.
    """

    id: str
    analysis: str
    test: str
    tier: str
    verdict: VerdictWord
    reason: str
    covariance: str = "classical"
    branch: str | None = None  # which assumption fallback was taken, and why
    multiplicity: str | None = None  # e.g. "holm over H1, H2, H3 at α = 0.05"
    numbers: dict = field(default_factory=dict)
    # rules on an estimate: the covariance, level and interval that decided, each with why
    # (decide._decided); None for tier selection and change in estimate
    inference: dict | None = None
    cautions: tuple[str, ...] = ()  # e.g. a one-sided rule held to more than 0.025


@dataclass(frozen=True)
class AssumptionOutcome:
    """What an assumption check found and which branch the named decisions took."""

    id: str
    analysis: str
    check: str
    test_value: float | None  # Breusch–Pagan's statistic, or the Pearson dispersion
    p: float | None
    triggered: bool
    covariance: str  # the covariance the named decisions used
    reason: str
    determined: bool = True  # False: the test value could not be computed; decisions undetermined
    tier: str | None = None  # the tier the check was judged on
