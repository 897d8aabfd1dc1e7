"""The decide pass: every pre-specified rule evaluated on the fits, each verdict explained.

Order of work, for each decision:
  1. assumption checks choose the covariance (the analysis' own, or a pre-specified
     fallback) and say why;
  2. minimum-information rules may make the verdict undetermined;
  3. the rule itself is evaluated (compiler.rules);
  4. multiplicity families replace a member's own verdict by the procedure's.
A member that is undetermined for any reason takes part in its family as not rejected.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

from .fitted import AnalysisFit, ExposureInference
from .multiplicity import Adjusted, adjust
from .plan import Analysis, Assumption, Decision, Multiplicity, Plan
from .rules import Finding, base_numbers, change_in_estimate, effect_summary, equivalence
from .rules import levels_summary, non_inferiority, superiority, tier_selection
from .inference import finite_or_none
from .rules_text import METHOD_NAME, alpha_origin, exposure_term, fmt_alpha, fmt_num
from .rules_text import fmt_p_phrase, level_basis, one_sided_caution
from .verdicts import AssumptionOutcome, Verdict
from .words import NATURAL_SCALE

INFERENCE_RULES = {"superiority": superiority, "non-inferiority": non_inferiority,
                   "equivalence": equivalence}


@dataclass(frozen=True)
class _Branch:
    covariance: str | None  # None: the analysis' own
    text: str | None
    blocked: str | None  # why the decision cannot be decided


def decide(plan: Plan, fits: tuple[AnalysisFit, ...]
           ) -> tuple[tuple[Verdict, ...], tuple[AssumptionOutcome, ...]]:
    """Verdicts in plan.decisions order and assumption outcomes in plan.assumptions order."""
    fit_of = {a.id: f for a, f in zip(plan.analyses, fits)}
    outcomes = tuple(check_assumption(plan, a, fit_of[a.analysis]) for a in plan.assumptions)
    alpha_of = {d.id: d.alpha for d in plan.decisions}
    for family in plan.multiplicity:  # members take the family α
        alpha_of.update(dict.fromkeys(family.decisions, family.alpha))
    first = {d.id: _evaluate(plan, d, fit_of[d.analysis], alpha_of[d.id])
             for d in plan.decisions}
    steps: dict[str, tuple[Multiplicity, Adjusted, tuple[Adjusted, ...]]] = {}
    for family in plan.multiplicity:
        p_values = [first[i][0].p if first[i][0].verdict != "undetermined" else None
                    for i in family.decisions]
        adjusted = adjust(family.method, p_values, family.alpha)
        for decision_id, step in zip(family.decisions, adjusted):
            steps[decision_id] = (family, step, adjusted)
    verdicts = []
    for d in plan.decisions:
        finding, branch = first[d.id]
        fit = fit_of[d.analysis]
        if d.id in steps:
            family, step, adjusted = steps[d.id]
            held = step.alpha_used if step.alpha_used is not None else family.alpha
            if held != alpha_of[d.id]:  # intervals at the level the decision was held to
                finding, branch = _evaluate(plan, d, fit, held)
            origin = alpha_origin(plan, d, held, step.rank, step.tested)
            decided = _decided(plan, d, finding, branch, fit, held, origin)
            tail = _effect_tail(plan, d, finding, fit, branch, held)
            verdicts.append(_family_verdict(plan, d, finding, branch, family, step, adjusted,
                                            decided, tail))
        else:
            origin = alpha_origin(plan, d, alpha_of[d.id], None)
            decided = _decided(plan, d, finding, branch, fit, alpha_of[d.id], origin)
            verdicts.append(_verdict(plan, d, finding, branch, inference=decided))
    return tuple(verdicts), outcomes


# ---- the inference that decided ---------------------------------------------------------

def _decided(plan: Plan, decision: Decision, finding: Finding, branch: _Branch,
             fit: AnalysisFit, alpha: float, origin: str) -> dict | None:
    """The covariance, level and interval a rule on an estimate decided on, each with why;
    None for rules that read no interval (tier selection, change in estimate)."""
    basis = level_basis(decision)
    if basis is None:
        return None
    analysis = plan.analysis(decision.analysis)
    numbers = finding.numbers
    term = exposure_term(plan, decision)
    covariance = numbers.get("covariance") or branch.covariance or analysis.covariance.label
    own = analysis.covariance.label
    covariance_why = branch.text or "the analysis' own covariance"
    if covariance == own and branch.text:
        covariance_why = f"the analysis' own covariance, kept: {branch.text}"
    interval = numbers.get("interval") or {}
    level = interval.get("level")
    formula, why = basis
    out = {"column": term, "tier": decision.tier, "covariance": covariance,
           "covariance_why": covariance_why, "estimate": numbers.get("estimate"),
           "standard_error": numbers.get("standard_error"), "df": numbers.get("df"),
           "interval": {"low": interval.get("low"), "high": interval.get("high"),
                        "level": level},
           "level_why": f"{formula} with {origin}: {why}", "natural": None, "reason": None}
    if term is None:
        out.update(interval=None, level_why=None,
                   reason=(f"a joint test of the levels of {analysis.exposure} "
                           "has no single estimate or interval"))
        return out
    out["natural"] = numbers.get("natural") or {
        "scale": NATURAL_SCALE[analysis.family], "estimate": None, "low": None, "high": None}
    if out["interval"]["low"] is None or out["interval"]["high"] is None:
        out["reason"] = finding.reason if finding.verdict == "undetermined" else (
            "the interval could not be computed")
    return out


def _effect_tail(plan: Plan, decision: Decision, finding: Finding, fit: AnalysisFit,
                 branch: _Branch, alpha: float) -> str:
    """The estimate and interval a family member's verdict line carries."""
    analysis = plan.analysis(decision.analysis)
    term = exposure_term(plan, decision)
    numbers = finding.numbers
    if term is None:
        inference = _inference(fit, decision.tier, branch.covariance)
        return "" if inference is None else levels_summary(analysis, inference, alpha)
    if numbers.get("interval") is None or numbers.get("estimate") is None:
        return ""
    return f"; {effect_summary(analysis, term, numbers)}"


