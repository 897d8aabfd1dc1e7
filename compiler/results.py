"""Build the results document (``prespec-results/2``; schemas/results.schema.json).

Its names are our own or the trade's (shared/design.md, "Results document"): a tier's
``columns`` each with ``estimate``, ``standard_error``, ``test`` (the distribution the
``test_value`` is referred to: t, z, F, chi2), ``p_two_sided`` and ``interval: {low, high,
level}``; comparisons and joint tests with ``df_added``, ``test_value`` and ``p``; the
exposure across tiers with its ``natural`` scale and ``change_vs_first``.

The document is plain JSON data made from the passes' frozen values, nothing recomputed.
A number that is not finite never reaches it: it becomes null, and the record it stands in
gets a ``reason`` (the fit's own reason when it gave one). :func:`to_bytes` writes the
canonical bytes (compiler.canonical), which refuse NaN and Infinity as a last guard.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Callable

from .canonical import canonical_bytes
from .words import METHOD_WORDS, test_of

FORMAT = "prespec-results/2"
NOT_FINITE = "a value was not finite and is reported as null"
LINKS = {"gaussian": "identity", "binomial": "logit", "poisson": "log"}


def to_bytes(document: dict) -> bytes:
    return canonical_bytes(document)


def build(analysed, *, stamp, plan_file_sha256: str, lock=None, environment: dict,
          rehearsal_settings: dict | None = None,
          summarise: Callable | None = None) -> dict:
    """The results document of one run.

    ``analysed`` is a pipeline.Analysed, ``stamp`` a pipeline.Stamp, ``lock`` a
    lock.LockState (None when the run was not pre-registered). ``summarise(plan, analysis,
    bound)`` gives the sample characteristics; by default they are the ones ``analysed``
    carries (the pipeline computes them beside the fits), else compiler.characteristics'.
    """
    if summarise is None and analysed.characteristics is not None:
        def summarise(plan, analysis, bound, found=analysed.characteristics):
            return found[analysis.id]
    if summarise is None:
        from .characteristics import summarise
    plan, bound = analysed.plan, analysed.bound
    table = bound.table
    return {
        "format": FORMAT,
        "preregistered": bool(stamp.preregistered and not stamp.rehearsal),
        "rehearsal": bool(stamp.rehearsal),
        "rehearsal_note": stamp.note if stamp.rehearsal else None,
        "rehearsal_settings": json_ready(rehearsal_settings) if stamp.rehearsal else None,
        "plan": plan_header(plan, plan_file_sha256),
        "data": {"sha256": table.sha256, "rows_read": int(table.rows_read),
                 "file": Path(table.path).name if table.path else None,
                 "format": table.format, "size_bytes": int(table.size_bytes),
                 "unused_columns": list(table.unused_columns)},
        "environment": dict(environment),
        "contract": [_finding(p) for p in bound.findings],
        "analyses": [_analysis(plan, a, bound, fit, summarise)
                     for a, fit in zip(plan.analyses, analysed.fits)],
        "decisions": decision_records(analysed.verdicts),
        "assumptions": assumption_records(analysed.assumptions),
        "amendments": lock.amendments if lock is not None else [],
        "lock": None if lock is None else lock_record(lock, plan_file_sha256),
    }


def lock_record(lock, plan_file_sha256: str) -> dict:
    """The lock the run matched. The run matched its canonical digest, so a plan file whose
    bytes are not the ones frozen differs in comments or layout only."""
    frozen = lock.frozen_file_sha256
    return {"sha256": lock.sha256, "frozen_at": lock.frozen_at, "amended_at": lock.amended_at,
            "file_sha256": frozen,
            "plan_text": None if frozen is None else (
                "as frozen" if frozen == plan_file_sha256 else "comments or layout differ")}


# ---------------------------------------------------------------------------------------------
# Numbers


def number(value):
    """A finite float or int as plain Python, anything not finite as None."""
    if value is None:
        return None
    if hasattr(value, "item"):  # a numpy scalar
        value = value.item()
    if isinstance(value, bool):
        raise TypeError("a bool where a number belongs")
    if isinstance(value, int):
        return value
    value = float(value)
    return value if math.isfinite(value) else None


def json_ready(value):
    """Any value the passes hand over as plain JSON data; non-finite numbers become None."""
    if hasattr(value, "item") and getattr(value, "ndim", 1) == 0:  # a numpy scalar
        value = value.item()
    if value is None or isinstance(value, (bool, str)):
        return value
    if isinstance(value, (int, float)):
        return number(value)
    if isinstance(value, dict):
        return {str(k): json_ready(v) for k, v in value.items()}
    if hasattr(value, "tolist"):  # a numpy array
        return json_ready(value.tolist())
    if isinstance(value, (list, tuple)):
        return [json_ready(v) for v in value]
    return str(value)


def _record(source, names: tuple[str, ...], **extra) -> dict:
    """The named numeric fields of ``source`` made finite, with a reason if any was not."""
    out, lost = {}, False
    for name in names:
        raw = getattr(source, name)
        out[name] = number(raw)
        lost |= raw is not None and out[name] is None
    out.update(extra)
    reason = getattr(source, "reason", None)
    out["reason"] = reason if reason or not lost else NOT_FINITE
    return out


# ---------------------------------------------------------------------------------------------
# Parts


def _finding(problem) -> dict:
    return {"severity": problem.severity, "column": problem.column, "message": problem.message,
            "code": problem.code, "details": json_ready(problem.details or {})}


METHODS = METHOD_WORDS


def _interval(low, high, level) -> dict:
    return {"low": number(low), "high": number(high), "level": number(level)}


def _column(c, test: str, level: float) -> dict:
    """One design column: its estimate, test against 0 and interval (``c`` a Coefficient)."""
    out = _record(c, ("estimate", "standard_error", "test_value", "p_two_sided"),
                  column=c.column, test=test)
    lost = out["reason"] is None and any(
        v is not None and number(v) is None for v in (c.low, c.high))
    out["interval"] = _interval(c.low, c.high, level)
    if lost:
        out["reason"] = NOT_FINITE
    return out


def _joint(j) -> dict | None:
    if j is None:
        return None
    return _record(j, ("df_denominator", "test_value", "p"),
                   test=test_of(j.df_denominator, several=True), method=METHODS[j.method],
                   df_added=int(j.df_added))


def _inference(e, level: float) -> dict:
    test = test_of(e.df)
    return {"covariance": e.covariance, "df": number(e.df), "test": test,
            "columns": [_column(c, test, level) for c in e.columns],
            "all_columns": _joint(e.joint)}


_TIER = ("log_likelihood", "aic", "bic", "rss", "sigma2", "r_squared", "adjusted_r_squared",
         "deviance", "null_deviance", "pearson_x2", "dispersion")


def _tier(t, level: float) -> dict:
    """A tier; its columns under the analysis covariance (the first exposure inference)."""
    own = t.exposure[0] if t.exposure else None
    test = test_of(own.df) if own is not None else "t"
    return _record(t, _TIER, name=t.name, terms_added=list(t.terms_added),
                   n_parameters=int(t.n_parameters), residual_df=int(t.residual_df),
                   converged=bool(t.converged),
                   iterations=None if t.iterations is None else int(t.iterations),
                   warnings=list(t.warnings),
                   columns=[_column(c, test, level) for c in t.columns],
                   exposure_by_covariance=[_inference(e, level) for e in t.exposure])


def _comparison(c) -> dict:
    out = _record(c, ("test_value", "p", "df_denominator"), to=c.to_tier,
                  test=test_of(c.df_denominator, several=True), method=METHODS[c.method],
                  df_added=int(c.df_added))
    out["from"] = c.from_tier
    return out


def _exposure(r) -> dict:
    out = _record(r, ("estimate", "standard_error"), tier=r.tier, column=r.column)
    out["interval"] = _interval(r.low, r.high, r.level)
    natural = r.natural
    out["natural"] = {"scale": natural.scale, "estimate": number(natural.estimate),
                      "low": number(natural.low), "high": number(natural.high)}
    change = r.change_vs_first
    out["change_vs_first"] = None if change is None else {
        "relative": number(change.relative), "direction": change.direction}
    return out


def _diagnostics(d) -> dict | None:
    if d is None:
        return None
    values = (d.normality_statistic, d.normality_p, d.breusch_pagan_statistic,
              d.breusch_pagan_p) + tuple(v for _, v in d.vif)
    lost = any(v is not None and number(v) is None for v in values)
    influential = [{"row_id": str(i.row_id), "cooks_distance": number(i.cooks_distance)}
                   for i in d.influential]
    lost |= any(i["cooks_distance"] is None for i in influential)
    return {"tier": d.tier,
            "vif": [{"column": column, "vif": number(v)} for column, v in d.vif],
            "normality": {"method": d.normality_test,
                          "test_value": number(d.normality_statistic),
                          "p": number(d.normality_p)},
            "breusch_pagan": {"test": "chi2", "test_value": number(d.breusch_pagan_statistic),
                              "p": number(d.breusch_pagan_p)},
            "influential": [i for i in influential if i["cooks_distance"] is not None],
            "reason": d.reason or (NOT_FINITE if lost else None)}


def _step(s) -> dict:
    return {"reason": s.reason, "variable": s.variable, "excluded": int(s.excluded)}


def plan_header(plan, plan_file_sha256: str) -> dict:
    """The document's ``plan`` part: all of it follows from the plan and its file's digest."""
    from .canonical import plan_digest

    return {"id": plan.study.id, "title": plan.study.title, "version": plan.study.version,
            "sha256": plan_digest(plan), "file_sha256": plan_file_sha256,
            "language": plan.language}


def analysis_header(plan, analysis) -> dict:
    """The fields of an analysis' results that follow from the plan alone."""
    outcome, exposure = plan.variable(analysis.outcome), plan.variable(analysis.exposure)
    return {"id": analysis.id, "family": analysis.family, "link": LINKS[analysis.family],
            "outcome": analysis.outcome, "exposure_variable": analysis.exposure,
            "outcome_label": outcome.label, "outcome_unit": outcome.unit,
            "exposure_label": exposure.label,
            "offset": analysis.offset, "population": analysis.population,
            "covariance": analysis.covariance.label, "confidence": number(analysis.confidence),
            "report_tier": analysis.report_tier}


