"""The fit pass for a streamed run: one analysis from batches of its design.

``passes()`` starts a fresh pass over the data and yields the analysis' :class:`Design` one
batch of rows at a time, in file order. The passes are:

  1. TSQR of [X | y] (for gaussian tiers, the whole fit; for GLM the rank check and VIF),
     the row count, the outcome's sums and the events;
  2. GLM only: one pass per IRLS iteration (compiler/irls.py), every tier at once;
  3. residual pass: robust covariances, and the report tier's diagnostics.

Each is a per-batch reduction with a combine step. The numbers then go through the same
code as an in-memory fit (compiler/fit_gaussian.py, fit_glm.py, fit.py), so both paths
agree to rounding. A clustered covariance sums each cluster's scores over the batches
(codes that hold across batches come from stream.ClusterCodes), then finishes as in memory.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Callable, Iterator

import numpy as np

from . import diagnostics as memory_diagnostics
from . import equilibrate
from . import fit as memory_fit
from .covariance import (cluster_meat, cluster_sums, distinct_covariances, reference_of,
                         sandwich_covariances)
from .fitted import AnalysisFit, Design, Diagnostics, Influential
from .inference import finite_or_none
from .irls import Moments, fit_tiers, moments_combine, moments_map
from .plan import Analysis, Covariance, Plan
from .qr import triangular_inverse
from .stream_diagnostics import CentralMoments, PlotSample, TopCooks, dagostino_pearson
from .tsqr import TsqrAccumulator

DesignPasses = Callable[[], Iterator[Design]]
NOT_STREAMED = "not computed in a streamed run"


@dataclass(frozen=True)
class FirstPass:
    header: Design  # the design's labels and widths, with n × p shape but no rows held
    r: np.ndarray  # R of [X | y]
    moments: Moments
    events: int
    scales: np.ndarray  # the equilibration of [X | y] (qr.column_scales); R is of [X | y]/scales


def fit_streamed(plan: Plan, analysis: Analysis, passes: DesignPasses,
                 progress=None, first: "FirstPass | None" = None) -> AnalysisFit:
    """Every tier of ``analysis`` from streamed batches; raises Stop (exit 3) as fit.fit does.
    ``first``: the decomposition pass when the caller already ran it (alongside the bind)."""
    with np.errstate(all="ignore"):  # what floating point flags becomes None with a reason
        if first is None:
            decomposition = Decomposition()
            for design in passes():
                decomposition.add(design)
                _show(progress, f"{analysis.id}: decomposing, {decomposition.rows:,} rows")
            first = decomposition.result()
        return _fit_streamed(plan, analysis, passes, progress, first)


def _fit_streamed(plan, analysis, passes, progress, first: FirstPass) -> AnalysisFit:
    header, scales = first.header, first.scales
    gaussian = analysis.family == "gaussian"
    if equilibrate.needed(scales):  # every later pass sees the equilibrated columns
        original = passes

        def passes():
            return (equilibrate.scaled(d, scales, gaussian) for d in original())
    memory_fit._check_sizes(analysis, header)
    memory_fit._check_outcome(analysis, header, first.r, scales)
    memory_fit._check_rank(plan, analysis, header, first.r)
    covariances = distinct_covariances(plan, analysis)
    report = list(header.tier_names).index(analysis.report_tier)
    if gaussian:
        tiers, comparisons, diagnostics = _gaussian(analysis, passes, first, covariances,
                                                    report, progress)
        events = None
    else:
        tiers, comparisons, diagnostics = _glm(analysis, passes, first, covariances, report,
                                               progress)
        events = first.events if analysis.family == "binomial" else None
    return memory_fit.mapped_back(AnalysisFit(
        analysis=analysis.id, family=analysis.family, n=int(first.moments.n), tiers=tiers,
        comparisons=comparisons,
        exposure=memory_fit.exposure_across_tiers(tiers, analysis.family, analysis.confidence),
        diagnostics=diagnostics, events=events,
        warnings=tuple(w for tier in tiers for w in tier.warnings),
        reference=reference_of(analysis.covariance, analysis.family, tiers)), scales, gaussian,
        analysis.confidence)


class Decomposition:
    """Pass 1 of a fit as a reduction: TSQR of [X | y], the row count, the outcome's sums
    and the events, batch by batch (``add``), then ``result``."""

    def __init__(self):
        self.accumulator: TsqrAccumulator | None = None
        self.shape: Design | None = None
        self.moments: list[Moments] = []
        self.events = 0

    @property
    def rows(self) -> int:
        return 0 if self.accumulator is None else self.accumulator.rows

    def add(self, design: Design) -> None:
        if self.accumulator is None:
            self.shape = design
            self.accumulator = TsqrAccumulator(design.x.shape[1] + 1, equilibrate=True)
        self.accumulator.add(np.column_stack([design.x, design.y]))
        self.moments.append(moments_map((design.x, design.y, design.offset)))
        self.events += int(np.sum(design.y == 1.0))

    def result(self) -> FirstPass:
        total = moments_combine(self.moments)
        n, p = total.n, self.shape.x.shape[1]
        # Broadcast views: the header answers shape questions and holds no rows.
        header = replace(self.shape, x=np.broadcast_to(np.float64(0), (n, p)),
                         y=np.broadcast_to(np.float64(0), (n,)), offset=None, cluster=None,
                         row_ids=None)
        return FirstPass(header, self.accumulator.r, total, self.events,
                         self.accumulator.scales)


def _show(progress, text: str) -> None:
    if progress is not None:
        progress.show(text)


def _robust_kinds(covariances: list[Covariance]) -> list[Covariance]:
    """The per-row sums to accumulate: HC1 is HC0 scaled by the whole data's n / (n − p), so
    it is accumulated as HC0; a clustered covariance is summed per cluster (ClusterTotals)."""
    kinds = []
    for c in covariances:
        kind = Covariance("HC0") if c.kind == "HC1" else c
        if c.kind not in ("classical", "cluster") and kind not in kinds:
            kinds.append(kind)
    return kinds


def _clustered(covariances: list[Covariance]) -> bool:
    return any(c.kind == "cluster" for c in covariances)


class ClusterTotals:
    """Each cluster's summed scores, per tier, over the batches of a residual pass: the
    per-partition part of the clustered sandwich (covariance.cluster_sums), its combine a
    sum of arrays whose rows are clusters. Rows grow as new clusters appear."""

    def __init__(self, widths):
        self.widths = list(widths)
        self.sums = [np.zeros((0, w)) for w in self.widths]
        self.clusters = 0

    def add(self, tiers, x, inverse, residuals, codes, root_w=None) -> None:
        """Add one batch's scores for ``tiers`` (their residuals in the same order)."""
        tiers = list(tiers)
        found = int(codes.max()) + 1 if len(codes) else 0
        self.clusters = max(self.clusters, found)
        capacity = self.sums[0].shape[0]
        if capacity < found:  # room for the clusters met first in this batch, doubling
            capacity = max(found, 2 * capacity)
            self.sums = [np.vstack([s, np.zeros((capacity - len(s), s.shape[1]))])
                         for s in self.sums]
        top = max(self.widths[k] for k in tiers)
        cluster_sums(x[:, :top], inverse[:top, :top], [self.widths[k] for k in tiers],
                     residuals, codes, [self.sums[k] for k in tiers], capacity, root_w)

    def finish(self, sandwiches, covariances, inverses, n: int) -> list[dict]:
        """``sandwiches`` (or empty ones) with each tier's clustered covariance added."""
        out = [dict(found) for found in sandwiches] if sandwiches else [{} for _ in self.widths]
        for c in covariances:
            if c.kind != "cluster":
                continue
            for k, (w, inverse) in enumerate(zip(self.widths, inverses)):
                if inverse is None:
                    continue
                r = inverse[:w, :w]
                meat = cluster_meat(self.sums[k][:self.clusters], n, w, self.clusters)
                with np.errstate(all="ignore"):
                    out[k][c.label] = r @ meat @ r.T
        return out

    def header(self, header: Design) -> Design:
        """The header with a stand-in cluster column whose largest code gives the number of
        clusters (the reference df of a clustered t): a broadcast view, no rows held."""
        n = header.x.shape[0]
        return replace(header, cluster=np.broadcast_to(np.int64(self.clusters - 1), (n,)))


