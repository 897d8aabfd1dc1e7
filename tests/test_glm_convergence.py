"""GLM tiers iterate to full double precision, report their iteration count, and a tier with
no maximum-likelihood estimate reports no likelihood, deviance or dispersion.

Reference for precision: the Spector–Mazzeo logit (Spector & Mazzeo 1980, "Probit analysis
and economic education", J Economic Education 11:37–44; 32 students, GRADE on GPA, TUCE,
PSI; data shipped as statsmodels.datasets.spector), solved here by our own Newton–Raphson
in 50-digit arithmetic (mpmath), independent of both statsmodels and prespec.
"""

from __future__ import annotations

import mpmath
import numpy as np
import pytest
import statsmodels.api as sm

import fitkit as fk
import nist
from compiler.design import design
from compiler.fit import fit
from compiler.irls import fit_tiers, in_batches
from compiler.plan import Variable

mpmath.mp.dps = 50


def _spector():
    data = sm.datasets.spector.load_pandas().data
    return {name: data[name].to_numpy(dtype=float) for name in ("GRADE", "GPA", "TUCE", "PSI")}


def _newton_logit(x: np.ndarray, y: np.ndarray):
    """Maximum-likelihood logit by Newton–Raphson in 50 digits: (β, sqrt(diag(H⁻¹)))."""
    rows = [[mpmath.mpf(float(v)) for v in row] for row in x]
    ys = [mpmath.mpf(float(v)) for v in y]
    p = x.shape[1]
    beta = mpmath.matrix(p, 1)
    for _ in range(60):
        gradient, hessian = mpmath.matrix(p, 1), mpmath.matrix(p, p)
        for row, yi in zip(rows, ys):
            eta = sum(b * v for b, v in zip(beta, row))
            mu = 1 / (1 + mpmath.exp(-eta))
            for a in range(p):
                gradient[a] += (yi - mu) * row[a]
                for b in range(p):
                    hessian[a, b] += mu * (1 - mu) * row[a] * row[b]
        step = mpmath.lu_solve(hessian, gradient)
        beta += step
        if mpmath.norm(step) < mpmath.mpf(10) ** -40:
            break
    inverse = hessian ** -1
    return [float(b) for b in beta], [float(mpmath.sqrt(inverse[j, j])) for j in range(p)]


@pytest.fixture(scope="module")
def spector():
    columns = _spector()
    x = np.column_stack([np.ones(32), columns["PSI"], columns["GPA"], columns["TUCE"]])
    return columns, x, _newton_logit(x, columns["GRADE"])


def _spector_fit(columns):
    analysis = fk.analysis("GRADE", "PSI", [("crude", []), ("full", ["GPA", "TUCE"])],
                           "binomial")
    plan = fk.plan([Variable("GRADE", "binary"), Variable("PSI", "binary"),
                    Variable("GPA", "continuous"), Variable("TUCE", "continuous")], [analysis])
    return fit(plan, analysis, design(plan, analysis, fk.bound(columns, [analysis])))


def test_spector_mazzeo_logit_to_twelve_digits_in_memory(spector):
    columns, _, (beta, se) = spector
    full = _spector_fit(columns).tier("full")
    for c, b, s in zip(full.columns, beta, se):
        assert nist.lre(c.estimate, b) >= 12.0, c.column
        assert nist.lre(c.standard_error, s) >= 12.0, c.column


def test_spector_mazzeo_logit_to_twelve_digits_streamed(spector):
    columns, x, (beta, _) = spector
    (found,) = fit_tiers(in_batches(x, columns["GRADE"], None, 7), "binomial", [4])
    for estimate, b in zip(found.params, beta):
        assert nist.lre(estimate, b) >= 12.0


def test_a_glm_tier_reports_its_iteration_count(spector):
    columns, x, _ = spector
    full = _spector_fit(columns).tier("full")
    (streamed,) = fit_tiers(in_batches(x, columns["GRADE"], None, 7), "binomial", [4])
    assert full.converged and isinstance(full.iterations, int) and full.iterations > 0
    assert full.iterations == streamed.iterations


def test_a_separated_tier_has_no_likelihood_deviance_or_dispersion():
    columns = _spector()
    columns["GRADE"] = (columns["GPA"] > 3.0).astype(float)  # GPA separates the outcome
    tier = _spector_fit(columns).tier("full")
    assert "separation" in tier.reason and tier.converged is False
    for name in ("log_likelihood", "aic", "bic", "deviance", "pearson_x2", "dispersion"):
        assert getattr(tier, name) is None, name
