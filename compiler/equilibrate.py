"""Fits on equilibrated columns: a design column or a gaussian outcome whose magnitude lies
far outside the ordinary range (compiler/qr.py, ``column_scales``) is divided by a power of
2 before the QR and everything after it, and the fit is mapped back at the end.

With X̃ = X D⁻¹ and ỹ = y / d_y (gaussian; a GLM outcome is never scaled), the fit of
(X̃, ỹ) has β̃_j = β_j d_j / d_y, so every coefficient, standard error and interval end is
multiplied back by d_y / d_j, the residual SS and σ² by d_y², the gaussian log-likelihood
loses n·log d_y; t, z, F, χ², p-values, R², leverages, studentized residuals and Cook's
distances do not change. Each factor is a power of 2, so the mapping is exact; a value
that no double can hold (an RSS of 1e312) becomes None with a reason.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from .fitted import AnalysisFit, Coefficient, Design, ExposureInference, TierFit
from .inference import finite_or_none

TOO_LARGE = "beyond the range of double precision on the outcome's scale"


def needed(scales: np.ndarray) -> bool:
    return bool(np.any(scales != 1.0))


def scaled(design: Design, scales: np.ndarray, gaussian: bool) -> Design:
    """The design in equilibrated columns (and outcome, for gaussian)."""
    from .design import DesignRows

    inverse = 1.0 / scales[:-1]
    base = design.x
    if isinstance(base, DesignRows) or not isinstance(base, np.ndarray):
        x = DesignRows(lambda rows: base[rows] * inverse, base.shape[0], base.shape[1])
    else:
        x = np.asfortranarray(base * inverse)  # a GLM design is held whole anyway
    y = design.y / scales[-1] if gaussian else design.y
    return replace(design, x=x, y=y)


def unscaled(fit: AnalysisFit, scales: np.ndarray, gaussian: bool) -> AnalysisFit:
    """``fit`` of the equilibrated design, on the data's own scales (but for its exposure
    across tiers, which compiler/fit.py makes again from these tiers)."""
    outcome = float(scales[-1]) if gaussian else 1.0
    factors = outcome / scales[:-1]
    tiers = tuple(_tier(t, factors, outcome, fit.n, gaussian) for t in fit.tiers)
    diagnostics = fit.diagnostics
    if diagnostics is not None and gaussian and len(diagnostics.fitted):
        diagnostics = replace(diagnostics, fitted=diagnostics.fitted * outcome)
    return replace(fit, tiers=tiers, diagnostics=diagnostics)


def _times(value: float | None, factor: float) -> float | None:
    return None if value is None else finite_or_none(value * factor)


def _coefficient(c: Coefficient, factor: float) -> Coefficient:
    out = replace(c, estimate=_times(c.estimate, factor),
                  standard_error=_times(c.standard_error, factor),
                  low=_times(c.low, factor), high=_times(c.high, factor))
    lost = any(getattr(c, k) is not None and getattr(out, k) is None
               for k in ("estimate", "standard_error", "low", "high"))
    return replace(out, reason=c.reason or TOO_LARGE) if lost else out


def _inference(e: ExposureInference, factors: np.ndarray, columns) -> ExposureInference:
    return replace(e, columns=tuple(_coefficient(c, float(factors[j]))
                                    for c, j in zip(e.columns, columns)))


def _tier(t: TierFit, factors: np.ndarray, outcome: float, n: int, gaussian: bool) -> TierFit:
    labels = [c.column for c in t.columns]
    coefficients = tuple(_coefficient(c, float(factors[j])) for j, c in enumerate(t.columns))
    columns = [labels.index(c.column) for c in t.exposure[0].columns] if t.exposure else []
    exposure = tuple(_inference(e, factors, columns) for e in t.exposure)
    if not gaussian:
        return replace(t, columns=coefficients, exposure=exposure)
    shift = n * math.log(outcome)  # log-likelihood of y = that of ỹ − n·log d_y
    def squared(value):  # d_y² itself may overflow where the product does not
        return _times(_times(value, outcome), outcome)

    values = dict(rss=squared(t.rss), sigma2=squared(t.sigma2),
                  log_likelihood=None if t.log_likelihood is None else t.log_likelihood - shift,
                  aic=None if t.aic is None else t.aic + 2.0 * shift,
                  bic=None if t.bic is None else t.bic + 2.0 * shift)
    reason = t.reason
    if any(getattr(t, k) is not None and v is None for k, v in values.items()):
        reason = "; ".join(filter(None, [t.reason, f"the residual SS is {TOO_LARGE}"]))
    return replace(t, columns=coefficients, exposure=exposure, reason=reason, **values)