def _finish_sandwiches(totals: list[dict], covariances, n: int, widths) -> list[dict]:
    out = []
    for found, width in zip(totals, widths):
        done = {}
        for c in covariances:
            if c.kind == "HC1" and "HC0" in found:
                done[c.label] = found["HC0"] * (n / (n - width))
            elif c.label in found:
                done[c.label] = found[c.label]
        out.append(done)
    return out


def _add(totals: list[dict], parts: list[dict]) -> None:
    for total, part in zip(totals, parts):
        for label, matrix in part.items():
            total[label] = total[label] + matrix if label in total else matrix


# --- gaussian -----------------------------------------------------------------------------

def _gaussian(analysis, passes, first: FirstPass, covariances, report, progress):
    from .fit_gaussian import fit_gaussian

    header, r, n = first.header, first.r, first.moments.n
    classical = fit_gaussian(analysis, header, r, [Covariance()]).numbers
    widths = [t.width for t in classical]
    rinv = classical[-1].rinv
    kinds = _robust_kinds(covariances)
    totals = [{} for _ in widths]
    clustered = ClusterTotals(widths) if _clustered(covariances) else None
    t = classical[report]
    residual_pass = _GaussianReport(header, t, n)
    seen = 0
    for design in passes():
        residuals = [design.y - design.x[:, :w] @ tier.beta for w, tier in zip(widths, classical)]
        if kinds:
            _add(totals, sandwich_covariances(design.x, rinv, widths, residuals, kinds, None))
        if clustered is not None:
            clustered.add(range(len(widths)), design.x, rinv, residuals, design.cluster)
        residual_pass.add(design, residuals[report], seen)
        seen += len(design.y)
        _show(progress, f"{analysis.id}: residuals, {seen:,} of {n:,} rows")
    sandwiches = _finish_sandwiches(totals, covariances, n, widths) if kinds else None
    if clustered is not None:
        sandwiches = clustered.finish(sandwiches, covariances, [rinv] * len(widths), n)
        header = clustered.header(header)
    fitted = fit_gaussian(analysis, header, r, covariances, sandwiches)
    return fitted.tiers, fitted.comparisons, residual_pass.diagnostics(r, analysis.report_tier)


