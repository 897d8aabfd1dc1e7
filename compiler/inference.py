"""Shared inference: coefficient tables, Wald tests and the finite-or-None rule.

Every number leaving the fit passes through :func:`finite_or_none`, so NaN and ±∞ never
reach the results: a value that cannot be computed is None, and a reason goes beside it.
"""

from __future__ import annotations

import math

import numpy as np

from .fitted import Coefficient, ExposureInference, JointTest, Natural
from .words import NATURAL_SCALE


def finite_or_none(value) -> float | None:
    """A plain float, or None when the value is missing, NaN or infinite."""
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def exp_or_none(value: float | None) -> float | None:
    """exp of a model-scale value, None when it is None or exp overflows a double."""
    if value is None or value > 709.0:  # exp overflows double precision beyond ~709.78
        return None
    return finite_or_none(math.exp(value))


def natural_scale(family: str, estimate: float | None, low: float | None,
                  high: float | None) -> Natural:
    """A model-scale estimate and interval on the natural scale: as they are for an identity
    link (a difference), exp of each for a log or logit link (an odds or rate ratio)."""
    scale = NATURAL_SCALE[family]
    if scale == "difference":
        return Natural(scale, estimate, low, high)
    return Natural(scale, exp_or_none(estimate), exp_or_none(low), exp_or_none(high))


def critical_value(confidence: float, df: float | None) -> float:
    """The two-sided quantile: t on ``df`` degrees of freedom, or the normal when df is None."""
    from scipy import special  # the functions scipy.stats' t and norm call, minus overhead

    upper = 0.5 + confidence / 2.0
    return float(special.ndtri(upper) if df is None else special.stdtrit(df, upper))


def two_sided_p(test_value: float, df: float | None) -> float:
    from scipy import special

    a = abs(test_value)
    return float(2.0 * (special.ndtr(-a) if df is None else special.stdtr(df, -a)))


def coefficient_table(labels, estimates, cov, df: float | None, confidence: float,
                      reason: str | None = None) -> tuple[Coefficient, ...]:
    """One row per coefficient from the estimates and their covariance matrix.

    ``reason`` given: the inferential columns are None for that reason (e.g. an exact fit);
    a row whose standard error is not a positive finite number gets None likewise.
    """
    q = critical_value(confidence, df)
    rows = []
    for j, label in enumerate(labels):
        estimate = finite_or_none(estimates[j]) if estimates is not None else None
        variance = None if cov is None or reason else finite_or_none(cov[j, j])
        if estimate is None or variance is None or variance <= 0.0:
            why = reason or ("the estimate is not finite" if estimate is None
                             else "the standard error is not a positive finite number")
            rows.append(Coefficient(label, estimate, None, None, None, None, None, why))
            continue
        se = math.sqrt(variance)
        test_value = estimate / se
        rows.append(Coefficient(
            label, estimate, se, finite_or_none(test_value),
            finite_or_none(two_sided_p(test_value, df)),
            finite_or_none(estimate - q * se), finite_or_none(estimate + q * se)))
    return tuple(rows)


# Why a covariance of the tested coefficients can be singular, by covariance kind.
SINGULAR_CAUSE = {
    "cluster": "a clustered covariance has rank at most clusters − 1",
    "robust": "a heteroscedasticity-consistent covariance has rank at most the number of rows "
              "with a non-zero residual, and carries nothing on a direction that only rows "
              "fitted exactly (leverage 1) inform",
    "classical": "the tested columns are nearly aliased",
}


def covariance_kind(label: str) -> str:
    """``classical``, ``cluster`` or ``robust`` (HC0–HC3) from a covariance label."""
    if label.startswith("cluster"):
        return "cluster"
    return "classical" if label == "classical" else "robust"


def wald_test(estimates, cov, columns, df: float | None, method: str,
              covariance: str = "classical") -> JointTest:
    """Joint test that the coefficients in ``columns`` are all zero.

    W = bᵀ V⁻¹ b. With ``df`` given the F form W / q on (q, df) is reported (used for
    gaussian fits, classical — where it equals the nested-model F exactly — or robust);
    with df None, W itself on χ²(q) (GLM). ``covariance`` (a label or kind) names the cause
    when V is singular.
    """
    from scipy import special

    columns = list(columns)
    q = len(columns)
    if estimates is None or cov is None:
        return JointTest(method, q, df, None, None, "the coefficients could not be estimated")
    b = np.asarray(estimates, dtype=np.float64)[columns]
    v = np.asarray(cov, dtype=np.float64)[np.ix_(columns, columns)]
    if not (np.all(np.isfinite(b)) and np.all(np.isfinite(v))):
        return JointTest(method, q, df, None, None, "the covariance matrix is not finite")
    # A robust covariance can be singular in exact arithmetic yet pass Cholesky in floating
    # point: a clustered one has rank at most (clusters − 1), so testing more columns than
    # that — e.g. cluster-level dummies — would give a statistic of 1e18. Check the rank first
    # (numpy.linalg.matrix_rank's tolerance: largest singular value · q · ε).
    rank = int(np.linalg.matrix_rank(v, hermitian=True))
    if rank < q:
        cause = SINGULAR_CAUSE[covariance_kind(covariance)]
        return JointTest(method, q, df, None, None,
                         f"the covariance of the {q} tested coefficients is singular (rank "
                         f"{rank}); {cause}")
    try:
        factor = np.linalg.cholesky(v)
    except np.linalg.LinAlgError:
        return JointTest(method, q, df, None, None,
                         "the covariance of the tested coefficients is singular")
    w = float(np.sum(np.linalg.solve(factor, b) ** 2))  # ‖L⁻¹b‖² = bᵀV⁻¹b
    if df is None:
        return JointTest(method, q, None, finite_or_none(w), finite_or_none(special.chdtrc(q, w)))
    f = w / q
    return JointTest(method, q, float(df), finite_or_none(f),
                     finite_or_none(special.fdtrc(q, df, f)))


def exposure_inference(covariance: str, labels, estimates, cov, exposure_columns,
                       df: float | None, confidence: float, method: str,
                       reason: str | None = None) -> ExposureInference:
    """The exposure's coefficients under one covariance, with the joint test when the exposure
    has several columns."""
    columns = list(exposure_columns)
    table = coefficient_table([labels[j] for j in columns],
                              None if estimates is None else np.asarray(estimates)[columns],
                              None if cov is None else np.asarray(cov)[np.ix_(columns, columns)],
                              df, confidence, reason)
    joint = None
    if len(columns) > 1:
        joint = (JointTest(method, len(columns), df, None, None, reason) if reason
                 else wald_test(estimates, cov, columns, df, method, covariance))
    return ExposureInference(covariance, table, None if df is None else float(df), joint)


def information_criteria(log_likelihood: float | None, n: int, p: int):
    """(AIC, BIC) counting the p coefficients only — statsmodels' convention for OLS and GLM
    (its aic = −2ℓ + 2p, bic_llf = −2ℓ + log(n)·p), so the numbers cross-check; the gaussian
    σ² is not counted as a parameter."""
    if log_likelihood is None:
        return None, None
    return (finite_or_none(-2.0 * log_likelihood + 2.0 * p),
            finite_or_none(-2.0 * log_likelihood + math.log(n) * p))
