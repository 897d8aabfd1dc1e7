"""Binomial and Poisson tiers, against independent computations: statsmodels' discrete-choice
Logit and Poisson (Newton's method, a different code path from GLM's IRLS) and a direct
scipy.optimize maximisation of the log-likelihood."""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import optimize, stats

import fitkit as fk
from compiler.design import design
from compiler.fit import fit
from compiler.plan import Variable

GUIDANCE = ("none", "leaflet", "coached")
N = 300


def _columns(seed=4, overdispersed=False):
    rng = np.random.default_rng(seed)
    guidance = rng.choice(GUIDANCE, N)
    age = rng.uniform(20, 70, N)
    nights = rng.integers(5, 29, N).astype(float)
    coached = guidance == "coached"
    p = 1 / (1 + np.exp(-(-0.8 + 0.9 * coached + 0.03 * (age - 45))))
    rate = nights * np.exp(-1.5 + 0.4 * coached + 0.01 * (age - 45))
    if overdispersed:  # a gamma-mixed Poisson: variance well above the mean
        rate = rate * rng.gamma(1.0, 1.0, N)
    return {"settled": rng.binomial(1, p).astype(float), "wakes": rng.poisson(rate).astype(float),
            "guidance": guidance.astype(object), "age": age, "nights": nights}


def _variables():
    return [Variable("settled", "binary"), Variable("wakes", "count"),
            Variable("nights", "count"), Variable("age", "continuous"),
            Variable("guidance", "categorical", levels=GUIDANCE, reference="none")]


def _fit(family, columns=None, tiers=(("crude", []), ("adjusted", ["age"]))):
    columns = columns or _columns()
    outcome = "settled" if family == "binomial" else "wakes"
    analysis = fk.analysis(outcome, "guidance", list(tiers), family,
                           offset="nights" if family == "poisson" else None)
    plan = fk.plan(_variables(), [analysis])
    d = design(plan, analysis, fk.bound(columns, [analysis]))
    return d, fit(plan, analysis, d)


@pytest.fixture(scope="module")
def logistic():
    return _fit("binomial")


@pytest.fixture(scope="module")
def poisson():
    return _fit("poisson")


def test_logistic_matches_statsmodels_logit(logistic):
    d, result = logistic
    for width, tier in zip(d.tier_width, result.tiers):
        reference = sm.Logit(d.y, d.x[:, :width]).fit(disp=0, tol=1e-12)  # reference library
        np.testing.assert_allclose([c.estimate for c in tier.columns], reference.params,
                                   rtol=1e-6)
        np.testing.assert_allclose([c.standard_error for c in tier.columns], reference.bse,
                                   rtol=1e-6)
        np.testing.assert_allclose([c.p_two_sided for c in tier.columns], reference.pvalues,
                                   rtol=1e-5)
        assert tier.log_likelihood == pytest.approx(reference.llf, rel=1e-9)
        assert tier.aic == pytest.approx(reference.aic, rel=1e-9)
        assert tier.bic == pytest.approx(reference.bic, rel=1e-9)


def test_logistic_matches_a_direct_maximisation_of_the_likelihood(logistic):
    d, result = logistic
    x, y = np.asarray(d.x), d.y

    def negative_log_likelihood(beta):  # Bernoulli log-likelihood, written out
        eta = x @ beta
        return float(np.sum(np.logaddexp(0.0, eta) - y * eta))

    def gradient(beta):
        return x.T @ (1 / (1 + np.exp(-(x @ beta))) - y)

    best = optimize.minimize(negative_log_likelihood, np.zeros(x.shape[1]), jac=gradient,
                             method="BFGS", options={"gtol": 1e-10})
    np.testing.assert_allclose([c.estimate for c in result.tier("adjusted").columns],
                               best.x, rtol=1e-5)


def test_poisson_with_offset_matches_statsmodels_discrete_poisson(poisson):
    d, result = poisson
    for width, tier in zip(d.tier_width, result.tiers):
        reference = sm.Poisson(d.y, d.x[:, :width], offset=d.offset).fit(
            disp=0, tol=1e-12, method="newton")  # reference library
        np.testing.assert_allclose([c.estimate for c in tier.columns], reference.params,
                                   rtol=1e-6)
        np.testing.assert_allclose([c.standard_error for c in tier.columns], reference.bse,
                                   rtol=1e-6)
        assert tier.log_likelihood == pytest.approx(reference.llf, rel=1e-9)


