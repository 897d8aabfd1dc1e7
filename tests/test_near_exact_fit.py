"""A near-exact gaussian fit warns that σ² and the standard errors carry few correct digits.

Data: the NIST StRD Wampler1 polynomial y = 1 + x + x² + x³ + x⁴ + x⁵ at x = 0 … 20 (built
from its definition), plus noise of 1e-11 of y's largest value, so that the residuals stand
a few digits above rounding. Reference: the least squares solved in 60-digit arithmetic
(mpmath) on the same double-precision data.
"""

from __future__ import annotations

import re

import mpmath
import numpy as np

import fitkit as fk
import nist
from compiler.design import design
from compiler.fit import fit

X = np.arange(21.0)
TIERS = [("linear", []), ("quintic", [{"power": "x", "degree": k} for k in range(2, 6)])]


def _quintic(y):
    analysis = fk.analysis("y", "x", TIERS)
    plan = fk.plan(fk.numeric_variables("y", "x"), [analysis])
    return fit(plan, analysis, design(plan, analysis, fk.bound({"y": y, "x": X}, [analysis])))


def _sigma2_in_60_digits(y) -> float:
    mpmath.mp.dps = 60
    x = mpmath.matrix([[mpmath.mpf(float(v)) ** k for k in range(6)] for v in X])
    target = mpmath.matrix([mpmath.mpf(float(v)) for v in y])
    beta = mpmath.lu_solve(x.T * x, x.T * target)
    return float(sum(e ** 2 for e in target - x * beta) / (len(X) - 6))


def test_a_near_exact_fit_warns_of_the_digits_sigma2_has_left():
    base = sum(X ** k for k in range(6))
    y = base + 1e-11 * base.max() * np.random.default_rng(2).normal(size=len(X))
    result = _quintic(y)
    quintic = result.tier("quintic")
    achieved = nist.lre(quintic.sigma2, _sigma2_in_60_digits(y))
    assert achieved < 8  # of the 16 printed, fewer than half are right
    (warning,) = quintic.warnings
    assert "near-exact fit" in warning and warning in result.warnings
    promised = int(re.search(r"as few as (\d+) correct digit", warning).group(1))
    assert promised <= achieved  # the warning's bound holds


def test_an_ordinary_fit_does_not_warn():
    columns = nist.longley_columns()  # NIST StRD Longley: σ² certified to 15 digits
    analysis = fk.analysis("TOTEMP", "GNPDEFL",
                           [("exposure-only", []), ("certified", list(nist.COVARIATES))])
    plan = fk.plan(fk.numeric_variables(*nist.COLUMNS), [analysis])
    result = fit(plan, analysis, design(plan, analysis, fk.bound(columns, [analysis])))
    assert not any("near-exact" in w for w in result.warnings)
