"""Gaussian tiers from one QR: checked against statsmodels OLS, numpy lstsq, scipy.stats,
and a high-precision mpmath recomputation."""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from hypothesis import given, settings, strategies as st
from scipy import stats

import fitkit as fk
from compiler.design import design
from compiler.fit import fit
from compiler.fitted import Natural
from compiler.plan import Assumption, Covariance, Variable
from compiler.problems import Exit, Stop

GUIDANCE = ("none", "leaflet", "coached")
TIERS = [("crude", []), ("baseline", ["age"]), ("full", ["district", {"power": "age", "degree": 2}])]


def _variables():
    return [Variable("y", "continuous"), Variable("age", "continuous"),
            Variable("guidance", "categorical", levels=GUIDANCE, reference="none"),
            Variable("district", "categorical", levels=("a", "b", "c"))]


def _columns(n=120, seed=11):
    rng = np.random.default_rng(seed)
    guidance = rng.choice(GUIDANCE, n)
    age = rng.uniform(20, 70, n)
    district = rng.choice(["a", "b", "c"], n)
    y = 3 + 1.5 * (guidance == "coached") + 0.05 * age + rng.normal(0, 1 + age / 40, n)
    return {"y": y, "age": age, "guidance": guidance.astype(object),
            "district": district.astype(object)}


def _fit(columns=None, tiers=TIERS, covariance=Covariance(), assumptions=()):
    columns = columns or _columns()
    analysis = fk.analysis("y", "guidance", tiers, covariance=covariance)
    plan = fk.plan(_variables(), [analysis], list(assumptions))
    d = design(plan, analysis, fk.bound(columns, [analysis]))
    return d, fit(plan, analysis, d)


@pytest.fixture(scope="module")
def fitted():
    return _fit()


def test_every_tier_matches_statsmodels_ols(fitted):
    d, result = fitted
    for width, tier in zip(d.tier_width, result.tiers):
        ols = sm.OLS(d.y, d.x[:, :width]).fit()  # reference library
        np.testing.assert_allclose([c.estimate for c in tier.columns], ols.params, rtol=1e-9)
        np.testing.assert_allclose([c.standard_error for c in tier.columns], ols.bse, rtol=1e-9)
        np.testing.assert_allclose([c.test_value for c in tier.columns], ols.tvalues,
                                   rtol=1e-9)
        np.testing.assert_allclose([c.p_two_sided for c in tier.columns], ols.pvalues,
                                   rtol=1e-7, atol=1e-300)
        ci = ols.conf_int(0.05)
        np.testing.assert_allclose([c.low for c in tier.columns], ci[:, 0], rtol=1e-9)
        np.testing.assert_allclose([c.high for c in tier.columns], ci[:, 1], rtol=1e-9)


def test_tier_summaries_match_statsmodels_ols(fitted):
    d, result = fitted
    for width, tier in zip(d.tier_width, result.tiers):
        ols = sm.OLS(d.y, d.x[:, :width]).fit()  # reference library
        assert tier.rss == pytest.approx(ols.ssr, rel=1e-10)
        assert tier.sigma2 == pytest.approx(ols.scale, rel=1e-10)
        assert tier.r_squared == pytest.approx(ols.rsquared, rel=1e-10)
        assert tier.adjusted_r_squared == pytest.approx(ols.rsquared_adj, rel=1e-10)
        assert tier.log_likelihood == pytest.approx(ols.llf, rel=1e-10)
        assert tier.aic == pytest.approx(ols.aic, rel=1e-10)
        assert tier.bic == pytest.approx(ols.bic, rel=1e-10)
        assert tier.residual_df == ols.df_resid


def test_f_comparisons_match_statsmodels_compare_f_test(fitted):
    d, result = fitted
    for k, comparison in enumerate(result.comparisons, start=1):
        big = sm.OLS(d.y, d.x[:, :d.tier_width[k]]).fit()
        small = sm.OLS(d.y, d.x[:, :d.tier_width[k - 1]]).fit()
        f, p, df_diff = big.compare_f_test(small)  # reference library
        assert comparison.method == "F"
        assert comparison.df_added == df_diff
        assert comparison.test_value == pytest.approx(f, rel=1e-9)
        assert comparison.p == pytest.approx(p, rel=1e-8)
        assert comparison.df_denominator == big.df_resid


