"""Gaussian tiers from one Householder QR of the augmented design [X | y].

Everything for every tier — coefficients, standard errors, RSS, R², F — comes from the one
R factor (compiler/qr.py explains the prefix property). Coefficients are solved from R_k by
back substitution; standard errors are σ·‖row j of R_k⁻¹‖, because diag((XᵀX)⁻¹) =
diag(R⁻¹R⁻ᵀ) is the squared row norms of R⁻¹ — neither XᵀX nor RᵀR is ever formed or
inverted (that would cost 3–4 digits on NIST Longley, see references.md).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from .covariance import reference_df, sandwich_covariances
from .fitted import Comparison, Design, TierFit
from .inference import (coefficient_table, exposure_inference, finite_or_none,
                        information_criteria, wald_test)
from .plan import Analysis, Covariance
from .qr import augmented_r, back_substitute, rank_tolerance, triangular_inverse

EXACT_FIT = "exact fit: zero residual variance"
FEW_DIGITS = 6  # warn when σ² and the standard errors carry fewer correct digits than this


@dataclass(frozen=True)
class GaussianTier:
    """The numbers of one tier the diagnostics reuse."""

    width: int
    beta: np.ndarray
    rss: float
    sigma2: float | None  # None for an exact fit
    rinv: np.ndarray


@dataclass(frozen=True)
class GaussianFit:
    tiers: tuple[TierFit, ...]
    comparisons: tuple[Comparison, ...]
    numbers: tuple[GaussianTier, ...]
    r: np.ndarray  # R of [X | y]


def fit_gaussian(analysis: Analysis, design: Design, r: np.ndarray,
                 covariances: list[Covariance], sandwiches: list[dict] | None = None
                 ) -> GaussianFit:
    """Every tier of a gaussian analysis; ``r`` is the R factor of [X | y] (rank checked).
    ``sandwiches``: the robust covariances per tier when already computed (a streamed run
    accumulates them over batches, compiler/stream_fit.py)."""
    n, p = design.x.shape
    z = r[:p, p]
    r_yy = float(r[p, p]) ** 2
    tail = np.concatenate([np.cumsum((z ** 2)[::-1])[::-1], [0.0]])  # tail[k] = Σ z[k:]²
    y_norm2 = float(tail[0] + r_yy)
    exact_below = (rank_tolerance(n, p + 1) ** 2) * y_norm2
    tss = float(tail[1] + r_yy)  # the intercept-only tier's RSS: centred total SS
    rinv = triangular_inverse(r[:p, :p])
    clusters = int(design.cluster.max()) + 1 if design.cluster is not None and n else None

    numbers = []
    for width in design.tier_width:
        beta = back_substitute(r[:width, :width], z[:width])
        rss = float(tail[width] + r_yy)
        exact = rss <= exact_below
        rss = 0.0 if exact else rss
        numbers.append(GaussianTier(width, beta, rss, None if exact else rss / (n - width),
                                    rinv[:width, :width]))

    robust = [c for c in covariances if c.kind != "classical"]
    if sandwiches is None:
        sandwiches = [{} for _ in numbers]
        if robust:
            residuals = [design.y - design.x[:, :t.width] @ t.beta for t in numbers]
            sandwiches = sandwich_covariances(design.x, rinv, [t.width for t in numbers],
                                              residuals, robust, design.cluster)

    tiers = []
    rounding = rank_tolerance(n, p + 1) * math.sqrt(y_norm2)  # the QR's error in ‖e‖
    for k, (tier, t) in enumerate(zip(analysis.tiers, numbers)):
        fitted = _tier_fit(analysis, design, tier, k, t, n, tss, covariances, sandwiches[k],
                           clusters)
        tiers.append(replace(fitted, warnings=_rounding_warning(tier.name, t, rounding)))
    comparisons = tuple(
        _compare(analysis, design, numbers[k - 1], numbers[k], tiers[k - 1].name,
                 tiers[k].name, n, sandwiches[k], clusters)
        for k in range(1, len(numbers)))
    return GaussianFit(tuple(tiers), comparisons, tuple(numbers), r)


def _rounding_warning(name: str, t: GaussianTier, rounding: float) -> tuple[str, ...]:
    """A near-exact fit: the residual norm is within a few digits of the QR's rounding in
    it (max(n, p)·ε·‖y‖, Householder's backward error on the outcome's column), so σ² and
    every standard error carry only the digits that stand above that rounding."""
    if t.sigma2 is None or rounding <= 0.0:
        return ()
    digits = math.log10(math.sqrt(t.rss) / rounding)
    if digits >= FEW_DIGITS:
        return ()
    shown = max(int(digits), 0)
    return (f"tier {name}: near-exact fit: the residuals' norm is only 10^{digits:.1f} times "
            "the QR's rounding bound on it (max(n, p)·ε·‖y‖), so σ² and the standard errors "
            f"may carry as few as {shown} correct digit{'' if shown == 1 else 's'}",)


def _covariance(t: GaussianTier, covariance: Covariance, sandwich: dict) -> np.ndarray | None:
    if covariance.kind == "classical":
        return None if t.sigma2 is None else t.sigma2 * (t.rinv @ t.rinv.T)
    return sandwich.get(covariance.label)


def _tier_fit(analysis, design, tier, k, t: GaussianTier, n, tss, covariances, sandwich,
              clusters) -> TierFit:
    labels = design.labels[:t.width]
    residual_df = n - t.width
    reason = EXACT_FIT if t.sigma2 is None else None
    inferences = []
    table = None
    for covariance in covariances:
        cov = _covariance(t, covariance, sandwich)
        df = reference_df(covariance, "gaussian", residual_df, clusters)
        joint = "F" if covariance.kind == "classical" else "Wald"
        inferences.append(exposure_inference(covariance.label, labels, t.beta, cov,
                                             design.exposure_columns, df, analysis.confidence,
                                             joint, reason))
        if table is None:
            table = coefficient_table(labels, t.beta, cov, df, analysis.confidence, reason)
    if t.sigma2 is None:
        log_likelihood = None
    else:
        # gaussian log-likelihood at the MLE σ̂² = RSS / n
        log_likelihood = -0.5 * n * (math.log(2.0 * math.pi) + math.log(t.rss / n) + 1.0)
    aic, bic = information_criteria(log_likelihood, n, t.width)
    r_squared = adj = None
    reasons = [reason] if reason else []
    if tss > 0.0:
        r_squared = 1.0 - t.rss / tss
        if residual_df > 0:
            adj = 1.0 - (1.0 - r_squared) * (n - 1) / residual_df
    else:
        reasons.append("the outcome is constant: R² is undefined")
    return TierFit(
        name=tier.name, terms_added=tuple(term.label for term in _added(analysis, k)),
        n=n, n_parameters=t.width, residual_df=residual_df,
        log_likelihood=finite_or_none(log_likelihood), aic=aic, bic=bic,
        columns=table, exposure=tuple(inferences), rss=finite_or_none(t.rss),
        sigma2=0.0 if t.sigma2 is None else finite_or_none(t.sigma2),
        r_squared=finite_or_none(r_squared), adjusted_r_squared=finite_or_none(adj),
        reason="; ".join(reasons) or None)


def _added(analysis: Analysis, k: int):
    from .design import tier_terms

    return tier_terms(analysis)[k]


def _compare(analysis, design, small: GaussianTier, big: GaussianTier, small_name, big_name,
             n, sandwich, clusters) -> Comparison:
    """Classical: the nested F from the two RSS. Robust: the Wald test of the added columns
    under the larger tier's robust covariance, in F form on (df_added, reference df)."""
    from scipy import special

    df_added = big.width - small.width
    df_big = n - big.width
    covariance = analysis.covariance
    if df_added == 0:
        return Comparison(small_name, big_name, "F", 0, None, None, float(df_big),
                          "the larger tier adds no design columns")
    if big.sigma2 is None:  # under any covariance: residuals of rounding size test nothing
        return Comparison(small_name, big_name, "F" if covariance.kind == "classical" else
                          "Wald", df_added, None, None, float(df_big),
                          EXACT_FIT + f" in tier {big_name}")
    if covariance.kind != "classical":
        df = reference_df(covariance, "gaussian", df_big, clusters)
        cov = sandwich.get(covariance.label)
        test = wald_test(big.beta, cov, range(small.width, big.width), df, "Wald",
                         covariance.kind)
        return Comparison(small_name, big_name, "Wald", df_added, test.test_value, test.p,
                          test.df_denominator, test.reason)
    f = ((small.rss - big.rss) / df_added) / big.sigma2
    f = max(f, 0.0)  # RSS can only fall as columns are added; a negative is rounding
    return Comparison(small_name, big_name, "F", df_added, finite_or_none(f),
                      finite_or_none(special.fdtrc(df_added, df_big, f)), float(df_big))


def fit_r(design: Design) -> np.ndarray:
    return augmented_r(design.x, design.y)
