"""Binomial (logit) and Poisson (log) tiers by IRLS, every tier in the same passes.

The iteration is compiler/irls.py's, the one a streamed run takes, here over the design held
in memory a chunk of rows at a time: each iteration accumulates the R factor of the weighted
working design [W½X | W½z] chunk by chunk, so a fit needs the design, a chunk and a few
p × p factors, never a copy of the design (statsmodels' GLM, used before, made several).
It follows statsmodels' GLM.fit (starting values, deviance criterion), then takes two more
Newton steps to full double precision. The covariances — classical and robust — are then
computed here from the R factor of the weighted design W½X at the solution, by the same code
as the gaussian ones (compiler/covariance.py). For these canonical links the classical
covariance is (XᵀWX)⁻¹ with W = diag(V(μ)), and the Pearson residual is (y − μ)/√V(μ).

What cannot be estimated is said: when a fitted value comes within 1e-6 of the boundary,
the linear programme of compiler/separation.py decides whether the maximum-likelihood
estimate exists; if it does not (complete or quasi-complete separation; Poisson means
driven to zero), or the iteration did not converge, the tier's coefficients and tests are
None with the reason, and a warning.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .covariance import reference_df, sandwich_covariances
from .fitted import Comparison, Design, TierFit
from .inference import (coefficient_table, exposure_inference, finite_or_none,
                        information_criteria, wald_test)
from .plan import Analysis, Covariance
from .qr import triangular_inverse

SUSPECT = 1e-6  # fitted values this close to 0 or 1 (Poisson: 0) prompt the separation check
OVERDISPERSION = 1.5  # Pearson dispersion above this is flagged (common practice)


@dataclass(frozen=True)
class GlmTier:
    """The numbers of one tier the diagnostics reuse; ``failure`` says why there are none."""

    width: int
    beta: np.ndarray | None
    mu: np.ndarray | None
    weights: np.ndarray | None  # V(μ), the IRLS working weights at the solution
    rinv: np.ndarray | None  # R⁻¹ of W½X
    log_likelihood: float | None
    failure: str | None
    iterations: int | None = None  # least-squares steps taken, refinement included


@dataclass(frozen=True)
class GlmFit:
    tiers: tuple[TierFit, ...]
    comparisons: tuple[Comparison, ...]
    numbers: tuple[GlmTier, ...]


def fit_glm(analysis: Analysis, design: Design, covariances: list[Covariance]) -> GlmFit:
    n = design.x.shape[0]
    clusters = int(design.cluster.max()) + 1 if design.cluster is not None and n else None
    robust = [c for c in covariances if c.kind != "classical"]
    null, *fits = _fits(analysis.family, design)
    null_deviance = None  # a courtesy figure: the null model's failure is not the fit's
    if not isinstance(null, str) and null.converged:
        null_deviance = finite_or_none(null.deviance)
    tiers, numbers, sandwiches = [], [], []
    for k, tier in enumerate(analysis.tiers):
        fit = fits[k]
        number, fit_warnings = _fit_one(analysis.family, design, design.tier_width[k], fit)
        sandwich = _sandwich(design, number, robust)
        numbers.append(number)
        sandwiches.append(sandwich)
        statistics = None if isinstance(fit, str) else (fit.deviance, fit.pearson_x2)
        tiers.append(_tier_fit(analysis, design, tier, k, number, covariances, clusters,
                               fit_warnings, sandwich, null_deviance, statistics))
    comparisons = tuple(
        _compare(analysis, numbers[k - 1], numbers[k], tiers[k - 1], tiers[k],
                 sandwiches[k])
        for k in range(1, len(numbers)))
    return GlmFit(tuple(tiers), comparisons, tuple(numbers))


_FAILURES = (np.linalg.LinAlgError, ValueError, FloatingPointError)


def _fits(family: str, design: Design) -> list:
    """The IRLS fits of the intercept alone and of every tier (compiler/irls.py), over the
    design's rows a chunk at a time: per iteration one pass accumulates the R factor of the
    weighted working design, so no n × p copy is made. Fitted together, as a streamed run
    fits them; when that fails, one by one, so that one tier's failure (a string) is its
    own."""
    from .irls import fit_tiers, in_batches, moments_map
    from .qr import CHUNK_ROWS

    widths = [1, *design.tier_width]
    batches = in_batches(design.x, design.y, design.offset, CHUNK_ROWS)
    moments = moments_map((None, design.y, design.offset))
    try:
        return list(fit_tiers(batches, family, widths, moments=moments))
    except _FAILURES:
        pass
    found: list = []
    for width in widths:
        try:
            found.extend(fit_tiers(batches, family, [width], moments=moments))
        except _FAILURES as error:
            found.append(f"the fit failed: {error}")
    return found


def _fit_one(family: str, design: Design, width: int, fit) -> tuple[GlmTier, list[str]]:
    """One tier's numbers from its IRLS fit (``fit``: irls.GlmTierFit, or why it failed)."""
    if isinstance(fit, str):
        return GlmTier(width, None, None, None, None, None, fit), [fit]
    x = design.x[:, :width]
    eta = x @ fit.params
    if design.offset is not None:
        eta += design.offset
    if family == "binomial":
        mu = 1.0 / (1.0 + np.exp(-eta))
        weights = mu * (1.0 - mu)
    else:
        mu = np.exp(eta)
        weights = mu.copy()
    failure = None
    if fit.closest_boundary < SUSPECT:  # the linear programme decides
        from .separation import separating_direction

        if separating_direction(np.asarray(x), design.y, family):
            failure = _SEPARATION if family == "binomial" else _ZERO_MEANS
    if failure is None and not fit.converged:
        failure = f"the fit did not converge in {fit.iterations} iterations"
    rinv = None
    if failure is None:
        if np.any(np.abs(np.diag(fit.r_solution)) == 0.0):
            failure = "the weighted design is singular at the solution"
        else:
            rinv = triangular_inverse(fit.r_solution)
    llf = None if failure else finite_or_none(fit.log_likelihood)
    # None: of the last iterate, not of a maximum: nothing to report
    return (GlmTier(width, fit.params, mu, weights, rinv, llf, failure, int(fit.iterations)),
            [failure] if failure else [])


