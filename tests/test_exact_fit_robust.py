"""An exact fit under a robust covariance: the robust comparison must find it as the
classical one does (null with a reason), and a rule reading it must be undetermined.

Data: NIST StRD Wampler1 and Wampler2 (Wampler 1970, JASA 65:549–565), built here exactly
from their defining polynomials at x = 0 … 20 (Wampler1: y = 1 + x + x² + x³ + x⁴ + x⁵;
Wampler2: y = 1 + 0.1x + 0.01x² + 0.001x³ + 0.0001x⁴ + 0.00001x⁵; certified residual SD 0).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

import fitkit as fk
from compiler.decide import decide
from compiler.design import design
from compiler.fit import fit
from compiler.plan import Covariance, Decision

X = np.arange(21.0)
WAMPLER = {"Wampler1": sum(X ** k for k in range(6)),
           "Wampler2": sum((0.1 ** k) * X ** k for k in range(6))}
TIERS = [("linear", []), ("quadratic", [{"power": "x", "degree": 2}]),
         ("quintic", [{"power": "x", "degree": k} for k in range(3, 6)])]
ROBUST = [Covariance("HC0"), Covariance("HC1"), Covariance("HC2"), Covariance("HC3"),
          Covariance("cluster", "g")]


def _fit(y, covariance):
    analysis = fk.analysis("y", "x", TIERS, covariance=covariance)
    plan = fk.plan(fk.numeric_variables("y", "x", "g"), [analysis])
    columns = {"y": y, "x": X, "g": X % 7}  # 7 clusters of 3 rows
    plan = replace(plan, decisions=(
        Decision(id="T1", analysis="primary", test="tier-selection", tier="quintic"),))
    return plan, fit(plan, analysis, design(plan, analysis, fk.bound(columns, [analysis])))


@pytest.mark.parametrize("data", list(WAMPLER))
@pytest.mark.parametrize("covariance", ROBUST, ids=lambda c: c.label)
def test_a_robust_comparison_into_an_exact_fit_is_null_with_the_reason(data, covariance):
    _, result = _fit(WAMPLER[data], covariance)
    into_exact = result.comparisons[-1]
    assert result.tier("quintic").reason.startswith("exact fit")
    assert into_exact.method == "Wald"
    assert into_exact.test_value is None and into_exact.p is None
    assert "exact fit" in into_exact.reason and "quintic" in into_exact.reason


@pytest.mark.parametrize("covariance", ROBUST, ids=lambda c: c.label)
def test_a_tier_selection_reading_an_exact_fit_is_undetermined(covariance):
    plan, result = _fit(WAMPLER["Wampler1"], covariance)
    verdicts, _ = decide(plan, (result,))
    assert verdicts[0].verdict == "undetermined"
    assert "exact fit" in verdicts[0].reason


def test_a_singular_heteroscedasticity_consistent_covariance_names_its_own_cause():
    # A rank-one covariance of two tested coefficients (numpy.linalg.matrix_rank: 1 < 2):
    # under HC3 the cause is the sandwich's (MacKinnon & White 1985), not any cluster.
    from compiler.inference import wald_test

    v = np.outer([1.0, 2.0], [1.0, 2.0])
    assert np.linalg.matrix_rank(v, hermitian=True) == 1  # reference library
    hc3 = wald_test(np.array([0.5, 0.3]), v, [0, 1], 30.0, "Wald", "HC3")
    clustered = wald_test(np.array([0.5, 0.3]), v, [0, 1], 30.0, "Wald", "clustered by site")
    assert hc3.test_value is None and "singular (rank 1)" in hc3.reason
    assert "cluster" not in hc3.reason and "heteroscedasticity-consistent" in hc3.reason
    assert "clusters − 1" in clustered.reason