def test_poisson_deviance_pearson_and_dispersion_match_statsmodels_glm(poisson):
    d, result = poisson
    for width, tier in zip(d.tier_width, result.tiers):
        reference = sm.GLM(d.y, d.x[:, :width], family=sm.families.Poisson(),
                           offset=d.offset).fit()  # reference library
        assert tier.deviance == pytest.approx(reference.deviance, rel=1e-8)
        assert tier.null_deviance == pytest.approx(reference.null_deviance, rel=1e-8)
        assert tier.pearson_x2 == pytest.approx(reference.pearson_chi2, rel=1e-8)
        assert tier.dispersion == pytest.approx(reference.pearson_chi2 / reference.df_resid,
                                                rel=1e-8)


def test_likelihood_ratio_comparison_on_chi_square(logistic):
    d, result = logistic
    small = sm.Logit(d.y, d.x[:, :d.tier_width[0]]).fit(disp=0, tol=1e-12)
    big = sm.Logit(d.y, d.x).fit(disp=0, tol=1e-12)
    lr = 2 * (big.llf - small.llf)  # references.md: 2(ℓ_full − ℓ_reduced) on χ²(df added)
    comparison = result.comparisons[0]
    assert comparison.method == "LR" and comparison.df_added == 1
    assert comparison.test_value == pytest.approx(lr, rel=1e-6)
    assert comparison.p == pytest.approx(stats.chi2.sf(lr, 1), rel=1e-5)


def test_joint_exposure_test_is_a_wald_chi_square(logistic):
    d, result = logistic
    reference = sm.GLM(d.y, d.x, family=sm.families.Binomial()).fit().wald_test(
        np.eye(4)[1:3], scalar=True)  # reference library
    joint = result.tier("adjusted").exposure[0].joint
    assert joint.method == "Wald" and joint.df_added == 2 and joint.df_denominator is None
    assert joint.test_value == pytest.approx(float(reference.statistic), rel=1e-6)


def test_exposure_is_also_given_as_odds_ratio(logistic):
    _, result = logistic
    for row in result.exposure:
        assert row.natural.scale == "odds ratio"
        assert row.natural.estimate == pytest.approx(math.exp(row.estimate), rel=1e-12)
        assert row.natural.low == pytest.approx(math.exp(row.low), rel=1e-12)
        assert row.natural.high == pytest.approx(math.exp(row.high), rel=1e-12)


def test_events_count_the_outcome_ones(logistic):
    d, result = logistic
    assert result.events == int(d.y.sum())


def test_overdispersed_counts_are_warned_about():
    _, result = _fit("poisson", _columns(overdispersed=True))
    tier = result.tier("adjusted")
    assert tier.dispersion > 1.5
    assert any("over-dispersed" in w for w in result.warnings)


def test_perfect_separation_gives_none_with_a_reason_and_a_warning():
    columns = _columns()
    columns["settled"] = (columns["age"] > 45).astype(float)  # age separates the outcome
    _, result = _fit("binomial", columns)
    adjusted = result.tier("adjusted")
    assert all(c.estimate is None and "separation" in c.reason for c in adjusted.columns)
    assert result.comparisons[0].test_value is None and "separation" in result.comparisons[0].reason
    assert any("separation" in w for w in result.warnings)
    assert all(math.isfinite(v) for _, v in fk.walk_numbers(result))


def test_quasi_separation_by_an_empty_cell_gives_none_with_a_reason():
    columns = _columns()
    columns["settled"][columns["guidance"] == "coached"] = 1.0  # every coached sleeper settles
    _, result = _fit("binomial", columns)
    crude = result.tier("crude")
    assert crude.columns[0].estimate is None and "separation" in crude.reason
    assert all(r.estimate is None for r in result.exposure)


def test_poisson_group_without_events_gives_none_with_a_reason():
    columns = _columns()
    columns["wakes"][columns["guidance"] == "leaflet"] = 0.0
    _, result = _fit("poisson", columns)
    assert all(c.standard_error is None and "driven to zero" in c.reason
               for c in result.tier("crude").columns)


def test_nothing_non_finite_leaves_a_glm_fit(poisson):
    _, result = poisson
    assert all(math.isfinite(v) for _, v in fk.walk_numbers(result))


def test_separation_programme_finds_a_separating_direction_only_when_there_is_one():
    from compiler.separation import separating_direction

    # Albert & Anderson 1984: x = 1..8, y = 1 exactly when x > 4.5 is completely separated;
    # flipping one outcome on each side removes every separating direction.
    x = np.column_stack([np.ones(8), np.arange(1.0, 9.0)])
    separated = (x[:, 1] > 4.5).astype(float)
    overlapping = separated.copy()
    overlapping[[0, 7]] = 1.0 - overlapping[[0, 7]]
    assert separating_direction(x, separated, "binomial")
    assert not separating_direction(x, overlapping, "binomial")
