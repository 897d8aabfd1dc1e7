"""Robust covariances from the R factor, against statsmodels' own sandwich estimators."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm

import fitkit as fk
from compiler.design import design
from compiler.fit import fit
from compiler.plan import Covariance, Variable

N = 150


def _columns(seed=21):
    rng = np.random.default_rng(seed)
    arm = rng.choice(["usual", "walking"], N)
    age = rng.uniform(20, 70, N)
    site = rng.integers(0, 12, N)
    site_effect = rng.normal(0, 0.7, 12)[site]
    walking = arm == "walking"
    y = 1 + 0.8 * walking + 0.04 * age + site_effect + rng.normal(0, 0.5 + age / 50, N)
    eta = -0.5 + 0.6 * walking + 0.02 * (age - 45) + site_effect
    settled = rng.binomial(1, 1 / (1 + np.exp(-eta))).astype(float)
    return {"y": y, "settled": settled, "arm": arm.astype(object), "age": age,
            "shift": rng.integers(0, 2, N).astype(float),
            "site": np.asarray([f"s{s:02d}" for s in site], dtype=object)}


def _variables():
    return [Variable("y", "continuous"), Variable("settled", "binary"),
            Variable("arm", "categorical", levels=("usual", "walking")),
            Variable("age", "continuous"), Variable("shift", "binary"),
            Variable("site", "categorical", levels=tuple(f"s{s:02d}" for s in range(12)))]


def _fit(covariance, family="gaussian"):
    columns = _columns()
    outcome = "y" if family == "gaussian" else "settled"
    analysis = fk.analysis(outcome, "arm", [("crude", []), ("adjusted", ["age", "shift"])],
                           family, covariance=covariance)
    plan = fk.plan(_variables(), [analysis])
    d = design(plan, analysis, fk.bound(columns, [analysis]))
    return d, fit(plan, analysis, d)


@pytest.mark.parametrize("kind", ["HC0", "HC1", "HC2", "HC3"])
def test_gaussian_hc_standard_errors_match_statsmodels(kind):
    d, result = _fit(Covariance(kind))
    for width, tier in zip(d.tier_width, result.tiers):
        reference = sm.OLS(d.y, d.x[:, :width]).fit(cov_type=kind)  # reference library
        np.testing.assert_allclose([c.standard_error for c in tier.columns], reference.bse,
                                   rtol=1e-9)
        assert tier.exposure[0].covariance == kind


def test_gaussian_cluster_matches_statsmodels_with_t_on_clusters_minus_one():
    d, result = _fit(Covariance("cluster", "site"))
    tier = result.tier("adjusted")
    reference = sm.OLS(d.y, d.x).fit(cov_type="cluster", cov_kwds={"groups": d.cluster},
                                     use_t=True)  # reference library
    np.testing.assert_allclose([c.standard_error for c in tier.columns], reference.bse, rtol=1e-9)
    np.testing.assert_allclose([c.p_two_sided for c in tier.columns], reference.pvalues,
                               rtol=1e-8)
    assert tier.exposure[0].df == reference.df_resid_inference == 11
    assert tier.exposure[0].covariance == "clustered by site"


def test_gaussian_robust_comparison_is_the_wald_test_of_the_added_terms():
    d, result = _fit(Covariance("HC3"))
    comparison = result.comparisons[0]
    reference = sm.OLS(d.y, d.x).fit(cov_type="HC3", use_t=True).wald_test(
        np.eye(4)[2:], scalar=True, use_f=True)  # reference library
    assert comparison.method == "Wald" and comparison.df_added == 2
    assert comparison.test_value == pytest.approx(float(reference.fvalue), rel=1e-9)
    assert comparison.p == pytest.approx(float(reference.pvalue), rel=1e-8)
    assert comparison.df_denominator == reference.df_denom


@pytest.mark.parametrize("covariance", [Covariance("HC0"), Covariance("cluster", "site")])
def test_glm_hc0_and_cluster_match_statsmodels(covariance):
    d, result = _fit(covariance, "binomial")
    for width, tier in zip(d.tier_width, result.tiers):
        kwargs = {"cov_kwds": {"groups": d.cluster}} if covariance.kind == "cluster" else {}
        reference = sm.GLM(d.y, d.x[:, :width], family=sm.families.Binomial()).fit(
            cov_type=covariance.kind, **kwargs)  # reference library
        np.testing.assert_allclose([c.standard_error for c in tier.columns], reference.bse,
                                   rtol=1e-6)


def test_glm_hc1_is_hc0_scaled_by_n_over_n_minus_p():
    # MacKinnon & White 1985: HC1 = n/(n − p) · HC0 (statsmodels' GLM treats HC1–HC3 as HC0)
    _, hc0 = _fit(Covariance("HC0"), "binomial")
    _, hc1 = _fit(Covariance("HC1"), "binomial")
    tier0, tier1 = hc0.tier("adjusted"), hc1.tier("adjusted")
    scale = np.sqrt(N / (N - tier0.n_parameters))
    np.testing.assert_allclose([c.standard_error for c in tier1.columns],
                               [c.standard_error * scale for c in tier0.columns], rtol=1e-12)


@pytest.mark.parametrize("kind, power", [("HC2", 1), ("HC3", 2)])
def test_glm_hc2_hc3_match_a_dense_sandwich_with_statsmodels_leverages(kind, power):
    d, result = _fit(Covariance(kind), "binomial")
    reference = sm.GLM(d.y, d.x, family=sm.families.Binomial()).fit()
    h = reference.get_influence().hat_matrix_diag  # reference library: GLM leverages
    score = d.x * (d.y - reference.mu)[:, None]
    meat = (score / ((1 - h) ** power)[:, None]).T @ score
    bread = reference.normalized_cov_params
    expected = np.sqrt(np.diag(bread @ meat @ bread))
    np.testing.assert_allclose([c.standard_error for c in result.tier("adjusted").columns],
                               expected, rtol=1e-6)


def test_glm_robust_comparison_is_a_wald_chi_square():
    d, result = _fit(Covariance("HC0"), "binomial")
    comparison = result.comparisons[0]
    reference = sm.GLM(d.y, d.x, family=sm.families.Binomial()).fit(cov_type="HC0").wald_test(
        np.eye(4)[2:], scalar=True)  # reference library (chi-square form)
    assert comparison.method == "Wald" and comparison.df_denominator is None
    assert comparison.test_value == pytest.approx(float(reference.statistic), rel=1e-6)
    assert comparison.p == pytest.approx(float(reference.pvalue), rel=1e-6)


def test_a_single_cluster_gives_none_not_nan():
    columns = _columns()
    columns["site"] = np.asarray(["s00"] * N, dtype=object)
    analysis = fk.analysis("y", "arm", [("crude", []), ("adjusted", ["age", "shift"])],
                           covariance=Covariance("cluster", "site"))
    plan = fk.plan(_variables(), [analysis])
    result = fit(plan, analysis, design(plan, analysis, fk.bound(columns, [analysis])))
    assert all(c.standard_error is None and c.reason for c in result.tier("adjusted").columns)
    assert all(np.isfinite(v) for _, v in fk.walk_numbers(result))


def test_a_wald_test_beyond_the_cluster_covariance_rank_is_none_with_a_reason():
    # 12 clusters and a tier adding the 11 site dummies (plus age): the clustered covariance has
    # rank at most 12 − 1 = 11 (numpy.linalg.matrix_rank of statsmodels' own cluster covariance
    # agrees), fewer than the 12 tested columns, so the Wald statistic does not exist.
    columns = _columns()
    analysis = fk.analysis("y", "arm", [("crude", []), ("sites", ["age", "site"])], "gaussian",
                           covariance=Covariance("cluster", "site"))
    plan = fk.plan(_variables(), [analysis])
    d = design(plan, analysis, fk.bound(columns, [analysis]))
    comparison = fit(plan, analysis, d).comparisons[0]
    reference = sm.OLS(d.y, d.x).fit(cov_type="cluster", cov_kwds={"groups": d.cluster})
    added = reference.cov_params()[2:, 2:]  # reference library
    assert np.linalg.matrix_rank(added, hermitian=True) < comparison.df_added == 12
    assert comparison.test_value is None and comparison.p is None
    assert "singular" in comparison.reason and "clusters − 1" in comparison.reason
