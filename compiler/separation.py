"""Whether a binomial or Poisson maximum-likelihood estimate exists, by linear programming.

Binomial (Albert & Anderson 1984, Biometrika 71:1–10): the MLE fails to exist — complete or
quasi-complete separation — exactly when some direction β ≠ 0 has x_iᵀβ ≥ 0 for every
y_i = 1 and x_iᵀβ ≤ 0 for every y_i = 0. Konis's linear programme finds it: maximise
Σ s_i x_iᵀβ subject to s_i x_iᵀβ ≥ 0 and −1 ≤ β_j ≤ 1 (s_i = ±1 by outcome); a positive
optimum is a separating direction (Konis 2007, Linear programming algorithms for detecting
separated data in binary logistic regression models, DPhil thesis, Oxford).

Poisson (Santos Silva & Tenreyro 2010, Economics Letters 107:310–312): the MLE fails to exist
exactly when some β ≠ 0 has x_iᵀβ = 0 for every y_i > 0 and x_iᵀβ ≤ 0 for every y_i = 0,
strictly for some; the same programme with those constraints finds it.

Columns are scaled to unit largest magnitude first, so the bound on β means the same for
every column, and an optimum above ``TOLERANCE`` counts as a direction found.
"""

from __future__ import annotations

import numpy as np

TOLERANCE = 1e-7


def separating_direction(x: np.ndarray, y: np.ndarray, family: str) -> bool:
    """True when the data admit a direction along which the likelihood keeps increasing."""
    from scipy.optimize import linprog

    scale = np.max(np.abs(x), axis=0)
    scale[scale == 0.0] = 1.0
    xs = x / scale
    p = xs.shape[1]
    bounds = [(-1.0, 1.0)] * p
    if family == "binomial":
        signed = xs * np.where(y > 0.5, 1.0, -1.0)[:, None]
        # maximise Σ signed·β  ⇔  minimise −Σ signed·β, with −signed·β ≤ 0
        result = linprog(-signed.sum(axis=0), A_ub=-signed, b_ub=np.zeros(len(y)),
                         bounds=bounds, method="highs")
    else:
        zero = y == 0.0
        if not np.any(zero):
            return False
        positive = xs[~zero]
        result = linprog(xs[zero].sum(axis=0), A_ub=xs[zero], b_ub=np.zeros(int(zero.sum())),
                         A_eq=positive if len(positive) else None,
                         b_eq=np.zeros(len(positive)) if len(positive) else None,
                         bounds=bounds, method="highs")
    return bool(result.status == 0 and -result.fun > TOLERANCE)
