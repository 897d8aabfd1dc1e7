"""Build the results document (``prespec-results/1``; schemas/results.schema.json).

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

FORMAT = "prespec-results/1"
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


_COEFFICIENT = ("estimate", "std_error", "statistic", "p_value", "ci_low", "ci_high")


def _coefficient(c) -> dict:
    return _record(c, _COEFFICIENT, term=c.term)


def _joint(j) -> dict | None:
    if j is None:
        return None
    return _record(j, ("df_denominator", "statistic", "p_value"), test=j.test, df=int(j.df),
                   reference=_joint_reference(j.df_denominator))


def _joint_reference(df_denominator) -> str:
    """A joint test's reference: F with a denominator df (gaussian), else χ² (GLM)."""
    return "chi2" if df_denominator is None else "F"


def _inference(e) -> dict:
    return {"covariance": e.covariance, "df": number(e.df),
            "reference": "z" if e.df is None else "t",
            "coefficients": [_coefficient(c) for c in e.coefficients], "joint": _joint(e.joint)}


_TIER = ("log_likelihood", "aic", "bic", "rss", "sigma2", "r_squared", "adj_r_squared",
         "deviance", "null_deviance", "pearson_chi2", "dispersion")


def _tier(t) -> dict:
    return _record(t, _TIER, name=t.name, terms_added=list(t.terms_added),
                   n_parameters=int(t.n_parameters), df_resid=int(t.df_resid),
                   converged=bool(t.converged),
                   iterations=None if t.iterations is None else int(t.iterations),
                   warnings=list(t.warnings),
                   coefficients=[_coefficient(c) for c in t.coefficients],
                   exposure_inference=[_inference(e) for e in t.exposure])


def _comparison(c) -> dict:
    out = _record(c, ("statistic", "p_value", "df_denominator"), to=c.to_tier, test=c.test,
                  df_added=int(c.df_added), reference=_joint_reference(c.df_denominator))
    out["from"] = c.from_tier
    return out


_EXPOSURE = ("estimate", "std_error", "ci_low", "ci_high", "change_from_first", "ratio",
             "ratio_ci_low", "ratio_ci_high")


def _exposure(r) -> dict:
    return _record(r, _EXPOSURE, tier=r.tier, term=r.term)


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
            "vif": [{"term": term, "vif": number(v)} for term, v in d.vif],
            "normality": {"test": d.normality_test, "statistic": number(d.normality_statistic),
                          "p_value": number(d.normality_p)},
            "breusch_pagan": {"statistic": number(d.breusch_pagan_statistic),
                              "p_value": number(d.breusch_pagan_p)},
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
        **fit_parts(fit),
    }


def fit_parts(fit) -> dict:
    """An analysis' fit as the document stores it (what stored_fits.fits_of reads back)."""
    return {"n": int(fit.n), "events": None if fit.events is None else int(fit.events),
            "tiers": [_tier(t) for t in fit.tiers],
            "comparisons": [_comparison(c) for c in fit.comparisons],
            "exposure": [_exposure(r) for r in fit.exposure],
            "diagnostics": _diagnostics(fit.diagnostics), "warnings": list(fit.warnings),
            "reference": _reference(fit.reference)}


def _reference(r) -> dict | None:
    if r is None:
        return None
    return {"distribution": r.distribution, "df": number(r.df), "label": r.label,
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
            "statistic": number(o.statistic), "p_value": number(o.p_value),
            "triggered": bool(o.triggered), "covariance": o.covariance, "reason": o.reason,
            "determined": bool(o.determined), "tier": o.tier}
