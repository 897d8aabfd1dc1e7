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
    labels: tuple[str, ...]  # design column labels, e.g. "(intercept)", "arm=walking", "age^2"
    column_term: tuple[str, ...]
    tier_names: tuple[str, ...]
    tier_width: tuple[int, ...]
    exposure_columns: tuple[int, ...]
    cluster: np.ndarray | None = None  # cluster codes per row, for clustered covariance
    row_ids: object = None  # bound.RowLabels or an array of labels: labels made when asked


@dataclass(frozen=True)
class Coefficient:
    term: str
    estimate: float | None
    std_error: float | None
    statistic: float | None  # t (gaussian) or z (GLM)
    p_value: float | None
    ci_low: float | None
    ci_high: float | None
    reason: str | None = None


@dataclass(frozen=True)
class JointTest:
    """A joint test of several coefficients (the exposure levels, or a tier's additions)."""

    test: str  # "F", "Wald" (chi-square), "LR"
    df: int
    df_denominator: float | None  # F only
    statistic: float | None
    p_value: float | None
    reason: str | None = None


@dataclass(frozen=True)
class ExposureInference:
    """The exposure's coefficients in one tier under one covariance choice.

    ``df`` is the t reference's degrees of freedom, or None for the normal reference.
    Decisions read these, so that a fallback covariance needs no refit.
    """

    covariance: str  # "classical", "HC3", "cluster(site)", ...
    coefficients: tuple[Coefficient, ...]  # one per exposure column
    df: float | None
    joint: JointTest | None  # only when the exposure has several columns


@dataclass(frozen=True)
class TierFit:
    name: str
    terms_added: tuple[str, ...]
    n: int
    n_parameters: int
    df_resid: int
    log_likelihood: float | None
    aic: float | None
    bic: float | None
    coefficients: tuple[Coefficient, ...]
    exposure: tuple[ExposureInference, ...]  # the analysis covariance first, then fallbacks
    rss: float | None = None  # gaussian
    sigma2: float | None = None
    r_squared: float | None = None
    adj_r_squared: float | None = None
    deviance: float | None = None  # binomial, poisson
    null_deviance: float | None = None
    pearson_chi2: float | None = None
    dispersion: float | None = None  # Pearson chi-square / df_resid
    converged: bool = True
    iterations: int | None = None
    reason: str | None = None  # why some statistic is None
    warnings: tuple[str, ...] = ()


@dataclass(frozen=True)
class Comparison:
    """The nested comparison of tier ``from_tier`` (reduced) with ``to_tier`` (larger)."""

    from_tier: str
    to_tier: str
    test: str  # "F" | "LR" | "Wald" (robust covariance)
    df_added: int
    statistic: float | None
    p_value: float | None
    df_denominator: float | None = None
    reason: str | None = None


@dataclass(frozen=True)
class ExposureRow:
    """The exposure across tiers (one row per tier and exposure column)."""

    tier: str
    term: str
    estimate: float | None
    std_error: float | None
    ci_low: float | None
    ci_high: float | None
    change_from_first: float | None
    ratio: float | None = None  # exp(estimate): odds or rate ratio
    ratio_ci_low: float | None = None
    ratio_ci_high: float | None = None
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
