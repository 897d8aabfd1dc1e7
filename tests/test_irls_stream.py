"""Streamed IRLS lands on statsmodels' GLM fit (reference library) of the same data.

statsmodels.api.GLM(...).fit() with its defaults is the independent computation; the data
are seeded simulations built here.
"""

import numpy as np
import pytest
import statsmodels.api as sm

from compiler.irls import REFINE_STEPS, Moments, fit_tiers, in_batches, moments_combine, moments_map


def simulated(family, seed=5, n=1500):
    rng = np.random.default_rng(seed)
    x = np.column_stack([np.ones(n), rng.integers(0, 2, n), rng.normal(size=(n, 3))])
    offset = None
    if family == "binomial":
        eta = x @ [-0.4, 0.8, 0.3, -0.5, 0.2]
        y = (rng.random(n) < 1 / (1 + np.exp(-eta))).astype(float)
    else:
        offset = np.log(rng.integers(1, 29, n).astype(float))
        y = rng.poisson(np.exp(x @ [-1.0, 0.3, 0.2, -0.1, 0.05] + offset)).astype(float)
    return x, y, offset


def reference(family, x, y, offset):
    sm_family = sm.families.Binomial() if family == "binomial" else sm.families.Poisson()
    return sm.GLM(y, x, family=sm_family, offset=offset).fit()


def reference_to_the_floor(family, x, y, offset):
    """statsmodels' GLM with tolerance 0: it iterates until two successive deviances are
    equal, i.e. to the rounding floor, the maximum-likelihood estimate to working precision."""
    sm_family = sm.families.Binomial() if family == "binomial" else sm.families.Poisson()
    return sm.GLM(y, x, family=sm_family, offset=offset).fit(tol=0.0, maxiter=40)


@pytest.mark.parametrize("family", ["binomial", "poisson"])
def test_coefficients_match_statsmodels_to_1e10_in_every_tier(family):
    x, y, offset = simulated(family)
    fits = fit_tiers(in_batches(x, y, offset, 256), family, [2, 5])
    for fit in fits:
        expected = reference(family, x[:, :fit.width], y, offset)
        np.testing.assert_allclose(fit.params, expected.params, rtol=1e-10)


@pytest.mark.parametrize("family", ["binomial", "poisson"])
def test_standard_errors_from_r_at_the_solution_match_statsmodels(family):
    x, y, offset = simulated(family)
    (fit,) = fit_tiers(in_batches(x, y, offset, 256), family, [5])
    r_inv = np.linalg.inv(fit.r_solution)
    beta = reference_to_the_floor(family, x, y, offset).params
    eta = x @ beta + (0.0 if offset is None else offset)
    mu = np.exp(eta) if family == "poisson" else 1 / (1 + np.exp(-eta))
    weights = mu if family == "poisson" else mu * (1 - mu)  # V(μ), canonical links
    # reference: the textbook (XᵀWX)⁻¹ at statsmodels' solution, by numpy (statsmodels' own
    # bse carry the weights of the iterate before its last, 1e-10 away here)
    dense = np.sqrt(np.diag(np.linalg.inv(x.T @ (x * weights[:, None]))))
    np.testing.assert_allclose(np.linalg.norm(r_inv, axis=1), dense, rtol=1e-12)


@pytest.mark.parametrize("family", ["binomial", "poisson"])
def test_deviance_loglikelihood_and_pearson_accumulate_to_statsmodels(family):
    x, y, offset = simulated(family)
    (fit,) = fit_tiers(in_batches(x, y, offset, 100), family, [5])
    expected = reference(family, x, y, offset)
    assert fit.deviance == pytest.approx(expected.deviance, rel=1e-12)
    assert fit.null_deviance == pytest.approx(expected.null_deviance, rel=1e-12)
    assert fit.log_likelihood == pytest.approx(expected.llf, rel=1e-12)
    assert fit.pearson_x2 == pytest.approx(expected.pearson_chi2, rel=1e-12)


@pytest.mark.parametrize("family", ["binomial", "poisson"])
def test_iterations_are_statsmodels_then_newton_steps_to_the_rounding_floor(family):
    x, y, offset = simulated(family)
    (fit,) = fit_tiers(in_batches(x, y, offset, 256), family, [5])
    expected = reference(family, x, y, offset)
    assert fit.converged and expected.converged
    assert fit.iterations == expected.fit_history["iteration"] + REFINE_STEPS
    floor = reference_to_the_floor(family, x, y, offset)
    np.testing.assert_allclose(fit.params, floor.params, rtol=1e-13)


def test_batch_size_does_not_change_the_fit_beyond_rounding():
    x, y, offset = simulated("poisson")
    one = fit_tiers(in_batches(x, y, offset, len(y)), "poisson", [5])[0]
    many = fit_tiers(in_batches(x, y, offset, 37), "poisson", [5])[0]
    np.testing.assert_allclose(many.params, one.params, rtol=1e-12)


def test_moments_merge_over_batches_to_whole_data_sums():
    x, y, offset = simulated("poisson")
    merged = moments_combine(moments_map(b) for b in in_batches(x, y, offset, 99)())
    assert merged == Moments(len(y), pytest.approx(float(y.sum()), rel=1e-14),
                             pytest.approx(float(np.exp(offset).sum()), rel=1e-14))


def test_iteration_limit_reports_not_converged():
    x, y, offset = simulated("binomial")
    (fit,) = fit_tiers(in_batches(x, y, offset, 256), "binomial", [5], max_iterations=2)
    expected = sm.GLM(y, x, family=sm.families.Binomial()).fit(maxiter=2)
    assert not fit.converged and fit.iterations == 2
    np.testing.assert_allclose(fit.params, expected.params, rtol=1e-10)


def test_r_at_the_solution_is_the_weighted_design_at_the_returned_coefficients():
    x, y, offset = simulated("poisson")
    (fit,) = fit_tiers(in_batches(x, y, offset, 256), "poisson", [5])
    mu = np.exp(x @ fit.params + offset)  # Poisson weights are μ (canonical log link)
    expected = np.linalg.qr(x * np.sqrt(mu)[:, None], mode="r")
    np.testing.assert_allclose(np.abs(fit.r_solution), np.abs(expected), rtol=1e-10)
