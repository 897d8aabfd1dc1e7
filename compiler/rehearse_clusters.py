"""Clusters in a rehearsal: synthetic data with a clustered design, and scrambling by cluster.

An analysis is clustered when its covariance is ``{cluster: VAR}`` (or an assumption's
fallback for it is). Its synthetic data then honour that design, so that the rehearsal's
standard errors and degrees of freedom look like the real data's:

- the cluster variable holds ``clusters`` clusters (default: every level of a categorical
  variable, else 30; never more than half the rows) of uneven sizes (shares drawn from a
  gamma(4) law, a coefficient of variation of 0.5);
- the exposure is assigned to whole clusters, at even shares of clusters per level
  (``assigned: by-cluster``, the default, as in a cluster-randomised design), or left to vary
  within clusters (``assigned: within-cluster``);
- the outcome carries a random cluster intercept with intra-cluster correlation ``icc``
  (default 0.05, common practice: most cluster-randomised trials report 0.01 to 0.1): for
  gaussian, a share ``icc`` of the noise variance; for binomial, on the latent logistic scale
  (σ²ᵤ = icc / (1 − icc) · π² / 3); for poisson, on the log scale with the lognormal–Poisson
  observation variance ln(1 + 1/μ) at the mean count μ (σ²ᵤ = icc / (1 − icc) · ln(1 + 1/μ);
  Nakagawa & Schielzeth 2010, from memory). A logistic fit estimates the population-averaged
  odds ratio, which such an intercept pulls slightly toward 1 (about 3 % at icc 0.05).

Rows that a population rule sets apart (rows made to fail a condition on the cluster
variable or the exposure) keep their own values. Scrambling real data permutes whole clusters
when the exposure is constant within each cluster, and rows within each cluster otherwise,
so the scrambled data keep the real design (`permutation`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from . import synthesize
from .allowed import candidates, integer_bounds
from .plan import Analysis, Covariance, Plan

DEFAULT_ICC = 0.05
DEFAULT_CLUSTERS = 30
_SIZE_SHAPE = 4.0  # gamma shape of the cluster shares: coefficient of variation 1 / √4


@dataclass(frozen=True)
class ClusterDesign:
    variable: str
    clusters: int | None  # declared; None: the default
    by_cluster: tuple[str, ...]  # exposures assigned to whole clusters


def analysis_cluster(plan: Plan, analysis: Analysis) -> Covariance | None:
    """The analysis' cluster covariance: its own, else the first fallback that names one."""
    if analysis.covariance.kind == "cluster":
        return analysis.covariance
    return next((a.fallback for a in plan.assumptions
                 if a.analysis == analysis.id and a.fallback.kind == "cluster"), None)


def designs(plan: Plan) -> list[ClusterDesign]:
    """One design per cluster variable, in plan order (the first declared count holds)."""
    modelled = {a.outcome for a in plan.analyses} | {a.exposure for a in plan.analyses}
    found: dict[str, ClusterDesign] = {}
    for a in plan.analyses:
        covariance = analysis_cluster(plan, a)
        if covariance is None or covariance.cluster in modelled | {plan.data.row_id}:
            continue
        name = covariance.cluster
        was = found.get(name, ClusterDesign(name, None, ()))
        exposures = was.by_cluster + ((a.exposure,) if covariance.assigned != "within-cluster"
                                      and a.exposure not in was.by_cluster else ())
        found[name] = ClusterDesign(name, was.clusters or covariance.clusters, exposures)
    return list(found.values())


def apply(plan: Plan, layout, columns: dict[str, np.ndarray], seed: int) -> None:
    """Give each cluster variable its clusters and each by-cluster exposure one value per
    cluster, in the rows whose rules for that variable are the main block's."""
    assigned: set[str] = set()
    for design in designs(plan):
        variable = plan.variable(design.variable)
        rng = synthesize.stream(seed, synthesize.CLUSTERS, design.variable)
        rows = _rows_like_main(layout, design.variable)
        labels = _labels(variable, layout.allowed[0][design.variable], design.clusters,
                         len(rows))
        if not len(rows) or not len(labels):
            continue
        shares = rng.gamma(_SIZE_SHAPE, size=len(labels))
        sizes = _sizes(shares / shares.sum(), len(rows))
        member = rng.permutation(np.repeat(np.arange(len(labels)), sizes))
        columns[design.variable][rows] = labels[member]
        for exposure in design.by_cluster:
            if exposure in assigned:
                continue
            assigned.add(exposure)
            v = plan.variable(exposure)
            allowed = layout.allowed[0][exposure]
            listed = candidates(v, allowed)
            per_cluster = (synthesize.even_shares(np.asarray(listed, dtype=columns[exposure].dtype),
                                                  len(labels), rng)
                           if listed is not None else synthesize.draw(v, allowed, len(labels), rng))
            same = np.isin(rows, _rows_like_main(layout, exposure))
            columns[exposure][rows[same]] = per_cluster[member[same]]


