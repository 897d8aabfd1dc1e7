"""What `design` and `fit` hand on. Numbers that cannot be computed are None with a reason."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True)
class Design:
    """The design of the largest tier; every tier's design is a prefix of its columns.

    ``tier_width[k]`` is the number of columns tier k uses (intercept included);
    ``column_term[j]`` is the label of the plan term that design column j belongs to;
    ``exposure_columns`` are the positions of the exposure's columns (tier 0 after intercept).
    """

    analysis: str
    x: np.ndarray  # n × p float64 (F order), or design.DesignRows: rows built when asked
    y: np.ndarray  # n float64
    offset: np.ndarray | None  # log of the offset variable, or None
    labels: tuple[str, ...]  # design column labels, e.g. "intercept", "arm: walking vs usual", "age^2"
    column_term: tuple[str, ...]
    tier_names: tuple[str, ...]
    tier_width: tuple[int, ...]
    exposure_columns: tuple[int, ...]
    cluster: np.ndarray | None = None  # cluster codes per row, for clustered covariance
    row_ids: object = None  # bound.RowLabels or an array of labels: labels made when asked


@dataclass(frozen=True)
class Coefficient:
    """One design column's estimate, its test against 0 and its interval (the analysis'
    confidence level); ``test_value`` is referred to t or z (the fit's reference)."""

    column: str
    estimate: float | None
    standard_error: float | None
    test_value: float | None  # estimate / standard error
    p_two_sided: float | None
    low: float | None
    high: float | None
    reason: str | None = None


@dataclass(frozen=True)
class JointTest:
    """A joint test of several coefficients (the exposure levels, or a tier's additions)."""

    method: str  # "F" (extra sum of squares), "Wald", "LR" (words.METHOD_WORDS)
    df_added: int  # the columns tested
    df_denominator: float | None  # referred to F on (df_added, df_denominator); None: chi2
    test_value: float | None
    p: float | None
    reason: str | None = None


@dataclass(frozen=True)
class ExposureInference:
    """The exposure's coefficients in one tier under one covariance choice.

    ``df`` is the t reference's degrees of freedom, or None for the normal reference.
    Decisions read these, so that a fallback covariance needs no refit.
    """

    covariance: str  # "classical", "HC3", "clustered by site", ...
    columns: tuple[Coefficient, ...]  # one per exposure column
    df: float | None
    joint: JointTest | None  # only when the exposure has several columns


@dataclass(frozen=True)
class TierFit:
    name: str
    terms_added: tuple[str, ...]
    n: int
    n_parameters: int
    residual_df: int
    log_likelihood: float | None
    aic: float | None
    bic: float | None
    columns: tuple[Coefficient, ...]
    exposure: tuple[ExposureInference, ...]  # the analysis covariance first, then fallbacks
    rss: float | None = None  # gaussian
    sigma2: float | None = None
    r_squared: float | None = None
    adjusted_r_squared: float | None = None
    deviance: float | None = None  # binomial, poisson
    null_deviance: float | None = None
    pearson_x2: float | None = None  # Pearson's X² statistic
    dispersion: float | None = None  # Pearson X² / residual_df
    converged: bool = True
    iterations: int | None = None
    reason: str | None = None  # why some statistic is None
    warnings: tuple[str, ...] = ()


@dataclass(frozen=True)
class Comparison:
    """The nested comparison of tier ``from_tier`` (reduced) with ``to_tier`` (larger)."""

    from_tier: str
    to_tier: str
    method: str  # "F" | "LR" | "Wald" (robust covariance)
    df_added: int
    test_value: float | None
    p: float | None
    df_denominator: float | None = None
    reason: str | None = None


@dataclass(frozen=True)
class Natural:
    """An estimate and its interval on the natural scale: a ``difference`` (identity link),
    an ``odds ratio`` (logit), a ``rate ratio`` (log); ratios are exp of the model scale."""

    scale: str
    estimate: float | None
    low: float | None
    high: float | None


@dataclass(frozen=True)
class Change:
    """How an exposure estimate b moved from the first tier's b₁: ``relative`` =
    |b − b₁| / |b₁| (never negative); ``direction`` "away from zero", "toward zero",
    "sign reversed" or "none" (compiler.change.change_between)."""

    relative: float | None
    direction: str


@dataclass(frozen=True)
class ExposureRow:
    """The exposure across tiers (one row per tier and exposure column), under the analysis
    covariance, its interval at ``level``."""

    tier: str
    column: str
    estimate: float | None
    standard_error: float | None
    low: float | None
    high: float | None
    level: float
    natural: Natural
    change_vs_first: Change | None  # None when the first tier's estimate is 0 or missing
    reason: str | None = None


@dataclass(frozen=True)
class Influential:
    row_id: str
    cooks_distance: float


@dataclass(frozen=True)
class Diagnostics:
    """Diagnostics of the report tier."""

    tier: str
    vif: tuple[tuple[str, float | None], ...]  # (design column label, VIF); intercept left out
    normality_test: str | None  # "Shapiro-Wilk" or "D'Agostino-Pearson"
    normality_statistic: float | None
    normality_p: float | None
    breusch_pagan_statistic: float | None
    breusch_pagan_p: float | None
    influential: tuple[Influential, ...]
    fitted: np.ndarray = field(repr=False, compare=False)  # for the residual plots
    residuals: np.ndarray = field(repr=False, compare=False)  # standardized (pearson for GLM)
    reason: str | None = None


@dataclass(frozen=True)
class Reference:
    """The distribution the analysis covariance's single-coefficient statistics are referred
    to: ``t`` (gaussian) or ``z`` (binomial, poisson); ``df`` when one value holds for every
    tier (clustered: clusters − 1), ``label`` in a few words, ``basis`` the reason."""

    distribution: str
    df: float | None
    label: str
    basis: str


@dataclass(frozen=True)
class AnalysisFit:
    analysis: str
    family: str
    n: int
    tiers: tuple[TierFit, ...]
    comparisons: tuple[Comparison, ...]
    exposure: tuple[ExposureRow, ...]
    diagnostics: Diagnostics | None
    events: int | None = None  # binomial: outcome = 1 count
    warnings: tuple[str, ...] = ()
    reference: Reference | None = None

    def tier(self, name: str) -> TierFit:
        return next(t for t in self.tiers if t.name == name)
