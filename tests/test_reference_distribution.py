"""Which distribution each analysis' statistics are referred to, said in the results and the
report: t on the residual df (gaussian), t on clusters − 1 (clustered gaussian; statsmodels'
use_t=True convention, the reference library), z for binomial and Poisson."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm

import fitkit as fk
from compiler.design import design
from compiler.fit import fit
from compiler.plan import Covariance, Variable
from compiler import results

N = 120


def _fit(family, covariance):
    rng = np.random.default_rng(8)
    site = rng.integers(0, 10, N)
    arm = rng.integers(0, 2, N).astype(float)
    columns = {"y": 1 + arm + rng.normal(size=N), "event": rng.integers(0, 2, N).astype(float),
               "arm": arm, "site": site.astype(float)}
    outcome = "y" if family == "gaussian" else "event"
    analysis = fk.analysis(outcome, "arm", [("crude", [])], family, covariance=covariance)
    plan = fk.plan([Variable("y", "continuous"), Variable("event", "binary"),
                    Variable("arm", "binary"), Variable("site", "continuous")], [analysis])
    d = design(plan, analysis, fk.bound(columns, [analysis]))
    return d, fit(plan, analysis, d)


def test_clustered_gaussian_is_referred_to_t_on_clusters_minus_one():
    d, result = _fit("gaussian", Covariance("cluster", "site"))
    reference = sm.OLS(d.y, d.x).fit(cov_type="cluster", cov_kwds={"groups": d.cluster},
                                     use_t=True)  # reference library
    assert result.reference.distribution == "t"
    assert result.reference.df == reference.df_resid_inference == 9
    assert "clusters − 1 = 9" in result.reference.label
    assert "G − 1" in result.reference.basis


@pytest.mark.parametrize("covariance", [Covariance(), Covariance("HC3")],
                         ids=lambda c: c.label)
def test_gaussian_is_referred_to_t_on_each_tiers_residual_df(covariance):
    _, result = _fit("gaussian", covariance)
    assert result.reference.distribution == "t" and result.reference.df is None
    assert "residual df" in result.reference.label
    assert result.tiers[0].exposure[0].df == N - 2


@pytest.mark.parametrize("covariance", [Covariance(), Covariance("cluster", "site")],
                         ids=lambda c: c.label)
def test_binomial_is_referred_to_the_normal_even_when_clustered(covariance):
    _, result = _fit("binomial", covariance)
    assert result.reference.distribution == "z" and result.reference.df is None
    assert result.tiers[0].exposure[0].df is None
    assert "large-sample" in result.reference.basis


def test_results_and_report_name_the_reference():
    from compiler.viewmodel_analysis import _facts

    _, result = _fit("gaussian", Covariance("cluster", "site"))
    record = {"reference": results._reference(result.reference)}
    inference = results._inference(result.tiers[0].exposure[0], 0.95)
    assert record["reference"]["test"] == "t" and record["reference"]["df"] == 9
    assert inference["test"] == "t"
    assert {c["test"] for c in inference["columns"]} == {"t"}
    facts = dict(_facts({"family": "gaussian", "outcome": "y", "exposure_variable": "arm",
                         "population": None, "rows_in_population": N, "n": N,
                         "covariance": "clustered by site", "confidence": 0.95,
                         "report_tier": "crude", **record}))
    assert facts["reference distribution"] == "t on clusters − 1 = 9 df, every tier"
