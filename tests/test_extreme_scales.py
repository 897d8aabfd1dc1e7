"""Outcomes and covariates at extreme magnitudes are fitted as well as ordinary ones: the
columns are equilibrated by powers of 2 before the QR and the rank test, and the fit is
mapped back. Reference: the same data at ordinary scale, fitted by statsmodels OLS (the
reference library), its numbers multiplied by the scale factor; fits are in memory and
streamed, and no library warning reaches the terminal."""

from __future__ import annotations

import warnings
from dataclasses import replace

import numpy as np
import pytest
import statsmodels.api as sm

import fitkit as fk
import nist
from compiler.design import design
from compiler.fit import fit
from compiler.stream_fit import fit_streamed

N = 60
TIERS = [("crude", []), ("adjusted", ["z"])]


def _columns(seed=5):
    rng = np.random.default_rng(seed)
    x, z = rng.normal(size=N), rng.normal(size=N)
    return {"y": 1 + x + 0.5 * z + rng.normal(size=N), "x": x, "z": z}


def _design(columns, family="gaussian"):
    analysis = fk.analysis("y", "x", TIERS, family)
    plan = fk.plan(fk.numeric_variables("y", "x", "z"), [analysis])
    return plan, analysis, design(plan, analysis, fk.bound(columns, [analysis]))


def _both(columns):
    """The in-memory fit and a streamed fit in batches of 7 rows, with every warning caught."""
    plan, analysis, d = _design(columns)
    x = np.asarray(d.x)

    def passes():
        return (replace(d, x=x[a:a + 7], y=d.y[a:a + 7], row_ids=None)
                for a in range(0, N, 7))

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        fits = fit(plan, analysis, d), fit_streamed(plan, analysis, passes)
    assert [str(w.message) for w in caught] == []  # nothing for the terminal
    return fits


def _reference(columns):
    c = columns
    return sm.OLS(c["y"], np.column_stack([np.ones(N), c["x"], c["z"]])).fit()  # reference


def _agree(found, expected, factors, digits=12):
    for c, b, se, f in zip(found.columns, expected.params, expected.bse, factors):
        assert nist.lre(c.estimate, b * f) >= digits, c.column
        assert nist.lre(c.standard_error, se * f) >= digits, c.column


@pytest.mark.parametrize("factor", [1e154, 1e-160, 2.0 ** 600])
def test_an_outcome_at_an_extreme_scale_is_fitted_as_at_its_own(factor):
    columns = _columns()
    expected = _reference(columns)
    scaled = dict(columns, y=columns["y"] * factor)
    for result in _both(scaled):
        tier = result.tier("adjusted")
        _agree(tier, expected, [factor] * 3)
        assert tier.r_squared == pytest.approx(expected.rsquared, rel=1e-12)
        if factor < 1e155:  # σ² of about 1 · 1e308 is still a double
            assert tier.sigma2 == pytest.approx(expected.scale * factor * factor, rel=1e-12)
        else:  # about 1e361: no double holds it, so it is None with the reason
            assert tier.sigma2 is None and "range of double precision" in tier.reason
            assert tier.log_likelihood == pytest.approx(
                expected.llf - N * np.log(factor), rel=1e-12)


@pytest.mark.parametrize("factor", [1e160, 1e-165, 1e-158])
def test_a_covariate_at_an_extreme_scale_is_neither_aliased_nor_imprecise(factor):
    columns = _columns()
    expected = _reference(columns)
    scaled = dict(columns, z=columns["z"] * factor)
    for result in _both(scaled):
        _agree(result.tier("adjusted"), expected, [1.0, 1.0, 1 / factor])


@pytest.mark.parametrize("outcome", ["one huge row", "alternating"])
def test_an_outcome_with_extreme_values_is_not_called_constant(outcome):
    columns = _columns()
    y = columns["y"].copy()
    if outcome == "one huge row":
        y[3] = 1e160
    else:
        y = np.where(np.arange(N) % 2, 1e200, -1e200)
    in_memory, streamed = _both(dict(columns, y=y))
    # reference: statsmodels on the outcome divided by its largest magnitude, mapped back
    big = float(np.max(np.abs(y)))
    expected = _reference(dict(columns, y=y / big))
    _agree(in_memory.tier("adjusted"), expected, [big] * 3, digits=10)
    _agree(streamed.tier("adjusted"), expected, [big] * 3, digits=10)


def test_a_binomial_fit_with_an_extreme_covariate_is_mapped_back():
    columns = _columns()
    rng = np.random.default_rng(9)
    columns["y"] = (rng.random(N) < 1 / (1 + np.exp(-columns["x"]))).astype(float)
    expected = sm.GLM(columns["y"], np.column_stack([np.ones(N), columns["x"], columns["z"]]),
                      family=sm.families.Binomial()).fit(tol=0.0)  # reference library
    plan, analysis, d = _design(dict(columns, z=columns["z"] * 1e160), "binomial")

    def passes():
        return (replace(d, x=d.x[a:a + 7], y=d.y[a:a + 7], row_ids=None)
                for a in range(0, N, 7))

    for result in (fit(plan, analysis, d), fit_streamed(plan, analysis, passes)):
        _agree(result.tier("adjusted"), expected, [1.0, 1.0, 1e-160], digits=11)


def test_the_characteristics_of_an_extreme_outcome_warn_nothing():
    from compiler.characteristics import Moments

    values = np.where(np.arange(N) % 2, 1e200, -1e200)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        moments = Moments.of(values.copy())
    assert [str(w.message) for w in caught] == []
    assert moments.mean == pytest.approx(float(np.mean(values)))  # numpy reference
    assert moments.cell()["sd"] is None  # its square overflows: no SD, never inf
