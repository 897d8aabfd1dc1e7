"""The fit pass: every tier of one analysis, the nested comparisons, the exposure across tiers
and the report tier's diagnostics.

Before any model is fitted the design is checked once: every tier needs more rows than
parameters, and no design column may be aliased (a linear combination of the columns before
it), found by the R factor of one Householder QR (compiler/qr.py states the tolerance).
Both stop the run with exit 3, naming the analysis, the tier and the culprit.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from .change import change_between
from .columns import INTERCEPT
from .covariance import distinct_covariances, reference_of
from .fitted import AnalysisFit, Design, ExposureRow, TierFit
from .inference import natural_scale
from .plan import Analysis, Plan
from .problems import Exit, Problem, Stop
from . import equilibrate
from .qr import aliased_columns, equilibrated_r, rank_tolerance

_NAMED = 4  # columns named in an aliasing message


def fit(plan: Plan, analysis: Analysis, design: Design) -> AnalysisFit:
    """Fit every tier of ``analysis`` on ``design``; raises Stop (exit 3) when a tier cannot
    be estimated at all (too few rows, a constant outcome, aliased columns). Columns of
    extreme magnitude are equilibrated first (compiler/equilibrate.py), and no floating-point
    warning leaves the numerics: what they flag becomes None with a reason."""
    with np.errstate(all="ignore"):
        _check_sizes(analysis, design)
        # for gaussian: the whole fit; for GLM: rank and VIF
        r, scales = equilibrated_r(design.x, design.y)
        gaussian = analysis.family == "gaussian"
        if equilibrate.needed(scales):
            design = equilibrate.scaled(design, scales, gaussian)
        _check_outcome(analysis, design, r, scales)
        _check_rank(plan, analysis, design, r)
        return mapped_back(_fit(plan, analysis, design, r), scales, gaussian, analysis.confidence)


def mapped_back(result: AnalysisFit, scales: np.ndarray, gaussian: bool,
                level: float) -> AnalysisFit:
    """A fit of the equilibrated design on the data's own scales; as it is when none was
    needed."""
    if not equilibrate.needed(scales):
        return result
    result = equilibrate.unscaled(result, scales, gaussian)
    return replace(result, exposure=exposure_across_tiers(result.tiers, result.family, level))


def _fit(plan: Plan, analysis: Analysis, design: Design, r: np.ndarray) -> AnalysisFit:
    covariances = distinct_covariances(plan, analysis)
    report = list(design.tier_names).index(analysis.report_tier)
    events = None
    if analysis.family == "gaussian":
        from .diagnostics import gaussian_diagnostics
        from .fit_gaussian import fit_gaussian

        fitted = fit_gaussian(analysis, design, r, covariances)
        t = fitted.numbers[report]
        diagnostics = gaussian_diagnostics(design, analysis.report_tier, r, t.width, t.beta,
                                           t.sigma2)
    else:
        from .diagnostics import glm_diagnostics
        from .fit_glm import events as count_events, fit_glm

        fitted = fit_glm(analysis, design, covariances)
        t = fitted.numbers[report]
        diagnostics = glm_diagnostics(design, analysis.family, analysis.report_tier, r,
                                      t.width, t.mu, t.weights, t.rinv, t.failure)
        if analysis.family == "binomial":
            events = count_events(design)
    warnings = tuple(w for tier in fitted.tiers for w in tier.warnings)
    return AnalysisFit(
        analysis=analysis.id, family=analysis.family, n=int(design.x.shape[0]),
        tiers=fitted.tiers, comparisons=fitted.comparisons,
        exposure=exposure_across_tiers(fitted.tiers, analysis.family, analysis.confidence),
        diagnostics=diagnostics, events=events, warnings=warnings,
        reference=reference_of(analysis.covariance, analysis.family, fitted.tiers))


def exposure_across_tiers(tiers: tuple[TierFit, ...], family: str,
                          level: float) -> tuple[ExposureRow, ...]:
    """Per tier and exposure column, the estimate under the analysis covariance, on the
    natural scale too, and its change from the first tier (compiler.change)."""
    first = tiers[0].exposure[0].columns
    rows = []
    for tier in tiers:
        for j, c in enumerate(tier.exposure[0].columns):
            reasons = [c.reason] if c.reason else []
            change = None
            base = first[j].estimate
            if c.estimate is not None and base is not None and base != 0.0:
                change = change_between(base, c.estimate)
            elif base == 0.0:
                reasons.append("the first tier's estimate is 0: no relative change")
            elif base is None:
                reasons.append("the first tier's estimate could not be computed")
            rows.append(ExposureRow(
                tier=tier.name, column=c.column, estimate=c.estimate,
                standard_error=c.standard_error, low=c.low, high=c.high, level=level,
                natural=natural_scale(family, c.estimate, c.low, c.high), change_vs_first=change,
                reason="; ".join(dict.fromkeys(reasons)) or None))
    return tuple(rows)


def _check_sizes(analysis: Analysis, design: Design) -> None:
    n = design.x.shape[0]
    problems = [
        Problem(f"analysis {analysis.id}, tier {name}: {n} analysed rows for {width} "
                f"parameters; a fit needs more rows than parameters",
                column=analysis.outcome, code="too-few-rows",
                hint="check the population and the missing values in the sample flow, or "
                     "pre-specify fewer terms", details={"n": n, "parameters": width})
        for name, width in zip(design.tier_names, design.tier_width) if n <= width]
    if problems:
        raise Stop(problems, Exit.DATA_CONTRACT)


def _check_outcome(analysis: Analysis, design: Design, r: np.ndarray,
                   scales: np.ndarray | None = None) -> None:
    """Stop (exit 3) when the outcome takes one value in every analysed row: no tier can be
    estimated, and what a fit would print is rounding noise (a gaussian "change in
    estimate" of 1e14 %, a GLM at the boundary of its parameter space). Read from R of
    [X | y]: with the intercept as X's first column, the squares in y's column of R below
    the first row add up to ‖y − ȳ‖², judged against ‖y‖ with the rank test's tolerance."""
    n, p = design.x.shape
    if not design.labels or design.labels[0] != INTERCEPT:
        return
    y_column = r[: p + 1, p]
    spread = float(np.sqrt(np.sum(y_column[1:] ** 2)))
    if spread > rank_tolerance(n, p) * float(np.sqrt(np.sum(y_column ** 2))):
        return
    value = float(r[0, p] / r[0, 0]) + 0.0  # + 0.0: no "-0"
    if scales is not None:  # the equilibrated outcome over the equilibrated intercept
        value *= float(scales[p] / scales[0])
    raise Stop([Problem(
        f"analysis {analysis.id}: the outcome takes the one value {value:.6g} in all {n} "
        "analysed rows, so there is nothing to model in any tier", column=analysis.outcome,
        code="constant-outcome", details={"value": value, "n": n},
        hint="check the outcome's coding, the missing-value markers and the population")],
        Exit.DATA_CONTRACT)


def _check_rank(plan: Plan, analysis: Analysis, design: Design, r: np.ndarray) -> None:
    n, p = design.x.shape
    aliased = aliased_columns(r[:p, :p], n)
    if not aliased:
        return
    from .design import tier_terms

    terms = {t.label: t for added in tier_terms(analysis) for t in added}
    problems = []
    for j in aliased:
        tier = next(k for k, w in enumerate(design.tier_width) if w > j)
        term = design.column_term[j]
        variable = terms[term].variables[0] if term in terms else analysis.outcome
        problems.append(Problem(
            f"analysis {analysis.id}, tier {design.tier_names[tier]}: design column "
            f"`{design.labels[j]}` (term {term}) {_combination(design, r, j, aliased)} in the "
            f"{n} analysed rows, so its coefficient cannot be estimated (aliased), in this "
            f"tier and every later one",
            column=variable, code="aliased-column",
            hint="drop or merge the term in the plan; aliasing is judged by an unpivoted "
                 f"Householder QR: |R_jj| ≤ max(n, p)·ε·‖x_j‖ = {rank_tolerance(n, p):.2g}·‖x_j‖",
            details={"tier": design.tier_names[tier], "column": design.labels[j]}))
    raise Stop(problems, Exit.DATA_CONTRACT)


def _combination(design: Design, r: np.ndarray, j: int, aliased: list[int]) -> str:
    """How column j depends on the columns before it, in words, from the R factor alone.

    X = QR with Q orthonormal, so ‖x_i‖ = ‖R[:, i]‖ and the least squares of x_j on earlier
    columns is that of R[:, j] on their columns of R: a (p + 1)-row problem, the same for a
    streamed run (which never holds X) and an in-memory one."""
    p = design.x.shape[1]
    r = r[:p, :p]
    column = r[: j + 1, j]
    if not np.any(column):
        return "is zero in every row (e.g. a level that never occurs)"
    earlier = [i for i in range(j) if i not in aliased]
    basis = r[: j + 1, earlier]
    coef, *_ = np.linalg.lstsq(basis, column, rcond=None)
    weight = np.abs(coef) * np.linalg.norm(basis, axis=0)
    order = [earlier[i] for i in np.argsort(-weight) if weight[i] > 1e-8 * weight.max()]
    named = ", ".join(f"`{design.labels[i]}`" for i in order[:_NAMED])
    more = f" and {len(order) - _NAMED} more" if len(order) > _NAMED else ""
    return f"is a linear combination of {named}{more}"