# ---- assumption checks ------------------------------------------------------------------

def check_assumption(plan: Plan, assumption: Assumption, fit: AnalysisFit) -> AssumptionOutcome:
    analysis = plan.analysis(assumption.analysis)
    own, named = analysis.covariance.label, ", ".join(assumption.applies_to)
    test_value, p, tier, triggered, text, undetermined = _assumption_state(
        assumption, analysis, fit, analysis.report_tier)
    if undetermined:
        reason = f"{text}; decisions {named} are undetermined"
    else:
        used = assumption.fallback.label if triggered else own
        reason = f"{text}: {used} used for {named}"
    return AssumptionOutcome(
        id=assumption.id, analysis=analysis.id, check=assumption.check,
        test_value=test_value, p=p, triggered=triggered,
        covariance=assumption.fallback.label if triggered else own, reason=reason,
        determined=not undetermined, tier=tier)


def _assumption_state(assumption: Assumption, analysis: Analysis, fit: AnalysisFit,
                      tier: str) -> tuple[float | None, float | None, str, bool, str, bool]:
    """(test value, p, tier, triggered, words, undetermined) of one check."""
    if assumption.check == "constant-variance":
        diagnostics = fit.diagnostics
        p = None if diagnostics is None else finite_or_none(diagnostics.breusch_pagan_p)
        test_value = None if diagnostics is None else finite_or_none(
            diagnostics.breusch_pagan_statistic)
        tier = analysis.report_tier if diagnostics is None else diagnostics.tier
        if p is None:
            why = diagnostics.reason if diagnostics is not None and diagnostics.reason else (
                "no diagnostics" if diagnostics is None else "no p-value")
            return test_value, None, tier, False, (
                f"the Breusch–Pagan test on tier {tier} could not be computed ({why})"), True
        triggered = p < assumption.p_below
        words = (f"Breusch–Pagan {fmt_p_phrase('p', p)} on tier {tier} is "
                 f"{'below' if triggered else 'not below'} {fmt_alpha(assumption.p_below)}")
        return test_value, p, tier, triggered, words, False
    tier_fit = fit.tier(tier)
    dispersion = finite_or_none(tier_fit.dispersion)
    if dispersion is None:
        why = f" ({tier_fit.reason})" if tier_fit.reason else ""
        return None, None, tier, False, (
            f"the Pearson dispersion of tier {tier} could not be computed{why}"), True
    triggered = dispersion > assumption.above
    words = (f"Pearson dispersion {fmt_num(dispersion)} on tier {tier} is "
             f"{'above' if triggered else 'not above'} {fmt_num(assumption.above)}")
    return dispersion, None, tier, triggered, words, False