def test_joint_exposure_test_matches_statsmodels_f_test(fitted):
    d, result = fitted
    for width, tier in zip(d.tier_width, result.tiers):
        ols = sm.OLS(d.y, d.x[:, :width]).fit()
        restriction = np.zeros((2, width))
        restriction[0, 1] = restriction[1, 2] = 1.0
        reference = ols.f_test(restriction)  # reference library
        joint = tier.exposure[0].joint
        assert joint.method == "F" and joint.df_added == 2 and joint.df_denominator == ols.df_resid
        assert joint.test_value == pytest.approx(float(reference.fvalue), rel=1e-9)
        assert joint.p == pytest.approx(float(reference.pvalue), rel=1e-8)


def test_exposure_across_tiers_reports_the_change_vs_the_first_tier(fitted):
    _, result = fitted
    first = {r.column: r.estimate for r in result.exposure if r.tier == "crude"}
    assert len(result.exposure) == 3 * 2
    for row in result.exposure:
        b, b1 = row.estimate, first[row.column]
        assert row.change_vs_first.relative == pytest.approx(abs(b - b1) / abs(b1), rel=1e-12)
        assert row.change_vs_first.direction == (
            "none" if b == b1 else "sign reversed" if b * b1 < 0
            else "away from zero" if abs(b) > abs(b1) else "toward zero")
        # gaussian identity link: the natural scale is the difference itself
        assert row.natural == Natural("difference", b, row.low, row.high)
        assert row.level == 0.95


def test_exposure_carries_the_fallback_covariance_of_an_assumption():
    fallback = Assumption("A1", "primary", "constant-variance", Covariance("HC3"), ("H1",),
                          p_below=0.05)
    d, result = _fit(assumptions=[fallback])
    full = result.tier("full")
    assert [e.covariance for e in full.exposure] == ["classical", "HC3"]
    hc3 = sm.OLS(d.y, d.x).fit(cov_type="HC3")  # reference library
    np.testing.assert_allclose([c.standard_error for c in full.exposure[1].columns],
                               hc3.bse[1:3], rtol=1e-9)
    assert full.exposure[1].df == full.residual_df


def test_exact_fit_gives_none_with_a_reason():
    columns = _columns()
    columns["y"] = 2.0 + 0.5 * columns["age"]  # y lies in the span of tier baseline
    _, result = _fit(columns)
    baseline = result.tier("baseline")
    assert baseline.sigma2 == 0.0 and baseline.rss == 0.0
    assert baseline.log_likelihood is None and baseline.aic is None
    assert all(c.standard_error is None and c.reason.startswith("exact fit")
               for c in baseline.columns)
    assert result.comparisons[0].test_value is None and "exact fit" in result.comparisons[0].reason


def test_too_few_rows_stop_naming_analysis_tier_and_counts():
    columns = {k: v[:5] for k, v in _columns().items()}
    with pytest.raises(Stop) as stop:
        _fit(columns)
    assert stop.value.exit_code == Exit.DATA_CONTRACT
    message = stop.value.problems[0].message
    assert "analysis primary, tier full" in message and "5 analysed rows for 7 parameters" in message


def test_aliased_column_stops_naming_the_column_and_tier():
    columns = _columns()
    columns["district"] = np.where(columns["guidance"] == "coached", "c", "a").astype(object)
    with pytest.raises(Stop) as stop:
        _fit(columns)
    assert stop.value.exit_code == Exit.DATA_CONTRACT
    messages = [p.message for p in stop.value.problems]
    # district b never occurs (a zero column); district c equals guidance coached
    assert any("tier full" in m and "`district: b vs a`" in m and "zero" in m for m in messages)
    assert any("`district: c vs a`" in m and "`guidance: coached vs none`" in m
               for m in messages)
    assert {p.column for p in stop.value.problems} == {"district"}


def test_nothing_non_finite_leaves_the_fit(fitted):
    _, result = fitted
    assert all(math.isfinite(v) for _, v in fk.walk_numbers(result))


