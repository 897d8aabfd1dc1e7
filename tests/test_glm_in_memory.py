"""Binomial and Poisson tiers held in memory are fitted by the chunked IRLS (compiler/irls.py)
and land on statsmodels' GLM (reference library) to 1e-10, with no copy of the design.

statsmodels.api.GLM(...).fit() is the independent computation: with tolerance 0 it iterates
until two successive deviances are equal, the maximum-likelihood estimate to working
precision; with its defaults it gives the iteration count. HC2 and HC3 are checked against
their definitions written out in numpy (MacKinnon & White 1985, J Econometrics 29:305–325,
with the GLM's weighted leverages), since statsmodels' GLM takes HC1–HC3 as HC0. The data
are seeded simulations built here.
"""

from __future__ import annotations

import tracemalloc

import numpy as np
import pytest
import statsmodels.api as sm

import fitkit as fk
from compiler.design import design
from compiler.fit import fit
from compiler.irls import REFINE_STEPS
from compiler.plan import Covariance, Variable

RELATIVE = 1e-10
SITES = 25


def _columns(n=2000, seed=7, covariates=2):
    rng = np.random.default_rng(seed)
    arm = rng.choice(["a", "b", "c"], n)
    columns = {f"z{j}": rng.normal(size=n) for j in range(covariates)}
    eta = 0.5 * (arm == "b") - 0.7 * (arm == "c") + 0.3 * columns["z0"] - 0.2 * columns["z1"]
    days = rng.integers(1, 30, n).astype(float)
    columns.update(
        ok=(rng.random(n) < 1 / (1 + np.exp(-eta))).astype(float),
        events=rng.poisson(days * np.exp(-2 + eta)).astype(float), days=days,
        arm=arm.astype(object), site=rng.integers(0, SITES, n).astype(float))
    return columns


def _fit(family, covariance=Covariance(), columns=None, covariates=2):
    columns = columns if columns is not None else _columns(covariates=covariates)
    names = [f"z{j}" for j in range(covariates)]
    analysis = fk.analysis("ok" if family == "binomial" else "events", "arm",
                           [("crude", []), ("adjusted", names)], family,
                           covariance=covariance,
                           offset="days" if family == "poisson" else None)
    variables = [Variable("ok", "binary"), Variable("events", "count"),
                 Variable("days", "count"),
                 Variable("arm", "categorical", levels=("a", "b", "c"), reference="a"),
                 Variable("site", "categorical", levels=tuple(float(s) for s in range(SITES))),
                 *fk.numeric_variables(*names)]
    plan = fk.plan(variables, [analysis])
    d = design(plan, analysis, fk.bound(columns, [analysis]))
    return columns, d, plan, analysis


def _sm_family(family):
    return sm.families.Binomial() if family == "binomial" else sm.families.Poisson()


def _reference(family, d, width, **options):
    """statsmodels' GLM to the rounding floor (reference library)."""
    x = np.asarray(d.x)[:, :width]  # the design's rows, built whole for the reference
    return sm.GLM(d.y, x, family=_sm_family(family), offset=d.offset).fit(
        tol=0.0, maxiter=40, **options)


def _estimates(tier):
    return (np.array([c.estimate for c in tier.columns]),
            np.array([c.standard_error for c in tier.columns]))


FAMILIES = ["binomial", "poisson"]


@pytest.mark.parametrize("family", FAMILIES)
@pytest.mark.parametrize("kind", ["classical", "HC0", "cluster"])
def test_coefficients_and_standard_errors_match_statsmodels_glm_to_1e10(family, kind):
    covariance = Covariance(kind, "site") if kind == "cluster" else Covariance(kind)
    columns, d, plan, analysis = _fit(family, covariance)
    result = fit(plan, analysis, d)
    options = {}
    if kind == "HC0":
        options = {"cov_type": "HC0"}
    elif kind == "cluster":  # CR1 factor, statsmodels' default, as covariance.py says
        options = {"cov_type": "cluster", "cov_kwds": {"groups": columns["site"].astype(int)}}
    for width, tier in zip(d.tier_width, result.tiers):
        reference = _reference(family, d, width, **options)
        estimates, errors = _estimates(tier)
        np.testing.assert_allclose(estimates, reference.params, rtol=RELATIVE)
        np.testing.assert_allclose(errors, reference.bse, rtol=RELATIVE)