class _GaussianReport:
    """The report tier's diagnostics, as compiler/diagnostics.py gaussian_diagnostics."""

    def __init__(self, header: Design, tier, n: int):
        self.header, self.tier, self.n = header, tier, n
        self.usable = tier.sigma2 is not None and tier.sigma2 > 0.0
        self.rinv = tier.rinv
        self.moments = CentralMoments()
        self.squares = CentralMoments()
        self.projected = np.zeros(max(tier.width - 1, 0))
        self.kept_residuals: list[np.ndarray] = []  # Shapiro–Wilk's rows, when few
        self.cooks = TopCooks(memory_diagnostics.TOP_INFLUENTIAL)
        self.plot = PlotSample.for_rows(n)
        self.leverage_one = 0

    def add(self, design: Design, residuals: np.ndarray, start: int) -> None:
        w = self.tier.width
        x = design.x[:, :w]
        fitted = x @ self.tier.beta
        if not self.usable:
            self.plot.add(fitted, np.zeros(len(fitted)))
            return
        q = x @ self.rinv
        h = np.einsum("ij,ij->i", q, q)
        with np.errstate(divide="ignore", invalid="ignore"):
            studentized = residuals / np.sqrt(self.tier.sigma2 * (1.0 - h))
            cooks = studentized ** 2 * h / (w * (1.0 - h))
        keep = np.isfinite(studentized) & (h < 1.0 - 1e-10)
        if not np.all(keep):
            self.leverage_one += int(np.sum(~keep))
            cooks = np.where(keep, cooks, np.nan)
        self.cooks.add(cooks, start, design.row_ids)
        self.plot.add(fitted[keep], studentized[keep])
        self.moments = self.moments.merge(CentralMoments.of(residuals))
        u = residuals ** 2
        self.squares = self.squares.merge(CentralMoments.of(u))
        self.projected += q[:, 1:].T @ u
        if self.n <= memory_diagnostics.SHAPIRO_LIMIT:
            self.kept_residuals.append(residuals)

    def diagnostics(self, r: np.ndarray, tier_name: str) -> Diagnostics:
        w = self.tier.width
        vif = memory_diagnostics.variance_inflation(r, w, self.header.labels)
        fitted, residuals = self.plot.arrays()
        if not self.usable:
            return Diagnostics(tier_name, vif, None, None, None, None, None, (),
                               fitted=fitted, residuals=residuals,
                               reason="exact fit: zero residual variance; residual "
                                      "diagnostics are undefined")
        reasons = []
        if self.leverage_one:
            reasons.append(f"{self.leverage_one} rows with leverage 1 have no studentized "
                           "residual or Cook's distance and are left out of both")
        test, statistic, p_value, why = self._normality()
        if why:
            reasons.append(why)
        bp, bp_p = self._breusch_pagan()
        influential = tuple(Influential(row_id, -value) for value, _, row_id in self.cooks.values)
        return Diagnostics(
            tier=tier_name, vif=vif, normality_test=test, normality_statistic=statistic,
            normality_p=p_value, breusch_pagan_statistic=bp, breusch_pagan_p=bp_p,
            influential=influential, fitted=fitted, residuals=residuals,
            reason="; ".join(reasons) or None)

    def _normality(self):
        if self.n <= memory_diagnostics.SHAPIRO_LIMIT:
            kept = np.concatenate(self.kept_residuals) if self.kept_residuals else np.zeros(0)
            return memory_diagnostics._normality(kept)
        statistic, p_value = dagostino_pearson(self.moments)
        return "D'Agostino-Pearson", finite_or_none(statistic), finite_or_none(p_value), None

    def _breusch_pagan(self):
        """Koenker's LM = n·‖Q[:, 1:]ᵀ e²‖² / Σ(e² − mean)², as diagnostics.breusch_pagan."""
        from scipy import special

        w = self.tier.width
        if self.squares.m2 <= 0.0 or w < 2:
            return None, None
        lm = self.n * float(self.projected @ self.projected) / self.squares.m2
        return finite_or_none(lm), finite_or_none(special.chdtrc(w - 1, lm))