def test_small_design_matches_a_50_digit_mpmath_recomputation():
    # Independent reference: the normal equations solved in 50-digit arithmetic (mpmath) on
    # the very same double-precision design entries, where their squared conditioning costs
    # nothing; an ill-conditioned cubic in x ≈ 10 (condition number about 1e8).
    import mpmath

    rng = np.random.default_rng(5)
    x = 10.0 + rng.uniform(0, 1, 12)
    y = 1.0 + 0.3 * x + rng.normal(0, 0.01, 12)
    tiers = [("linear", []), ("cubic", [{"power": "x", "degree": 2}, {"power": "x", "degree": 3}])]
    analysis = fk.analysis("y", "x", tiers)
    plan = fk.plan(fk.numeric_variables("y", "x"), [analysis])
    d = design(plan, analysis, fk.bound({"y": y, "x": x}, [analysis]))
    result = fit(plan, analysis, d).tier("cubic")
    mpmath.mp.dps = 50
    X = mpmath.matrix([[mpmath.mpf(float(v)) for v in row] for row in d.x])
    Y = mpmath.matrix([mpmath.mpf(v) for v in y])
    gram_inverse = (X.T * X) ** -1
    beta = gram_inverse * (X.T * Y)
    residual = Y - X * beta
    s2 = sum(r ** 2 for r in residual) / (len(y) - 4)
    for j, c in enumerate(result.columns):
        assert c.estimate == pytest.approx(float(beta[j]), rel=1e-8)
        assert c.standard_error == pytest.approx(float(mpmath.sqrt(s2 * gram_inverse[j, j])), rel=1e-8)


@st.composite
def _nested_designs(draw):
    """(n, tier widths, seed): the first tier is intercept + exposure, so widths start at 2."""
    n = draw(st.integers(8, 30))
    later = sorted(draw(st.sets(st.integers(3, min(8, n - 2)), min_size=1, max_size=3)))
    return n, [2] + later, draw(st.integers(0, 2 ** 31 - 1))


def _random_fit(n, widths, seed):
    rng = np.random.default_rng(seed)
    names = [f"v{j}" for j in range(1, widths[-1])]
    columns = {name: rng.normal(size=n) for name in names}
    columns["y"] = rng.normal(size=n) + columns["v1"]
    tiers = [("t0", [])] + [(f"t{k}", names[widths[k - 1] - 1:widths[k] - 1])
                            for k in range(1, len(widths))]
    analysis = fk.analysis("y", "v1", tiers)
    plan = fk.plan(fk.numeric_variables("y", *names), [analysis])
    d = design(plan, analysis, fk.bound(columns, [analysis]))
    return d, fit(plan, analysis, d)


@settings(max_examples=40, deadline=None)
@given(_nested_designs())
def test_prefix_rss_equals_separate_least_squares_fits(case):
    d, result = _random_fit(*case)
    for width, tier in zip(d.tier_width, result.tiers):
        _, rss, *_ = np.linalg.lstsq(d.x[:, :width], d.y, rcond=None)  # reference library
        assert tier.rss == pytest.approx(float(rss[0]), rel=1e-9, abs=1e-12)


@settings(max_examples=40, deadline=None)
@given(_nested_designs())
def test_f_statistic_is_the_textbook_formula_with_scipy_p(case):
    d, result = _random_fit(*case)
    for k, comparison in enumerate(result.comparisons, start=1):
        small, big = result.tiers[k - 1], result.tiers[k]
        # references.md: F = ((RSS_r − RSS_f)/(df_r − df_f)) / (RSS_f/df_f)
        f = ((small.rss - big.rss) / (small.residual_df - big.residual_df)) / (big.rss / big.residual_df)
        assert comparison.test_value == pytest.approx(f, rel=1e-9)
        assert comparison.p == pytest.approx(
            stats.f.sf(f, small.residual_df - big.residual_df, big.residual_df), rel=1e-9, abs=1e-300)


def test_chunked_qr_gives_the_r_factor_of_the_whole_matrix():
    from compiler.qr import augmented_r

    rng = np.random.default_rng(3)
    x, y = rng.normal(size=(103, 5)), rng.normal(size=103)
    r = augmented_r(x, y, chunk_rows=7)  # 15 chunks, the last one short
    reference = np.linalg.qr(np.column_stack([x, y]), mode="r")  # reference library
    # an R factor is unique up to the signs of its rows
    np.testing.assert_allclose(np.abs(r), np.abs(reference), rtol=1e-10, atol=1e-12)


def test_a_fit_over_many_chunks_matches_statsmodels():
    from compiler.qr import CHUNK_ROWS

    n = 3 * CHUNK_ROWS + 17
    columns = _columns(n=n, seed=12)
    d, result = _fit(columns, covariance=Covariance("HC3"))
    reference = sm.OLS(d.y, d.x).fit(cov_type="HC3")  # reference library
    full = result.tier("full")
    np.testing.assert_allclose([c.estimate for c in full.columns], reference.params,
                               rtol=1e-9)
    np.testing.assert_allclose([c.standard_error for c in full.columns], reference.bse,
                               rtol=1e-9)
    assert full.rss == pytest.approx(reference.ssr, rel=1e-10)
