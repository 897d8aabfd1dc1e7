"""A seeded simulation of the residual-variance facts in references.md (textbook regression,
common practice): leaving out a needed covariate biases σ̂² upward; adding unneeded ones
leaves it unbiased but more variable (Var σ̂² = 2σ⁴ / df_resid under normal errors)."""

from __future__ import annotations

import numpy as np
import pytest

import fitkit as fk
from compiler.design import design
from compiler.fit import fit

N, REPLICATIONS, SIGMA2 = 30, 400, 1.0
NOISE = [f"noise{j}" for j in range(10)]


@pytest.fixture(scope="module")
def variances():
    rng = np.random.default_rng(20240601)
    analysis = fk.analysis("y", "x1", [("under", []), ("right", ["x2"]), ("over", NOISE)])
    plan = fk.plan(fk.numeric_variables("y", "x1", "x2", *NOISE), [analysis])
    found = []
    for _ in range(REPLICATIONS):
        columns = {name: rng.normal(size=N) for name in ["x1", "x2", *NOISE]}
        columns["y"] = 1 + 2 * columns["x1"] + 1.5 * columns["x2"] + rng.normal(
            scale=np.sqrt(SIGMA2), size=N)
        result = fit(plan, analysis, design(plan, analysis, fk.bound(columns, [analysis])))
        found.append([t.sigma2 for t in result.tiers])
    return np.asarray(found)  # replications × (under, right, over)


def test_leaving_out_a_needed_covariate_biases_sigma2_upward(variances):
    # expected ≈ σ² + 1.5²·Var(x2) = 3.25; far above the truth
    assert variances[:, 0].mean() > SIGMA2 + 1.0


def test_the_right_model_and_an_over_fitted_one_are_both_unbiased(variances):
    # standard error of each mean ≈ √(2/df/400) ≤ 0.02; tolerance 0.08
    assert variances[:, 1].mean() == pytest.approx(SIGMA2, abs=0.08)
    assert variances[:, 2].mean() == pytest.approx(SIGMA2, abs=0.08)


def test_over_fitting_makes_sigma2_more_variable(variances):
    # theory: 2/17 ≈ 0.118 (over) against 2/27 ≈ 0.074 (right)
    assert variances[:, 2].var(ddof=1) > 1.3 * variances[:, 1].var(ddof=1)
