"""The fits as results.json stores them, so that every verdict can be re-derived from the
document alone, by the decide pass itself, without refitting.

``decide`` reads of a fit only what results.json keeps: each tier's columns, the exposure
under each covariance (covariance, columns, df, the test of all its columns), dispersion, parameter count and
reason; the nested comparisons; the report tier's Breusch–Pagan test; n and the event
count. :func:`fits_of` rebuilds those as the frozen values decide takes (the rest of a fit,
its residuals and design, is not needed and not stored). :func:`settled` gives the decisions
and assumption outcomes of a document, as records, re-derived from its own numbers: the
run writes those (bundle.results_document), and verify re-derives them again to compare, so
both go through the same code on the same numbers.
"""

from __future__ import annotations

from .fitted import (AnalysisFit, Coefficient, Comparison, Diagnostics, ExposureInference,
                     JointTest, TierFit)
from .results import METHODS, assumption_records, decision_records


_METHOD = {words: code for code, words in METHODS.items()}  # the document's words read back


def _coefficient(c: dict) -> Coefficient:
    interval = c["interval"]
    return Coefficient(column=c["column"], estimate=c["estimate"],
                       standard_error=c["standard_error"], test_value=c["test_value"],
                       p_two_sided=c["p_two_sided"], low=interval["low"], high=interval["high"],
                       reason=c["reason"])


def _joint(j: dict | None) -> JointTest | None:
    if j is None:
        return None
    return JointTest(method=_METHOD[j["method"]], df_added=j["df_added"],
                     df_denominator=j["df_denominator"], test_value=j["test_value"], p=j["p"],
                     reason=j["reason"])


def _inference(e: dict) -> ExposureInference:
    return ExposureInference(covariance=e["covariance"],
                             columns=tuple(_coefficient(c) for c in e["columns"]),
                             df=e["df"], joint=_joint(e["all_columns"]))


def _tier(t: dict, n: int) -> TierFit:
    return TierFit(name=t["name"], terms_added=tuple(t["terms_added"]), n=n,
                   n_parameters=t["n_parameters"], residual_df=t["residual_df"],
                   log_likelihood=t["log_likelihood"], aic=t["aic"], bic=t["bic"],
                   columns=tuple(_coefficient(c) for c in t["columns"]),
                   exposure=tuple(_inference(e) for e in t["exposure_by_covariance"]),
                   rss=t["rss"], sigma2=t["sigma2"], r_squared=t["r_squared"],
                   adjusted_r_squared=t["adjusted_r_squared"], deviance=t["deviance"],
                   null_deviance=t["null_deviance"], pearson_x2=t["pearson_x2"],
                   dispersion=t["dispersion"], converged=t["converged"],
                   iterations=t["iterations"], reason=t["reason"],
                   warnings=tuple(t["warnings"]))


def _comparison(c: dict) -> Comparison:
    return Comparison(from_tier=c["from"], to_tier=c["to"], method=_METHOD[c["method"]],
                      df_added=c["df_added"], test_value=c["test_value"], p=c["p"],
                      df_denominator=c["df_denominator"], reason=c["reason"])


def _diagnostics(d: dict | None) -> Diagnostics | None:
    if d is None:
        return None
    return Diagnostics(tier=d["tier"], vif=tuple((v["column"], v["vif"]) for v in d["vif"]),
                       normality_test=d["normality"]["method"],
                       normality_statistic=d["normality"]["test_value"],
                       normality_p=d["normality"]["p"],
                       breusch_pagan_statistic=d["breusch_pagan"]["test_value"],
                       breusch_pagan_p=d["breusch_pagan"]["p"], influential=(),
                       fitted=None, residuals=None, reason=d["reason"])


def fits_of(document: dict) -> tuple[AnalysisFit, ...]:
    """Each analysis' fit as the results document stores it, in the document's order."""
    return tuple(
        AnalysisFit(analysis=a["id"], family=a["family"], n=a["n"],
                    tiers=tuple(_tier(t, a["n"]) for t in a["tiers"]),
                    comparisons=tuple(_comparison(c) for c in a["comparisons"]),
                    exposure=(), diagnostics=_diagnostics(a["diagnostics"]),
                    events=a["events"], warnings=tuple(a["warnings"]))
        for a in document["analyses"])


def mismatch(plan, document: dict) -> str | None:
    """Why the document's analyses cannot be the plan's fits (None when they can be): the
    analyses in plan order, each with the plan's tiers in order."""
    stored = [(a["id"], [t["name"] for t in a["tiers"]]) for a in document["analyses"]]
    planned = [(a.id, [t.name for t in a.tiers]) for a in plan.analyses]
    if [i for i, _ in stored] != [i for i, _ in planned]:
        return (f"its analyses are {[i for i, _ in stored]}, the plan's "
                f"{[i for i, _ in planned]}")
    for (analysis, tiers), (_, want) in zip(stored, planned):
        if tiers != want:
            return f"analysis {analysis} has tiers {tiers}, the plan's are {want}"
    return None


def settled(plan, document: dict) -> tuple[list[dict], list[dict]]:
    """The decisions and assumption outcomes, as results.json records, that the decide pass
    gives on the document's stored numbers (check :func:`mismatch` first)."""
    from .decide import decide

    verdicts, outcomes = decide(plan, fits_of(document))
    return decision_records(verdicts), assumption_records(outcomes)
