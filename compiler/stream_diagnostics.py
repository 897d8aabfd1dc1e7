"""Report-tier diagnostics as reductions over batches, for a streamed run.

What compiler/diagnostics.py computes on all rows at once, computed here a batch at a time
with an exact merge: central moments (for the D'Agostino–Pearson test and the centred sum of
squares of Breusch–Pagan), the projection of the squared residuals, and the largest Cook's
distances. Shapiro–Wilk needs every residual sorted; it is used, as in memory, up to 5000
rows, where keeping the residuals costs nothing. The residual plot gets an evenly spaced
sample of at most ``PLOT_POINTS`` rows.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

PLOT_POINTS = 20_000


@dataclass
class CentralMoments:
    """n, mean and the sums of powers 2–4 of deviations from the mean, merged exactly
    (Pébay 2008, Sandia report SAND2008-6212, formulas for pairwise updates)."""

    n: int = 0
    mean: float = 0.0
    m2: float = 0.0
    m3: float = 0.0
    m4: float = 0.0

    @classmethod
    def of(cls, values: np.ndarray) -> "CentralMoments":
        n = len(values)
        if n == 0:
            return cls()
        mean = float(np.mean(values))
        d = values - mean
        d2 = d * d
        m2 = float(np.sum(d2))
        d *= d2  # d³, in place: the same products, one n-long temporary fewer
        m3 = float(np.sum(d))
        d2 *= d2  # d⁴
        return cls(n, mean, m2, m3, float(np.sum(d2)))

    def merge(self, other: "CentralMoments") -> "CentralMoments":
        if other.n == 0:
            return self
        if self.n == 0:
            return other
        na, nb = self.n, other.n
        n = na + nb
        delta = other.mean - self.mean
        m2 = self.m2 + other.m2 + delta ** 2 * na * nb / n
        m3 = (self.m3 + other.m3 + delta ** 3 * na * nb * (na - nb) / n ** 2
              + 3 * delta * (na * other.m2 - nb * self.m2) / n)
        m4 = (self.m4 + other.m4
              + delta ** 4 * na * nb * (na * na - na * nb + nb * nb) / n ** 3
              + 6 * delta ** 2 * (na * na * other.m2 + nb * nb * self.m2) / n ** 2
              + 4 * delta * (na * other.m3 - nb * self.m3) / n)
        return CentralMoments(n, self.mean + delta * nb / n, m2, m3, m4)


def dagostino_pearson(moments: CentralMoments) -> tuple[float, float]:
    """K² and its p-value from the sample skewness and kurtosis, by the formulas of
    scipy.stats.normaltest (D'Agostino 1971, Biometrika 58:341–348; Anscombe & Glynn 1983,
    Biometrika 70:227–234; D'Agostino & Pearson 1973, Biometrika 60:613–622)."""
    from scipy import special

    n = moments.n
    m2, m3, m4 = moments.m2 / n, moments.m3 / n, moments.m4 / n
    skew = m3 / m2 ** 1.5
    y = skew * math.sqrt(((n + 1) * (n + 3)) / (6.0 * (n - 2)))
    beta2 = (3.0 * (n * n + 27 * n - 70) * (n + 1) * (n + 3)
             / ((n - 2.0) * (n + 5) * (n + 7) * (n + 9)))
    w2 = -1 + math.sqrt(2 * (beta2 - 1))
    delta = 1 / math.sqrt(0.5 * math.log(w2))
    alpha = math.sqrt(2.0 / (w2 - 1))
    y = 1.0 if y == 0 else y
    z_skew = delta * math.log(y / alpha + math.sqrt((y / alpha) ** 2 + 1))

    b2 = m4 / m2 ** 2
    expected = 3.0 * (n - 1) / (n + 1)
    var_b2 = 24.0 * n * (n - 2) * (n - 3) / ((n + 1) ** 2 * (n + 3) * (n + 5))
    x = (b2 - expected) / math.sqrt(var_b2)
    root_beta1 = (6.0 * (n * n - 5 * n + 2) / ((n + 7) * (n + 9))
                  * math.sqrt((6.0 * (n + 3) * (n + 5)) / (n * (n - 2) * (n - 3))))
    a = 6.0 + 8.0 / root_beta1 * (2.0 / root_beta1 + math.sqrt(1 + 4.0 / root_beta1 ** 2))
    term1 = 1 - 2 / (9.0 * a)
    denominator = 1 + x * math.sqrt(2 / (a - 4.0))
    if denominator == 0:
        return math.nan, math.nan
    term2 = math.copysign(((1 - 2.0 / a) / abs(denominator)) ** (1 / 3.0), denominator)
    z_kurt = (term1 - term2) / math.sqrt(2 / (9.0 * a))
    k2 = z_skew ** 2 + z_kurt ** 2
    return k2, float(special.chdtrc(2, k2))  # = scipy.stats.chi2.sf(k2, 2)


@dataclass
class TopCooks:
    """The largest Cook's distances seen so far, with their global row positions; merging
    keeps the same order compiler/diagnostics.py gives (largest first, ties to the earlier)."""

    size: int
    values: list = field(default_factory=list)  # (−cooks, position, row id)

    def add(self, cooks: np.ndarray, start: int, row_ids) -> None:
        finite = np.flatnonzero(np.isfinite(cooks))
        order = finite[np.lexsort((finite, -cooks[finite]))][: self.size]
        ids = row_ids if row_ids is not None else np.arange(start + 1, start + len(cooks) + 1)
        self.values.extend((-float(cooks[i]), start + int(i), str(ids[i])) for i in order)
        self.values = sorted(self.values)[: self.size]


@dataclass
class PlotSample:
    """Every ``stride``-th kept row's fitted value and residual."""

    stride: int
    fitted: list = field(default_factory=list)
    residuals: list = field(default_factory=list)
    _offset: int = 0

    @classmethod
    def for_rows(cls, n: int) -> "PlotSample":
        return cls(max(1, -(-n // PLOT_POINTS)))

    def add(self, fitted: np.ndarray, residuals: np.ndarray) -> None:
        first = (-self._offset) % self.stride
        self.fitted.append(fitted[first::self.stride])
        self.residuals.append(residuals[first::self.stride])
        self._offset += len(fitted)

    def arrays(self) -> tuple[np.ndarray, np.ndarray]:
        if not self.fitted:
            return np.zeros(0), np.zeros(0)
        return np.concatenate(self.fitted), np.concatenate(self.residuals)
