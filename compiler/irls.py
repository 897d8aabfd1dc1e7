"""Binomial (logit) and Poisson (log) fits by IRLS, one streamed pass over the data per iteration.

Each iteration is a reduction: every batch contributes the TSQR partial of the weighted
working design [√w·X | √w·z] and its share of the deviance, log-likelihood and Pearson X²;
the combine step stacks the partials. The weighted least-squares step is solved from R,
so the accuracy is QR's, never that of the normal equations.

The iteration is the one statsmodels' GLM.fit runs by default (starting values
``family.starting_mu``, convergence when successive deviances agree within 1e-8, at most
100 iterations; the covariance comes from the weights of the last weighted least-squares
step). That criterion leaves 9–12 correct digits in the coefficients, so once it is met
REFINE_STEPS more Newton steps are taken, to the maximum-likelihood estimate at working
precision. An in-memory fit (compiler/fit_glm.py) runs the same passes over the rows it
holds, a chunk at a time (``in_batches``).
Every tier of an analysis is fitted in the same passes: a tier that has converged simply
stops taking part.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Iterable, Iterator

import numpy as np
from scipy.linalg import solve_triangular
from scipy.special import gammaln

from .tsqr import TsqrAccumulator

EPS = np.finfo(float).eps
TOLERANCE = 1e-8  # statsmodels GLM.fit default: absolute deviance change
MAX_ITERATIONS = 100
# statsmodels' criterion (deviance change ≤ 1e-8) leaves 9–12 correct digits in the
# coefficients; Newton converges quadratically, so two more steps reach the rounding floor.
REFINE_STEPS = 2
# A change of the deviance this small, relative to the deviance, is rounding in the sum over
# millions of rows; without it a very large fit could never meet the absolute criterion.
ROUNDING = 1e-13

Batch = tuple[np.ndarray, np.ndarray, "np.ndarray | None"]  # x (rows × p), y, offset
Batches = Callable[[], Iterable[Batch]]  # each call starts a fresh pass over the data


@dataclass(frozen=True)
class Family:
    """A GLM family with its canonical link, clipped as statsmodels clips it."""

    name: str

    def start(self, y: np.ndarray, y_mean: float) -> np.ndarray:
        return (y + 0.5) / 2 if self.name == "binomial" else (y + y_mean) / 2

    def link(self, mu: np.ndarray) -> np.ndarray:
        if self.name == "binomial":
            p = np.clip(mu, EPS, 1 - EPS)
            return np.log(p / (1 - p))
        return np.log(np.clip(mu, EPS, np.inf))

    def mean(self, eta: np.ndarray) -> np.ndarray:
        return 1 / (1 + np.exp(-eta)) if self.name == "binomial" else np.exp(eta)

    def link_deriv(self, mu: np.ndarray) -> np.ndarray:
        if self.name == "binomial":
            p = np.clip(mu, EPS, 1 - EPS)
            return 1 / (p * (1 - p))
        return 1 / np.clip(mu, EPS, np.inf)

    def variance(self, mu: np.ndarray) -> np.ndarray:
        if self.name == "binomial":
            p = np.clip(mu, EPS, 1 - EPS)
            return p * (1 - p)
        return np.abs(mu)

    def deviance(self, y: np.ndarray, mu: np.ndarray) -> float:
        if self.name == "binomial":
            terms = (y * np.log(np.clip(y / mu, EPS, np.inf))
                     + (1 - y) * np.log(np.clip((1 - y) / (1 - mu), EPS, np.inf)))
        else:
            terms = y * np.log(np.clip(y / mu, EPS, np.inf)) - (y - mu)
        return 2 * float(np.sum(terms))

    def log_likelihood(self, y: np.ndarray, mu: np.ndarray) -> float:
        if self.name == "binomial":  # one trial per row: the binomial coefficients are 1
            return float(np.sum(y * np.log(mu / (1 - mu + 1e-200)) + np.log(1 - mu)))
        return float(np.sum(y * np.log(mu) - mu - gammaln(y + 1)))

    def pearson(self, y: np.ndarray, mu: np.ndarray) -> float:
        return float(np.sum((y - mu) ** 2 / self.variance(mu)))


@dataclass(frozen=True)
class Moments:
    """What the starting values and the null model need: one cheap pass, or the bind pass."""

    n: int
    y_sum: float
    exp_offset_sum: float  # Σ exp(offset), or n without an offset

    @property
    def y_mean(self) -> float:
        return self.y_sum / self.n


def moments_map(batch: Batch) -> Moments:
    _, y, offset = batch
    exp_offset = float(np.sum(np.exp(offset))) if offset is not None else float(len(y))
    return Moments(len(y), float(np.sum(y)), exp_offset)


def moments_combine(parts: Iterable[Moments]) -> Moments:
    parts = list(parts)
    return Moments(sum(p.n for p in parts), sum(p.y_sum for p in parts),
                   sum(p.exp_offset_sum for p in parts))


@dataclass(frozen=True)
class GlmTierFit:
    """One tier's IRLS result. ``r`` is the R factor of √W·X at the weights of the last
    least-squares step (statsmodels' covariance is R⁻¹R⁻ᵀ, scale 1); ``r_solution`` is the
    same at the weights of the returned ``params`` (the one compiler/fit_glm.py uses)."""

    width: int
    params: np.ndarray
    r: np.ndarray
    r_solution: np.ndarray
    n: int
    deviance: float
    null_deviance: float
    log_likelihood: float
    pearson_x2: float
    iterations: int
    converged: bool
    closest_boundary: float  # min over rows of min(μ, 1 − μ) (binomial) or μ (poisson)


@dataclass
class _Tier:
    width: int
    params: np.ndarray | None = None  # None: the pass from the starting values
    r: np.ndarray | None = None  # R of the step that produced ``params``
    deviances: list | None = None
    refining: int | None = None  # Newton steps taken after the deviance criterion was met
    done: GlmTierFit | None = None


def _null_mean(family: Family, moments: Moments, offset: np.ndarray | None, rows: int):
    """The fitted mean of the intercept-only model (with the offset): closed form for the
    canonical links, so the null deviance needs no iteration."""
    if family.name == "binomial" or offset is None:
        return np.full(rows, moments.y_mean)
    return np.exp(offset) * (moments.y_sum / moments.exp_offset_sum)


def fit_tiers(batches: Batches, family_name: str, widths: Iterable[int], *,
              moments: Moments | None = None, tolerance: float = TOLERANCE,
              max_iterations: int = MAX_ITERATIONS,
              on_pass: Callable[[int], None] | None = None) -> tuple[GlmTierFit, ...]:
    """Fit every tier (the leading ``width`` columns of each batch's x) by streamed IRLS."""
    family = Family(family_name)
    if moments is None:
        moments = moments_combine(moments_map(b) for b in batches())
    tiers = [_Tier(w, deviances=[np.inf]) for w in widths]
    for iteration in range(max_iterations + REFINE_STEPS + 1):
        active = [t for t in tiers if t.done is None]
        if not active:
            break
        if on_pass is not None:
            on_pass(iteration)
        # the log-likelihood and Pearson X² are kept from the last pass only: summed there
        last = [t.refining is not None and t.refining >= REFINE_STEPS or REFINE_STEPS == 0
                or len(t.deviances) - 1 >= max_iterations for t in active]
        sums = _one_pass(batches(), family, moments, active, last)
        for tier, (dev, null_dev, llf, pearson, boundary, acc) in zip(active, sums):
            tier.deviances.append(dev)
            seen = len(tier.deviances) - 2  # iterations completed before this pass
            if tier.refining is None and seen >= 1 and _close(tier.deviances[-2], dev,
                                                              tolerance):
                tier.refining = 0  # statsmodels' criterion met: on to full precision
            final = tier.refining == REFINE_STEPS
            r = acc.r
            if final or (tier.refining is None and seen == max_iterations):
                tier.done = GlmTierFit(tier.width, tier.params, tier.r, r[:-1, :-1], moments.n,
                                       dev, null_dev, llf, pearson, seen, final, boundary)
                continue
            if tier.refining is not None:
                tier.refining += 1
            tier.params = solve_triangular(r[:-1, :-1], r[:-1, -1])
            tier.r = r[:-1, :-1]
    return tuple(t.done for t in tiers)  # type: ignore[misc]


def _close(before: float, after: float, tolerance: float) -> bool:
    change = abs(before - after)
    return change <= tolerance or change <= ROUNDING * abs(after)


def _one_pass(batches: Iterable[Batch], family: Family, moments: Moments,
              tiers: list[_Tier], last: list[bool]) -> list[tuple]:
    """Per tier: deviance, null deviance, log-likelihood and Pearson X² (NaN unless ``last``
    says the pass may be the tier's last), the closest fitted value to the boundary, and
    the R factor of the weighted working design."""
    nan = float("nan")
    sums = [[0.0, 0.0, 0.0 if final else nan, 0.0 if final else nan, np.inf,
             TsqrAccumulator(t.width + 1)] for t, final in zip(tiers, last)]
    for x, y, offset in batches:
        null_deviance = family.deviance(y, _null_mean(family, moments, offset, len(y)))
        off = 0.0 if offset is None else offset
        for tier, acc, final in zip(tiers, sums, last):
            if tier.params is None:
                mu = family.start(y, moments.y_mean)
                eta = family.link(mu)
            else:
                eta = x[:, :tier.width] @ tier.params + off
                mu = family.mean(eta)
            acc[0] += family.deviance(y, mu)
            acc[1] += null_deviance
            if final:
                acc[2] += family.log_likelihood(y, mu)
                acc[3] += family.pearson(y, mu)
            if len(mu):
                near = np.minimum(mu, 1 - mu) if family.name == "binomial" else mu
                acc[4] = min(acc[4], float(near.min()))
            weight = 1 / (family.link_deriv(mu) ** 2 * family.variance(mu))
            working = eta + family.link_deriv(mu) * (y - mu) - off
            root = np.sqrt(weight)
            block = np.empty((len(y), tier.width + 1))
            np.multiply(x[:, :tier.width], root[:, None], out=block[:, :-1])
            block[:, -1] = working * root
            acc[5].add(block)
    return sums


def in_batches(x: np.ndarray, y: np.ndarray, offset: np.ndarray | None,
               rows: int) -> Batches:
    """Arrays held in memory, served as batches of ``rows`` rows (views, no copies)."""

    def passes() -> Iterator[Batch]:
        for start in range(0, len(y), rows):
            stop = start + rows
            yield (x[start:stop], y[start:stop],
                   None if offset is None else offset[start:stop])

    return passes
