"""NIST StRD Longley through design and fit: every coefficient, every standard error, R² and
the residual SS at log relative error ≥ 10 (certified values: NIST ITL, in tests/nist.py)."""

from __future__ import annotations

import numpy as np
import pytest

import fitkit as fk
import nist
from compiler.design import design
from compiler.fit import fit

MIN_LRE = 10.0  # references.md: a careful QR reaches ≈ 11 (coefficients), ≈ 12 (SEs)


@pytest.fixture(scope="module")
def longley_fit():
    analysis = fk.analysis("TOTEMP", "GNPDEFL",
                           [("exposure-only", []), ("certified", list(nist.COVARIATES))])
    plan = fk.plan(fk.numeric_variables(*nist.COLUMNS), [analysis])
    bound = fk.bound(nist.longley_columns(), [analysis])
    return fit(plan, analysis, design(plan, analysis, bound)).tier("certified")


@pytest.mark.parametrize("term", list(nist.CERTIFIED))
def test_longley_coefficient_is_certified(longley_fit, term):
    found = next(c for c in longley_fit.columns if c.column == term)
    assert nist.lre(found.estimate, nist.CERTIFIED[term][0]) >= MIN_LRE


@pytest.mark.parametrize("term", list(nist.CERTIFIED))
def test_longley_standard_error_is_certified(longley_fit, term):
    found = next(c for c in longley_fit.columns if c.column == term)
    assert nist.lre(found.standard_error, nist.CERTIFIED[term][1]) >= MIN_LRE


def test_longley_r_squared_is_certified(longley_fit):
    assert nist.lre(longley_fit.r_squared, nist.CERTIFIED_R_SQUARED) >= MIN_LRE


def test_longley_residual_ss_is_certified(longley_fit):
    assert nist.lre(longley_fit.rss, nist.CERTIFIED_RESIDUAL_SS) >= MIN_LRE


def test_longley_residual_sd_and_df_are_certified(longley_fit):
    assert longley_fit.residual_df == nist.CERTIFIED_RESIDUAL_DF
    assert nist.lre(longley_fit.sigma2 ** 0.5, nist.CERTIFIED_RESIDUAL_SD) >= MIN_LRE


def test_longley_files_round_trip_the_data(tmp_path):
    plan_path = nist.write_longley(tmp_path)
    text = (tmp_path / "longley.csv").read_text().splitlines()
    columns = nist.longley_columns()
    assert text[0].split(",") == list(nist.COLUMNS)
    first = [float(v) for v in text[1].split(",")]
    assert first == [columns[c][0] for c in nist.COLUMNS]
    assert len(text) == 17 and plan_path.exists()


def _fit_xy(y, x, tiers, tier):
    analysis = fk.analysis("y", "x", tiers)
    plan = fk.plan(fk.numeric_variables("y", "x"), [analysis])
    bound = fk.bound({"y": np.asarray(y, float), "x": np.asarray(x, float)}, [analysis])
    return fit(plan, analysis, design(plan, analysis, bound)).tier(tier)


@pytest.mark.parametrize("term", list(nist.PONTIUS_CERTIFIED))
def test_pontius_quadratic_is_certified(term):
    fitted = _fit_xy(nist.PONTIUS_Y, nist.PONTIUS_X,
                     [("linear", []), ("quadratic", [{"power": "x", "degree": 2}])], "quadratic")
    found = next(c for c in fitted.columns if c.column == term)
    estimate, sd = nist.PONTIUS_CERTIFIED[term]  # NIST StRD Pontius, certified
    assert nist.lre(found.estimate, estimate) >= MIN_LRE
    assert nist.lre(found.standard_error, sd) >= MIN_LRE


def test_norris_line_is_certified():
    y, x = np.asarray(nist.NORRIS).T
    fitted = _fit_xy(y, x, [("linear", [])], "linear")
    for c in fitted.columns:
        estimate, sd = nist.NORRIS_CERTIFIED[c.column]  # NIST StRD Norris, certified
        assert nist.lre(c.estimate, estimate) >= MIN_LRE
        assert nist.lre(c.standard_error, sd) >= MIN_LRE
    assert nist.lre(fitted.r_squared, nist.NORRIS_R_SQUARED) >= MIN_LRE
    assert nist.lre(fitted.rss, nist.NORRIS_RESIDUAL_SS) >= MIN_LRE


def test_wampler1_is_an_exact_fit_with_unit_coefficients():
    # NIST StRD Wampler1 (Wampler 1970, JASA 65:549–565): y = 1 + x + x² + x³ + x⁴ + x⁵ at
    # x = 0 … 20, built here from that defining formula; certified: every coefficient 1,
    # every standard deviation 0 — an exact fit, which must give None with a reason.
    x = np.arange(21.0)
    y = sum(x ** k for k in range(6))
    fitted = _fit_xy(y, x, [("linear", []),
                            ("quintic", [{"power": "x", "degree": k} for k in range(2, 6)])],
                     "quintic")
    assert fitted.rss == 0.0 and fitted.reason.startswith("exact fit")
    for c in fitted.columns:
        # measured LRE ≈ 9.1 on the intercept; NIST rates Wampler1 higher difficulty
        assert nist.lre(c.estimate, 1.0) >= 8.0
        assert c.standard_error is None and c.reason == "exact fit: zero residual variance"