def _branch(plan: Plan, decision: Decision, fit: AnalysisFit) -> _Branch:
    """Which covariance the decision uses after its assumption checks, and why."""
    analysis = plan.analysis(decision.analysis)
    chosen, texts, blocked = None, [], None
    for assumption in plan.assumptions:
        if decision.id not in assumption.applies_to:
            continue
        # constant variance is judged once, on the report tier; dispersion on the rule's tier
        tier = analysis.report_tier if assumption.check == "constant-variance" else decision.tier
        _, _, _, triggered, words, undetermined = _assumption_state(
            assumption, analysis, fit, tier)
        if undetermined:
            blocked = blocked or f"{words} ({assumption.id}), so the covariance is not decided"
            texts.append(f"{words} ({assumption.id})")
            continue
        if triggered and chosen is None:
            chosen = assumption.fallback.label
            texts.append(f"{words} ({assumption.id}): {chosen} used")
        elif triggered:
            texts.append(f"{words} ({assumption.id}): {chosen} already chosen by an earlier check")
        else:
            texts.append(f"{words} ({assumption.id}): {analysis.covariance.label} kept")
    return _Branch(chosen, "; ".join(texts) if texts else None, blocked)


def _inference(fit: AnalysisFit, tier: str, covariance: str | None) -> ExposureInference | None:
    inferences = fit.tier(tier).exposure
    if covariance is None:
        return inferences[0] if inferences else None
    return next((e for e in inferences if e.covariance == covariance), None)


# ---- minimum information ----------------------------------------------------------------

def _tiers_involved(analysis: Analysis, decision: Decision) -> tuple[str, ...]:
    if decision.test == "tier-selection":
        return tuple(t.name for t in analysis.tiers)
    if decision.test == "change-in-estimate":
        return (decision.from_tier, decision.tier)
    return (decision.tier,)


def information_shortfall(analysis: Analysis, decision: Decision, fit: AnalysisFit
                          ) -> tuple[str | None, dict]:
    """Why the plan's minimum-information rules are not met (None when they are), and the
    counts checked. Events per parameter counts the rarer of outcome = 1 and outcome = 0,
    over the parameters (intercept included) of the largest tier the rule reads."""
    rule, counts = analysis.minimum_information, {}
    if rule.n is not None:
        counts["minimum_n"] = rule.n
        if fit.n < rule.n:
            return (f"only {fit.n} rows were analysed, below the plan's minimum information "
                    f"of {rule.n}"), counts
    if rule.events_per_parameter is None or analysis.family != "binomial":
        return None, counts
    widest = max((fit.tier(t) for t in _tiers_involved(analysis, decision)),
                 key=lambda t: t.n_parameters)
    counts["minimum_events_per_parameter"] = rule.events_per_parameter
    if fit.events is None:
        return ("the count of outcome events is not available for the minimum-information "
                "rule"), counts
    rarer = min(fit.events, fit.n - fit.events)
    per_parameter = rarer / widest.n_parameters
    counts["events_per_parameter"] = per_parameter
    if per_parameter < rule.events_per_parameter:
        return (f"{fmt_num(per_parameter)} events per parameter ({rarer} of the rarer outcome "
                f"over {widest.n_parameters} parameters in tier {widest.name}) is below the "
                f"plan's minimum of {fmt_num(rule.events_per_parameter)}"), counts
    return None, counts


# ---- one decision -----------------------------------------------------------------------

def _evaluate(plan: Plan, decision: Decision, fit: AnalysisFit, alpha: float
              ) -> tuple[Finding, _Branch]:
    analysis = plan.analysis(decision.analysis)
    term = exposure_term(plan, decision)
    branch = _Branch(None, None, None)
    if decision.test == "tier-selection":
        finding = tier_selection(analysis, replace(decision, alpha=alpha), fit)
    elif decision.test == "change-in-estimate":
        finding = change_in_estimate(analysis, decision, fit, term)
    else:
        branch = _branch(plan, decision, fit)
        inference = _inference(fit, decision.tier, branch.covariance)
        if inference is None:
            wanted = branch.covariance or analysis.covariance.label
            finding = Finding("undetermined", f"the fit holds no {wanted} inference for the "
                              f"exposure in tier {decision.tier}", base_numbers(analysis))
        else:
            finding = INFERENCE_RULES[decision.test](analysis, decision, inference, term, alpha)
    shortfall, counts = information_shortfall(analysis, decision, fit)
    numbers = {**finding.numbers, **counts}
    blocked = shortfall or branch.blocked
    if blocked:
        finding = replace(finding, verdict="undetermined", reason=blocked)
    return replace(finding, numbers=numbers), branch


