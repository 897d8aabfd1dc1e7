"""Report-tier diagnostics against statsmodels' and scipy's own implementations."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.stats.diagnostic import het_breuschpagan
from statsmodels.stats.outliers_influence import OLSInfluence, variance_inflation_factor

import fitkit as fk
from compiler.design import design
from compiler.diagnostics import SHAPIRO_LIMIT
from compiler.fit import fit
from compiler.plan import Variable


def _gaussian(n=200, seed=8):
    rng = np.random.default_rng(seed)
    x1 = rng.normal(size=n)
    columns = {"x1": x1, "x2": 0.8 * x1 + rng.normal(scale=0.6, size=n),
               "x3": rng.uniform(0, 1, n)}
    columns["y"] = 1 + columns["x1"] + rng.normal(size=n) * (1 + columns["x3"])
    analysis = fk.analysis("y", "x1", [("crude", []), ("full", ["x2", "x3"])])
    plan = fk.plan(fk.numeric_variables("y", "x1", "x2", "x3"), [analysis])
    d = design(plan, analysis, fk.bound(columns, [analysis]))
    return d, fit(plan, analysis, d).diagnostics


@pytest.fixture(scope="module")
def gaussian():
    return _gaussian()


def test_vif_matches_statsmodels(gaussian):
    d, diagnostics = gaussian
    expected = [variance_inflation_factor(d.x, j) for j in range(1, d.x.shape[1])]
    assert [label for label, _ in diagnostics.vif] == ["x1", "x2", "x3"]
    np.testing.assert_allclose([v for _, v in diagnostics.vif], expected, rtol=1e-9)


def test_breusch_pagan_matches_statsmodels_koenker_form(gaussian):
    d, diagnostics = gaussian
    residuals = sm.OLS(d.y, d.x).fit().resid
    lm, p, *_ = het_breuschpagan(residuals, d.x)  # reference library, robust=True (Koenker)
    assert diagnostics.breusch_pagan_statistic == pytest.approx(lm, rel=1e-9)
    assert diagnostics.breusch_pagan_p == pytest.approx(p, rel=1e-8)


def test_shapiro_wilk_on_the_residuals_up_to_5000_rows(gaussian):
    d, diagnostics = gaussian
    reference = stats.shapiro(sm.OLS(d.y, d.x).fit().resid)  # reference library
    assert diagnostics.normality_test == "Shapiro-Wilk"
    assert diagnostics.normality_statistic == pytest.approx(reference.statistic, rel=1e-9)
    assert diagnostics.normality_p == pytest.approx(reference.pvalue, rel=1e-6)


def test_dagostino_pearson_beyond_5000_rows():
    d, diagnostics = _gaussian(n=SHAPIRO_LIMIT + 1)
    reference = stats.normaltest(sm.OLS(d.y, d.x).fit().resid)  # reference library
    assert diagnostics.normality_test == "D'Agostino-Pearson"
    assert diagnostics.normality_statistic == pytest.approx(reference.statistic, rel=1e-8)


def test_five_most_influential_rows_by_cooks_distance(gaussian):
    d, diagnostics = gaussian
    cooks = OLSInfluence(sm.OLS(d.y, d.x).fit()).cooks_distance[0]  # reference library
    top = np.argsort(-cooks, kind="stable")[:5]
    assert [i.row_id for i in diagnostics.influential] == [str(i + 1) for i in top]
    np.testing.assert_allclose([i.cooks_distance for i in diagnostics.influential], cooks[top],
                               rtol=1e-9)


def test_standardized_residuals_are_internally_studentized(gaussian):
    d, diagnostics = gaussian
    influence = OLSInfluence(sm.OLS(d.y, d.x).fit())  # reference library
    np.testing.assert_allclose(diagnostics.residuals, influence.resid_studentized_internal,
                               rtol=1e-9)
    np.testing.assert_allclose(diagnostics.fitted, sm.OLS(d.y, d.x).fit().fittedvalues,
                               rtol=1e-9, atol=1e-12)


def test_influential_ties_go_to_the_earlier_row():
    from compiler.diagnostics import _influential

    found = _influential(np.array([0.1, 0.5, 0.2, 0.5, 0.5, 0.05, 0.3]), None)
    assert [i.row_id for i in found] == ["2", "4", "5", "7", "3"]


def test_glm_diagnostics_give_cooks_distance_and_say_what_does_not_apply():
    rng = np.random.default_rng(2)
    n = 150
    columns = {"x1": rng.normal(size=n), "x2": rng.normal(size=n)}
    columns["k"] = rng.poisson(np.exp(0.3 + 0.4 * columns["x1"])).astype(float)
    analysis = fk.analysis("k", "x1", [("crude", []), ("full", ["x2"])], "poisson")
    plan = fk.plan([Variable("k", "count")] + fk.numeric_variables("x1", "x2"), [analysis])
    d = design(plan, analysis, fk.bound(columns, [analysis]))
    diagnostics = fit(plan, analysis, d).diagnostics
    reference = sm.GLM(d.y, d.x, family=sm.families.Poisson()).fit()
    cooks = reference.get_influence().cooks_distance[0]  # reference library
    top = np.argsort(-cooks, kind="stable")[:5]
    np.testing.assert_allclose([i.cooks_distance for i in diagnostics.influential], cooks[top],
                               rtol=1e-6)
    np.testing.assert_allclose(diagnostics.residuals, reference.resid_pearson, rtol=1e-8)
    assert diagnostics.breusch_pagan_p is None and diagnostics.normality_test is None
    assert "not applicable to poisson" in diagnostics.reason
    np.testing.assert_allclose([v for _, v in diagnostics.vif],
                               [variance_inflation_factor(d.x, j) for j in (1, 2)], rtol=1e-9)