_SEPARATION = ("complete or quasi-complete separation: a combination of the design columns "
               "predicts some outcomes perfectly, so the maximum-likelihood estimates do not "
               "exist")
_ZERO_MEANS = ("fitted means driven to zero (e.g. a group with no events): the "
               "maximum-likelihood estimates do not exist")


def _sandwich(design: Design, t: GlmTier, robust: list[Covariance]) -> dict:
    if t.failure is not None or not robust:
        return {}
    root_w = np.sqrt(t.weights)
    pearson = (design.y - t.mu) / root_w
    return sandwich_covariances(design.x[:, :t.width], t.rinv, [t.width], [pearson], robust,
                                design.cluster, root_w)[0]


def _tier_fit(analysis, design, tier, k, t: GlmTier, covariances, clusters,
              notes: list[str], sandwich: dict, null_deviance: float | None,
              statistics: tuple[float, float] | None = None) -> TierFit:
    """``statistics``: (deviance, Pearson X²) as the IRLS accumulated them at the solution."""
    from .design import tier_terms

    n = design.x.shape[0]
    labels = design.labels[:t.width]
    residual_df = n - t.width
    usable = t.failure is None
    inferences, table = [], None
    for covariance in covariances:
        cov = None
        if usable:
            cov = t.rinv @ t.rinv.T if covariance.kind == "classical" else sandwich.get(
                covariance.label)
        df = reference_df(covariance, analysis.family, residual_df, clusters)
        estimates = t.beta if usable else None
        inferences.append(exposure_inference(covariance.label, labels, estimates, cov,
                                             design.exposure_columns, df, analysis.confidence,
                                             "Wald", t.failure))
        if table is None:
            table = coefficient_table(labels, estimates, cov, df, analysis.confidence,
                                      t.failure)
    deviance = pearson_x2 = dispersion = None
    warned = list(notes)
    if usable and statistics is not None:  # never the last iterate's
        deviance, pearson_x2 = statistics
        dispersion = pearson_x2 / residual_df if residual_df > 0 else None
        if analysis.family == "poisson" and dispersion is not None and \
                dispersion > OVERDISPERSION:
            warned.append(f"Pearson dispersion {dispersion:.3g} is above {OVERDISPERSION} "
                          "(common practice): the counts look over-dispersed")
    aic, bic = information_criteria(t.log_likelihood, n, t.width)
    return TierFit(
        name=tier.name, terms_added=tuple(term.label for term in tier_terms(analysis)[k]),
        n=n, n_parameters=t.width, residual_df=residual_df, log_likelihood=t.log_likelihood,
        aic=aic, bic=bic, columns=table, exposure=tuple(inferences),
        deviance=finite_or_none(deviance), null_deviance=null_deviance, pearson_x2=finite_or_none(pearson_x2),
        dispersion=finite_or_none(dispersion), converged=usable, iterations=t.iterations,
        reason=t.failure, warnings=tuple(f"tier {tier.name}: {w}" for w in warned))


def _compare(analysis, small: GlmTier, big: GlmTier, small_fit: TierFit, big_fit: TierFit,
             sandwich: dict) -> Comparison:
    """Classical: the likelihood ratio 2(ℓ_big − ℓ_small) on χ²(df_added). Robust: the Wald
    χ² of the added columns under the larger tier's robust covariance."""
    from scipy import special

    df_added = big.width - small.width
    covariance = analysis.covariance
    test = "LR" if covariance.kind == "classical" else "Wald"
    failed = small.failure or big.failure
    if failed:
        tier = small_fit.name if small.failure else big_fit.name
        return Comparison(small_fit.name, big_fit.name, test, df_added, None, None, None,
                          f"tier {tier}: {failed}")
    if df_added == 0:
        return Comparison(small_fit.name, big_fit.name, test, 0, None, None, None,
                          "the larger tier adds no design columns")
    if test == "Wald":
        joint = wald_test(big.beta, sandwich.get(covariance.label),
                          range(small.width, big.width), None, "Wald", covariance.kind)
        return Comparison(small_fit.name, big_fit.name, "Wald", df_added, joint.test_value,
                          joint.p, None, joint.reason)
    if small.log_likelihood is None or big.log_likelihood is None:
        return Comparison(small_fit.name, big_fit.name, "LR", df_added, None, None, None,
                          "a log-likelihood is not finite")
    lr = max(2.0 * (big.log_likelihood - small.log_likelihood), 0.0)  # negative: rounding
    return Comparison(small_fit.name, big_fit.name, "LR", df_added, finite_or_none(lr),
                      finite_or_none(special.chdtrc(df_added, lr)))


def events(design: Design) -> int:
    return int(np.sum(design.y == 1.0))