# --- binomial and poisson -----------------------------------------------------------------

def _glm(analysis, passes, first: FirstPass, covariances, report, progress):
    from . import fit_glm
    from .fit_glm import GlmTier

    header, n = first.header, first.moments.n
    widths = list(header.tier_width)

    def batches():
        return ((d.x, d.y, d.offset) for d in passes())

    def shown(iteration):
        _show(progress, f"{analysis.id}: iteration {iteration + 1}")

    fits = fit_tiers(batches, analysis.family, [1] + widths, moments=first.moments,
                     on_pass=shown if progress is not None else None)
    null, fits = fits[0], fits[1:]
    numbers, notes = [], []
    for fit in fits:
        failure = _glm_failure(analysis.family, fit, fit_glm)
        rinv = None if failure else triangular_inverse(fit.r_solution)
        numbers.append(GlmTier(fit.width, fit.params, None, None, rinv,
                               None if failure else finite_or_none(fit.log_likelihood),
                               failure, int(fit.iterations)))
        notes.append([failure] if failure else [])
    kinds = _robust_kinds(covariances)
    totals = [{} for _ in widths]
    clustered = ClusterTotals(widths) if _clustered(covariances) else None
    report_pass = _GlmReport(numbers[report], analysis.family, n)
    seen = 0
    for design in passes():
        for k, t in enumerate(numbers):
            if t.failure is not None or not (kinds or clustered or k == report):
                continue
            x = design.x[:, :t.width]
            mu, root_w, pearson = _glm_rows(analysis.family, x, design, t.beta)
            if kinds:
                _add(totals[k:k + 1], sandwich_covariances(x, t.rinv, [t.width], [pearson],
                                                           kinds, None, root_w))
            if clustered is not None:
                clustered.add([k], x, t.rinv, [pearson], design.cluster, root_w)
            if k == report:
                report_pass.add(design, x, mu, root_w, pearson, seen)
        seen += len(design.y)
        _show(progress, f"{analysis.id}: residuals, {seen:,} of {n:,} rows")
    sandwiches = _finish_sandwiches(totals, covariances, n, widths)
    if clustered is not None:
        sandwiches = clustered.finish(sandwiches, covariances, [t.rinv for t in numbers], n)
        header = clustered.header(header)
    null_deviance = finite_or_none(null.deviance) if null.converged else None
    tiers = tuple(
        fit_glm._tier_fit(analysis, header, tier, k, numbers[k], covariances, None, notes[k],
                          sandwiches[k], null_deviance,
                          statistics=(fits[k].deviance, fits[k].pearson_x2))
        for k, tier in enumerate(analysis.tiers))
    comparisons = tuple(
        fit_glm._compare(analysis, numbers[k - 1], numbers[k], tiers[k - 1], tiers[k],
                         sandwiches[k])
        for k in range(1, len(numbers)))
    diagnostics = report_pass.diagnostics(first.r, header, analysis.report_tier)
    return tiers, comparisons, diagnostics