def _analysis(plan, analysis, bound, fit, summarise) -> dict:
    sample = bound.sample(analysis.id)
    flow = sample.flow
    return {
        **analysis_header(plan, analysis), "rows_in_population": int(flow.rows_in_population),
        "flow": {"rows_read": int(flow.rows_read),
                 "by_condition": [_step(s) for s in flow.by_condition],
                 "rows_in_population": int(flow.rows_in_population),
                 "by_missing": [_step(s) for s in flow.by_missing], "n": int(flow.n)},
        "characteristics": json_ready(summarise(plan, analysis, bound)),
        **fit_parts(fit, analysis.confidence),
    }


def fit_parts(fit, level: float) -> dict:
    """An analysis' fit as the document stores it (what stored_fits.fits_of reads back);
    ``level`` is the analysis' confidence, the level of every interval."""
    return {"n": int(fit.n), "events": None if fit.events is None else int(fit.events),
            "tiers": [_tier(t, level) for t in fit.tiers],
            "comparisons": [_comparison(c) for c in fit.comparisons],
            "exposure": [_exposure(r) for r in fit.exposure],
            "diagnostics": _diagnostics(fit.diagnostics), "warnings": list(fit.warnings),
            "reference": _reference(fit.reference)}


def _reference(r) -> dict | None:
    if r is None:
        return None
    return {"test": r.distribution, "df": number(r.df), "label": r.label,
            "basis": r.basis}


def decision_records(verdicts) -> list[dict]:
    return [_verdict(v) for v in verdicts]


def assumption_records(outcomes) -> list[dict]:
    return [_assumption(o) for o in outcomes]


def _verdict(v) -> dict:
    return {"id": v.id, "analysis": v.analysis, "test": v.test, "tier": v.tier,
            "verdict": v.verdict, "reason": v.reason, "covariance": v.covariance,
            "branch": v.branch, "multiplicity": v.multiplicity,
            "numbers": json_ready(dict(v.numbers)),
            "inference": json_ready(v.inference), "cautions": list(v.cautions)}


def _assumption(o) -> dict:
    return {"id": o.id, "analysis": o.analysis, "check": o.check,
            "test_value": number(o.test_value), "p": number(o.p),
            "triggered": bool(o.triggered), "covariance": o.covariance, "reason": o.reason,
            "determined": bool(o.determined), "tier": o.tier}