@pytest.mark.parametrize("family", FAMILIES)
@pytest.mark.parametrize("kind", ["HC1", "HC2", "HC3"])
def test_hc1_to_hc3_match_their_definitions_at_statsmodels_solution(family, kind):
    _, d, plan, analysis = _fit(family, Covariance(kind))
    result = fit(plan, analysis, d)
    for width, tier in zip(d.tier_width, result.tiers):
        reference = _reference(family, d, width)
        x, n = np.asarray(d.x)[:, :width], len(d.y)
        mu = reference.mu
        v = mu * (1 - mu) if family == "binomial" else mu  # V(μ), the canonical weights
        bread = np.linalg.inv(x.T @ (x * v[:, None]))
        h = v * np.einsum("ij,jk,ik->i", x, bread, x)  # leverage of W½X
        omega = {"HC1": np.full(n, n / (n - width)), "HC2": 1 / (1 - h),
                 "HC3": 1 / (1 - h) ** 2}[kind]
        scores = x * (d.y - mu)[:, None]  # canonical link: score = x (y − μ)
        sandwich = bread @ (scores.T @ (scores * omega[:, None])) @ bread
        _, errors = _estimates(tier)
        np.testing.assert_allclose(errors, np.sqrt(np.diag(sandwich)), rtol=RELATIVE)


@pytest.mark.parametrize("family", FAMILIES)
def test_deviances_pearson_likelihood_and_dispersion_match_statsmodels_glm(family):
    _, d, plan, analysis = _fit(family)
    result = fit(plan, analysis, d)
    for width, tier in zip(d.tier_width, result.tiers):
        reference = _reference(family, d, width)
        assert tier.deviance == pytest.approx(reference.deviance, rel=RELATIVE)
        assert tier.null_deviance == pytest.approx(reference.null_deviance, rel=RELATIVE)
        assert tier.pearson_x2 == pytest.approx(reference.pearson_chi2, rel=RELATIVE)
        assert tier.log_likelihood == pytest.approx(reference.llf, rel=RELATIVE)
        assert tier.dispersion == pytest.approx(reference.pearson_chi2 / reference.df_resid,
                                                rel=RELATIVE)


@pytest.mark.parametrize("family", FAMILIES)
def test_iterations_are_statsmodels_then_the_newton_refinement(family):
    _, d, plan, analysis = _fit(family)
    result = fit(plan, analysis, d)
    for width, tier in zip(d.tier_width, result.tiers):
        default = sm.GLM(d.y, np.asarray(d.x)[:, :width], family=_sm_family(family),
                         offset=d.offset).fit()  # reference library, its own criterion
        assert tier.converged
        assert tier.iterations == default.fit_history["iteration"] + REFINE_STEPS


def test_a_glm_fit_makes_no_copy_of_its_design():
    """What the fit allocates beyond the design (traced by tracemalloc, which numpy reports
    its arrays to) is a few n-long vectors per tier and chunk-sized blocks: less than one
    copy of the n × p design. statsmodels' GLM made several (14 to 16 copies)."""
    _, d, plan, analysis = _fit("poisson", Covariance("HC3"),
                                _columns(n=200_000, seed=3, covariates=40), covariates=40)
    fit(plan, analysis, d)  # libraries loaded and warm, outside the trace
    tracemalloc.start()
    try:
        before = tracemalloc.get_traced_memory()[0]
        result = fit(plan, analysis, d)
        peak = tracemalloc.get_traced_memory()[1] - before
    finally:
        tracemalloc.stop()
    assert all(tier.converged for tier in result.tiers)
    whole = d.x.shape[0] * d.x.shape[1] * 8  # the n × p design in float64
    assert peak < whole, f"{peak / whole:.2f} design copies"


def test_a_tier_whose_iteration_fails_is_reported_and_the_others_are_fitted(monkeypatch):
    """A failure inside one tier's IRLS (here a LinAlgError injected for the adjusted tier,
    as a singular weighted design would raise) costs that tier alone, with the reason."""
    import compiler.irls as irls

    _, d, plan, analysis = _fit("binomial")
    expected = fit(plan, analysis, d)
    failing = d.tier_width[-1]
    real = irls.fit_tiers

    def fit_tiers(batches, family, widths, **options):
        if failing in list(widths):
            raise np.linalg.LinAlgError("singular matrix")
        return real(batches, family, widths, **options)

    monkeypatch.setattr(irls, "fit_tiers", fit_tiers)
    result = fit(plan, analysis, d)
    crude, adjusted = result.tiers
    assert crude.columns == expected.tiers[0].columns
    assert adjusted.converged is False and adjusted.reason.startswith("the fit failed")
    assert all(c.estimate is None for c in adjusted.columns)
    assert result.comparisons[0].test_value is None