def _glm_failure(family: str, fit, fit_glm) -> str | None:
    """Why a tier has no estimates, by fit_glm's rules (boundary means, convergence, rank)."""
    suspect = getattr(fit_glm, "SUSPECT", getattr(fit_glm, "BOUNDARY", 1e-6))
    if fit.closest_boundary < suspect:
        # in memory a linear programme over every row decides; it does not stream
        side = "0 or 1" if family == "binomial" else "0"
        return (f"fitted values within {suspect:g} of {side} suggest separation, which is "
                f"{NOT_STREAMED}: the estimates are withheld; rerun without --stream")
    if not fit.converged:
        return f"the fit did not converge in {fit.iterations} iterations"
    if np.any(np.abs(np.diag(fit.r_solution)) == 0.0):
        return "the weighted design is singular at the solution"
    return None


def _glm_rows(family: str, x, design: Design, beta):
    eta = x @ beta
    if design.offset is not None:
        eta = eta + design.offset
    if family == "binomial":
        mu = 1.0 / (1.0 + np.exp(-eta))
        weights = mu * (1.0 - mu)
    else:
        mu = np.exp(eta)
        weights = mu
    root_w = np.sqrt(weights)
    return mu, root_w, (design.y - mu) / root_w


class _GlmReport:
    """The report tier's diagnostics, as compiler/diagnostics.py glm_diagnostics."""

    def __init__(self, tier, family: str, n: int):
        self.tier, self.family = tier, family
        self.cooks = TopCooks(memory_diagnostics.TOP_INFLUENTIAL)
        self.plot = PlotSample.for_rows(n)
        self.no_cooks = 0

    def add(self, design, x, mu, root_w, pearson, start: int) -> None:
        q = (x * root_w[:, None]) @ self.tier.rinv
        h = np.einsum("ij,ij->i", q, q)
        with np.errstate(divide="ignore", invalid="ignore"):
            cooks = pearson ** 2 * h / (self.tier.width * (1.0 - h) ** 2)
        self.no_cooks += int(np.sum(~np.isfinite(cooks)))
        self.cooks.add(cooks, start, design.row_ids)
        keep = np.isfinite(pearson)
        self.plot.add(mu[keep], pearson[keep])

    def diagnostics(self, r_unweighted, header: Design, tier_name: str) -> Diagnostics:
        vif = memory_diagnostics.variance_inflation(r_unweighted, self.tier.width,
                                                    header.labels)
        not_applicable = (f"residual normality and Breusch–Pagan are not applicable to "
                          f"{self.family}")
        if self.tier.failure is not None:
            return Diagnostics(tier_name, vif, None, None, None, None, None, (),
                               fitted=np.zeros(0), residuals=np.zeros(0),
                               reason=f"{not_applicable}; {self.tier.failure}")
        reasons = [not_applicable]
        if self.no_cooks:
            reasons.append(f"{self.no_cooks} rows with leverage 1 have no Cook's distance")
        fitted, residuals = self.plot.arrays()
        influential = tuple(Influential(row_id, -value) for value, _, row_id in self.cooks.values)
        return Diagnostics(tier_name, vif, None, None, None, None, None, influential,
                           fitted=fitted, residuals=residuals, reason="; ".join(reasons))