def _verdict(plan: Plan, decision: Decision, finding: Finding, branch: _Branch,
             **extra) -> Verdict:
    caution = one_sided_caution(plan, decision)
    numbers = {k: (finite_or_none(v) if isinstance(v, float) else v)
               for k, v in sorted(finding.numbers.items())}
    # rules that read no standard error (tier selection, change in estimate) name the
    # analysis' own covariance
    covariance = numbers.get("covariance") or plan.analysis(decision.analysis).covariance.label
    return Verdict(id=decision.id, analysis=decision.analysis, test=decision.test,
                   tier=decision.tier, verdict=finding.verdict, reason=finding.reason,
                   covariance=covariance, branch=branch.text, numbers=numbers,
                   cautions=(caution,) if caution else (), **extra)


def _family_verdict(plan: Plan, decision: Decision, finding: Finding, branch: _Branch,
                    family: Multiplicity, step: Adjusted, adjusted: tuple[Adjusted, ...],
                    decided: dict | None, tail: str = "") -> Verdict:
    method = METHOD_NAME[family.method]
    label = (f"{family.method} over {', '.join(family.decisions)} at α = "
             f"{fmt_alpha(family.alpha)}")
    numbers = {**finding.numbers, "p_adjusted": step.p_adjusted, "alpha_used": step.alpha_used,
               "family_alpha": family.alpha, "family_step": step.rank, "tested": step.tested}
    undetermined = [i for i, s in zip(family.decisions, adjusted) if s.p is None]
    others = [i for i in undetermined if i != decision.id]
    note = (f"; {', '.join(others)} undetermined and counted as not rejected"
            if others else "")
    if finding.verdict == "undetermined":
        reason = f"{finding.reason} (counted as not rejected in the {method} family)"
        return _verdict(plan, decision, replace(finding, reason=reason, numbers=numbers),
                        branch, multiplicity=label, inference=decided)
    word = "supported" if step.rejected else "not supported"
    reason = _family_reason(decision, finding, family, step, adjusted) + tail + note
    return _verdict(plan, decision,
                    replace(finding, verdict=word, reason=reason, numbers=numbers),
                    branch, multiplicity=label, inference=decided)


def _family_reason(decision: Decision, finding: Finding, family: Multiplicity, step: Adjusted,
                   adjusted: tuple[Adjusted, ...]) -> str:
    method, alpha = METHOD_NAME[family.method], fmt_alpha(family.alpha)
    own = fmt_p_phrase(finding.p_name, finding.p)
    if not step.tested:
        stopper = family.decisions[step.stopped_by]
        stopped = adjusted[step.stopped_by]
        their = (fmt_p_phrase("p", stopped.p) if stopped.p is not None
                 else "its p could not be computed")
        return (f"not tested: the fixed sequence stopped at {stopper}, which was not rejected "
                f"({their}); its own {own}")
    verdict_tail = (f"{fmt_p_phrase('adjusted p', step.p_adjusted)} "
                    f"{'<' if step.rejected else '≥'} {alpha}")
    held = fmt_alpha(step.alpha_used)
    below_own = finding.p is not None and finding.p < step.alpha_used
    if family.method == "fixed-sequence":
        return (f"{own} is {'' if step.rejected else 'not '}below α = {held} at step "
                f"{step.rank} of the fixed sequence")
    if family.method == "bonferroni":
        return (f"{own} is {'' if step.rejected else 'not '}below α = {held} after "
                f"Bonferroni adjustment ({verdict_tail})")
    if step.rejected == below_own:
        return (f"{own} is {'' if below_own else 'not '}below α = {held} after {method} "
                f"adjustment ({verdict_tail})")
    if step.rejected:  # Hochberg: a larger p cleared its step, which rejects every smaller p
        return (f"{own} is not below its own step's α = {held}, but {method}'s step-up "
                f"rejects it because a larger p in the family cleared its step ({verdict_tail})")
    stopper = _holm_stop(family, adjusted)
    return (f"{own} is below its step's α = {held}, but {method}'s step-down stopped earlier, "
            f"at {stopper} ({verdict_tail})")


def _holm_stop(family: Multiplicity, adjusted: tuple[Adjusted, ...]) -> str:
    """The first member, in ascending p order, that failed its step."""
    failed = [(s.rank, i) for i, s in zip(family.decisions, adjusted)
              if (1.0 if s.p is None else s.p) >= s.alpha_used]
    return min(failed)[1] if failed else "an earlier step"