def intercepts(plan: Plan, analysis: Analysis, columns: dict[str, np.ndarray], seed: int,
               mean_count: float) -> tuple[np.ndarray, float] | None:
    """The random cluster intercept per row (0 where the cluster is missing) and the icc, or
    None for an analysis that is not clustered."""
    covariance = analysis_cluster(plan, analysis)
    if covariance is None or covariance.cluster not in {d.variable for d in designs(plan)}:
        return None
    icc = DEFAULT_ICC if covariance.icc is None else covariance.icc
    if analysis.family == "gaussian":
        variance = icc  # of the noise variance, which the caller scales
    elif analysis.family == "binomial":
        variance = icc / (1 - icc) * math.pi ** 2 / 3
    else:
        variance = icc / (1 - icc) * math.log(1 + 1 / mean_count)
    codes = _codes(columns[covariance.cluster])
    groups = int(codes.max()) + 1 if len(codes) else 0
    rng = synthesize.stream(seed, synthesize.CLUSTERS, "intercept:" + analysis.id)
    effect = np.append(rng.normal(0.0, math.sqrt(variance), groups), 0.0)
    return effect[np.where(codes >= 0, codes, groups)], icc


def permutation(plan: Plan, table, exposure: str, seed: int) -> np.ndarray:
    """The row order that scrambles ``exposure``: all rows when no analysis is clustered;
    whole clusters when the exposure is constant within each cluster of a cluster variable;
    else rows within the clusters of the first cluster variable."""
    rng = np.random.default_rng(seed)
    names = list(dict.fromkeys(c.cluster for a in plan.analyses
                               if (c := analysis_cluster(plan, a)) is not None
                               and c.cluster in table.columns))
    if not names:
        return rng.permutation(table.rows_read)
    given = _table_codes(plan, table, exposure)
    coded = [(name, _table_codes(plan, table, name)) for name in names]
    for name, cluster in coded:
        known = cluster >= 0
        pairs = np.unique(np.stack([cluster[known], given[known]]), axis=1)
        if pairs.shape[1] == len(np.unique(cluster[known])):  # one exposure value per cluster
            units = cluster.copy()
            units[~known] = units.max(initial=-1) + 1 + np.arange(int((~known).sum()))
            first = np.full(int(units.max()) + 1, -1)
            first[units[::-1]] = np.arange(len(units))[::-1]  # each unit's first row
            present = np.flatnonzero(first >= 0)
            moved = np.empty_like(first)
            moved[present] = first[rng.permutation(present)]
            return moved[units]
    cluster = coded[0][1]
    draw = rng.random(table.rows_read)
    order = np.empty(table.rows_read, dtype=np.int64)
    order[np.argsort(cluster, kind="stable")] = np.lexsort((draw, cluster))
    return order


def _rows_like_main(layout, name: str) -> np.ndarray:
    """Rows whose block's rules for ``name`` are the main block's (not set apart by a rule)."""
    same = [b for b, allowed in enumerate(layout.allowed) if allowed[name] == layout.allowed[0][name]]
    return np.flatnonzero(np.isin(layout.block, same))


def _labels(variable, allowed, declared: int | None, rows: int) -> np.ndarray:
    wanted = max(1, min(declared or DEFAULT_CLUSTERS, rows // 2))
    listed = candidates(variable, allowed)
    if variable.kind == "categorical" or listed is not None:
        values = list(listed or ())
        count = len(values) if declared is None and variable.kind == "categorical" else wanted
        return np.asarray(values[:min(count, max(1, rows // 2))],
                          dtype=object if variable.kind == "categorical" else np.float64)
    if variable.kind == "count":
        low, _ = integer_bounds(allowed)
        values = [k for k in range(low, low + wanted + len(allowed.excluded))
                  if float(k) not in allowed.excluded]
        return np.asarray(values[:wanted], dtype=np.float64)
    width = max(3, len(str(wanted + len(allowed.excluded))))
    values = [f"C{k:0{width}d}" for k in range(1, wanted + len(allowed.excluded) + 1)]
    return np.asarray([v for v in values if v not in allowed.excluded][:wanted], dtype=object)


def _sizes(shares: np.ndarray, rows: int) -> np.ndarray:
    """Cluster sizes in proportion to ``shares``, each at least 1, summing to ``rows``."""
    extra = rows - len(shares)
    sizes = 1 + np.floor(shares * extra).astype(np.int64)
    short = rows - int(sizes.sum())
    sizes[np.argsort(-(shares * extra - np.floor(shares * extra)), kind="stable")[:short]] += 1
    return sizes


def _codes(values: np.ndarray) -> np.ndarray:
    """Integer codes of a column's values, −1 where missing."""
    if values.dtype == object:
        missing = np.equal(values, None)
        text = np.where(missing, "", values).astype(str)
    else:
        missing = np.isnan(values)
        text = np.where(missing, 0.0, values)
    _, codes = np.unique(text, return_inverse=True)
    return np.where(missing, -1, codes.reshape(-1))


def _table_codes(plan: Plan, table, name: str) -> np.ndarray:
    if plan.variable(name).is_numeric:
        return _codes(np.asarray(table.columns[name], dtype=np.float64))
    return np.asarray(table.categories(name)[0], dtype=np.int64)
