"""The reference data `prespec qualify` ships, checked against computations outside prespec:
every NIST StRD certified value against an mpmath least-squares fit of the shipped data (60
digits: a typing slip in the data or in a certified value would show as a mismatch), the
shipped Longley data against statsmodels.datasets.longley, and the GLM reference values
against the 50-digit fits of tests/reference_fits.py."""

from __future__ import annotations

import mpmath as mp
import pytest

import reference_fits
from compiler.qualify_problems import glm_problems, nist_problems, wampler_y


def _lre(value, reference) -> float:
    value, reference = mp.mpf(value), mp.mpf(reference)
    error = abs(value - reference) / (abs(reference) if reference else 1)
    return 99.0 if error == 0 else float(-mp.log10(error))


def _least_squares(y, columns):
    """Coefficients, standard errors, residual SD and R² at 60 digits (normal equations are
    safe at this precision: Filip's condition number squared is 1e31)."""
    with mp.workdps(60):
        x = mp.matrix([[mp.mpf(c[i]) for c in columns] for i in range(len(y))])
        yv = mp.matrix([mp.mpf(v) for v in y])
        inverse = mp.inverse(x.T * x)
        b = inverse * (x.T * yv)
        e = yv - x * b
        n, p = len(y), len(columns)
        rss = sum(v ** 2 for v in e)
        mean = sum(yv) / n
        s2 = rss / (n - p)
        return ([b[j] for j in range(p)], [mp.sqrt(inverse[j, j] * s2) for j in range(p)],
                mp.sqrt(s2), 1 - rss / sum((v - mean) ** 2 for v in yv))


def _columns(entry):
    data = entry["data"]
    if "generated" in data:
        y, x = wampler_y(int(data["generated"][len("wampler"):])), [str(i) for i in range(21)]
    else:
        y, x = data["y"], data.get("x")
    if entry["degree"] > 1 or entry["predictors"] == ["x"]:
        with mp.workdps(60):
            return y, [[str(mp.mpf(v) ** k) for v in x] for k in range(entry["degree"] + 1)]
    return y, [["1"] * len(y)] + [data[p] for p in entry["predictors"]]


@pytest.mark.parametrize("entry", nist_problems()["problems"], ids=lambda e: e["id"])
def test_certified_values_agree_with_an_mpmath_fit_of_the_shipped_data(entry):
    y, columns = _columns(entry)
    b, se, sd, r2 = _least_squares(y, columns)
    certified = entry["certified"]
    for j, (estimate, deviation) in enumerate(certified["coefficients"]):
        assert _lre(b[j], estimate) >= 13.5, j  # certified values carry 15 digits
        if deviation == 0:  # an exact fit (Wampler1, Wampler2)
            assert abs(se[j]) < 1e-40
        else:
            assert _lre(se[j], deviation) >= 13.5, j
    if certified["residual_sd"] == 0:
        assert abs(sd) < 1e-40
    else:
        assert _lre(sd, certified["residual_sd"]) >= 13.5
    assert _lre(r2, certified["r_squared"]) >= 13.5


def test_the_shipped_longley_data_are_statsmodels_copy():
    from statsmodels.datasets import longley

    frame = longley.load_pandas().data
    entry = next(e for e in nist_problems()["problems"] if e["id"] == "longley")
    assert [float(v) for v in entry["data"]["y"]] == list(frame["TOTEMP"])
    for name in entry["predictors"]:
        assert [float(v) for v in entry["data"][name]] == list(frame[name])


def test_wampler_data_follow_their_definitions():
    # NIST StRD Wampler1–5 (Wampler 1970, JASA 65:549–565): first responses as NIST lists
    assert wampler_y(1)[:3] == ["1", "6", "63"]
    assert wampler_y(2)[:3] == ["1.00000", "1.11111", "1.24992"]
    assert wampler_y(3)[:3] == ["760", "-2042", "2111"]
    assert wampler_y(4)[:2] == ["75901", "-204794"]
    assert wampler_y(5)[:2] == ["7590001", "-20479994"]


def _glm(problem_id):
    return next(p for p in glm_problems()["problems"] if p["id"] == problem_id)


def test_spector_reference_is_a_50_digit_newton_raphson():
    from statsmodels.datasets import spector

    frame = spector.load_pandas().data
    rows = [[1.0, p, g, t] for p, g, t in zip(frame.PSI, frame.GPA, frame.TUCE)]
    beta, se = reference_fits.logistic(rows, list(frame.GRADE))
    shipped = _glm("spector-logit")["reference"]
    for j in range(4):
        assert _lre(beta[j], shipped["estimate"][j]) >= 15
        assert _lre(se[j], shipped["standard_error"][j]) >= 15


def test_spector_published_values_agree_with_the_reference_fit_to_their_digits():
    # Spector & Mazzeo (1980) as tabled by Greene (from memory): within half a unit
    entry = _glm("spector-logit")
    for what in ("estimate", "standard_error"):
        for text, value in zip(entry["published"][what], entry["reference"][what]):
            half = 0.5 * 10 ** -len(text.split(".")[1])
            assert abs(float(text) - value) <= half, (what, text, value)


def test_dobson_reference_is_the_closed_form_fit():
    entry = _glm("dobson-poisson")
    data = entry["data"]
    counts = data["counts"]
    with mp.workdps(50):
        total = {}
        for key in ("result", "treatment"):
            for level, count in zip(data[key], counts):
                total[level] = total.get(level, 0) + count
        fitted = [mp.mpf(total[r]) * total[t] / sum(counts)
                  for r, t in zip(data["result"], data["treatment"])]
        rows = [[1, t == "t2", t == "t3", r == "r2", r == "r3"]
                for r, t in zip(data["result"], data["treatment"])]
        se, deviance = reference_fits.poisson_two_way([[int(v) for v in r] for r in rows],
                                                      counts, fitted)
        estimate = [mp.log(fitted[0]), 0, 0, mp.log(mp.mpf(total["r2"]) / total["r1"]),
                    mp.log(mp.mpf(total["r3"]) / total["r1"])]
    shipped = entry["reference"]
    for j in range(5):
        if estimate[j] == 0:
            assert shipped["estimate"][j] == 0.0
        else:
            assert _lre(estimate[j], shipped["estimate"][j]) >= 15
        assert _lre(se[j], shipped["standard_error"][j]) >= 15
    assert _lre(deviance, shipped["deviance"]) >= 15
