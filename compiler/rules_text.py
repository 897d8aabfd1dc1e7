"""Decision rules in plain words, before any data exist, and the number formats verdicts use.

`check --explain` prints :func:`describe_rule`, :func:`describe_assumption` and
:func:`describe_family` for the compiled plan; `decide` uses the same formats and the same
choice of exposure term, so the words before the data and the verdicts after agree.
No heavy imports here: `check` must start fast.
"""

from __future__ import annotations


from .columns import level_label
from .plan import Analysis, Assumption, Decision, Multiplicity, Plan

SCALE = {"gaussian": "difference", "binomial": "log odds ratio", "poisson": "log rate ratio"}
RATIO = {"binomial": "odds ratio", "poisson": "rate ratio"}
METHOD_NAME = {"bonferroni": "Bonferroni", "holm": "Holm", "hochberg": "Hochberg",
               "fixed-sequence": "fixed-sequence"}


# ---- number formats -------------------------------------------------------------------

def fmt_p(p: float | None) -> str:
    """A p-value to 4 decimals, or "< 0.0001"."""
    if p is None:
        return "not computable"
    return "< 0.0001" if p < 0.0001 else f"{p:.4f}"


def fmt_p_phrase(name: str, p: float | None) -> str:
    """"two-sided p = 0.0127" or "two-sided p < 0.0001"."""
    text = fmt_p(p)
    return f"{name} {text}" if text.startswith("<") else f"{name} = {text}"


def fmt_num(x: float | None) -> str:
    """3 significant digits, without exponent notation for everyday magnitudes (a huge value
    in exponent notation: 7.12e+156, never its 157 digits)."""
    if x is None:
        return "not computable"
    if x == 0:
        return "0"
    if abs(x) >= 1e6:
        return f"{x:.3g}"
    if abs(x) >= 1000:
        return f"{x:.0f}"
    text = f"{x:.3g}"
    if "e" in text and abs(x) >= 1e-4:
        text = f"{x:.6f}".rstrip("0").rstrip(".")
    return text


def fmt_alpha(alpha: float | None) -> str:
    return "not computable" if alpha is None else f"{alpha:.4g}"


def fmt_percent(x: float) -> str:
    return f"{100 * x:.3g}%"


def level_percent(level: float) -> str:
    return f"{100 * level:.4g}%"


# ---- which exposure column a rule is about -------------------------------------------

def exposure_levels(plan: Plan, analysis: Analysis) -> tuple[tuple[str, ...], str | None]:
    """(non-reference levels, reference) of a categorical exposure; ((), None) otherwise."""
    variable = plan.variable(analysis.exposure)
    if variable.kind != "categorical":
        return (), None
    reference = variable.reference or variable.levels[0]
    return tuple(v for v in variable.levels if v != reference), reference


def exposure_term(plan: Plan, decision: Decision) -> str | None:
    """The design-column label the rule reads, or None when it needs the joint test
    (a categorical exposure of more than two levels with no level named)."""
    analysis = plan.analysis(decision.analysis)
    _, reference = exposure_levels(plan, analysis)
    if plan.variable(analysis.exposure).kind != "categorical":
        return analysis.exposure
    level = exposure_level(plan, decision)
    return None if level is None else level_label(analysis.exposure, level, reference)


def exposure_level(plan: Plan, decision: Decision) -> str | None:
    """The level of a categorical exposure the rule reads (None: the joint test, or an
    exposure that is not categorical)."""
    others, _ = exposure_levels(plan, plan.analysis(decision.analysis))
    if decision.level is not None:
        return decision.level
    return others[0] if len(others) == 1 else None


def effect_phrase(plan: Plan, decision: Decision) -> str:
    """What the rule's effect is, e.g. "the difference in mean latency (minutes) between
    guidance = coached and none", "the odds ratio for settled per unit of age"."""
    analysis = plan.analysis(decision.analysis)
    variable = plan.variable(analysis.exposure)
    _, reference = exposure_levels(plan, analysis)
    term = exposure_term(plan, decision)
    if analysis.family == "gaussian":
        unit = plan.variable(analysis.outcome).unit
        measure = f"the difference in mean {analysis.outcome}" + (f" ({unit})" if unit else "")
    else:
        measure = f"the {RATIO[analysis.family]} for {analysis.outcome}"
    if variable.kind == "categorical" and term is None:
        return (f"{measure} across the levels of {analysis.exposure} (joint test against "
                f"{reference})")
    if variable.kind == "categorical":
        level = exposure_level(plan, decision)
        joiner = ("between", "and") if analysis.family == "gaussian" else ("of", "against")
        return f"{measure} {joiner[0]} {analysis.exposure} = {level} {joiner[1]} {reference}"
    if variable.kind == "binary":
        return f"{measure} of {analysis.exposure} = 1 against 0"
    unit = f" ({variable.unit})" if variable.unit else ""
    return f"{measure} per unit of {analysis.exposure}{unit}"


def null_value(analysis: Analysis) -> str:
    return "0" if analysis.family == "gaussian" else "1"


# ---- the rules in plain words ---------------------------------------------------------

def family_of(plan: Plan, decision_id: str) -> Multiplicity | None:
    return next((f for f in plan.multiplicity if decision_id in f.decisions), None)


def _alpha_words(plan: Plan, decision: Decision) -> str:
    family = family_of(plan, decision.id)
    if family is None:
        return f"α = {fmt_alpha(decision.alpha)}"
    return (f"the family-wise α = {fmt_alpha(family.alpha)} of its "
            f"{METHOD_NAME[family.method]} family ({', '.join(family.decisions)})")


def _covariance_words(plan: Plan, decision: Decision) -> str:
    analysis = plan.analysis(decision.analysis)
    text = f"{analysis.covariance.label} covariance"
    fallbacks = [f"{a.fallback.label} if {a.id} triggers" for a in plan.assumptions
                 if decision.id in a.applies_to]
    return text + (f" ({'; '.join(fallbacks)})" if fallbacks else "")


def describe_rule(plan: Plan, decision: Decision) -> str:
    """One rule in plain words, e.g. for `check --explain`."""
    analysis = plan.analysis(decision.analysis)
    head = f"{decision.id} — {decision.test} in analysis {analysis.id}"
    effect = effect_phrase(plan, decision)
    alpha = _alpha_words(plan, decision)
    if decision.test == "tier-selection":
        walk = " → ".join(t.name for t in analysis.tiers)
        return (f"{head}: walks the nested comparisons {walk} at α = "
                f"{fmt_alpha(decision.alpha)}; a tier's additions are needed when its "
                f"comparison has p < α, and the selected tier is the last of the first "
                f"unbroken run of needed additions. The verdict reports whether the selected "
                f"tier agrees with the pre-specified report tier {analysis.report_tier}; it is "
                f"a reported check and never changes the primary analysis.")
    if decision.test == "change-in-estimate":
        return (f"{head}: flags confounding when the estimate of {effect} (on the "
                f"{SCALE[analysis.family]} scale) changes from tier {decision.from_tier} to "
                f"tier {decision.tier} by more than {fmt_percent(decision.threshold)} of its "
                f"size in tier {decision.from_tier} (a 10% threshold is common practice).")
    head += f", tier {decision.tier}, {_covariance_words(plan, decision)}"
    if decision.test == "superiority":
        if decision.direction == "two-sided":
            side = f"differs from {null_value(analysis)}, two-sided"
        else:
            side = (f"is {'above' if decision.direction == 'higher' else 'below'} "
                    f"{null_value(analysis)}, one-sided ({decision.direction})")
        return f"{head}: supported when {effect} {side}, with p < {alpha}."
    if decision.test == "non-inferiority":
        end, word = (("lower", "above") if decision.direction == "higher"
                     else ("upper", "below"))
        return (f"{head}: supported when the {end} end of the one-sided (1 − α) interval "
                f"for {effect} (the two-sided 1 − 2α interval), at {alpha}, lies {word} "
                f"the margin {fmt_num(decision.margin)}.")
    low, high = decision.margins or (None, None)
    return (f"{head}: supported when the 1 − 2α interval for {effect} lies inside the "
            f"margins {fmt_num(low)} to {fmt_num(high)} (two one-sided tests), at {alpha}.")


# ---- why an interval has its level, and the one-sided caution ---------------------------

# Common confirmatory practice holds a one-sided test at half the conventional two-sided
# level (ICH E9, section 5.5; from memory). A caution only: defaults never change, so a
# frozen plan keeps its meaning.
ONE_SIDED_ALPHA = 0.025


def level_basis(decision: Decision) -> tuple[str, str] | None:
    """Why the decision's interval has its level, in the rule's own terms, as (formula,
    explanation): 1 − α for a two-sided test, 1 − 2α where an end is a one-sided test at α."""
    if decision.test == "superiority" and decision.direction == "two-sided":
        return "1 − α", "the two-sided test's own interval"
    end = "lower" if decision.direction == "higher" else "upper"
    if decision.test == "superiority":
        return "1 − 2α", f"its {end} end is the one-sided test at α"
    if decision.test == "non-inferiority":
        return "1 − 2α", f"its {end} end, compared with the margin, is the one-sided test at α"
    if decision.test == "equivalence":
        return "1 − 2α", "each end is one of the two one-sided tests at α"
    return None


def alpha_origin(plan: Plan, decision: Decision, alpha: float, step: int | None,
                 tested: bool = True) -> str:
    """Where the α a decision was held to comes from: its own, or its family's step."""
    family = family_of(plan, decision.id)
    if family is None:
        return f"α = {fmt_alpha(alpha)}, the rule's own"
    m, whole = len(family.decisions), fmt_alpha(family.alpha)
    if family.method == "fixed-sequence":
        if not tested:
            return (f"α = {whole}, the family's; not tested, since the fixed sequence stopped "
                    f"before step {step}")
        return f"α = {whole}, the full family α at step {step} of {m} of the fixed sequence"
    if family.method == "bonferroni":
        return f"α = {whole}/{m} = {fmt_alpha(alpha)}, Bonferroni over {m}"
    divisor = m - (step or 1) + 1
    share = whole if divisor == 1 else f"{whole}/{divisor} = {fmt_alpha(alpha)}"
    return f"α = {share} at {METHOD_NAME[family.method]} step {step} of {m}"


def one_sided_caution(plan: Plan, decision: Decision) -> str | None:
    """The caution for a one-sided rule held to more than 0.025, or None."""
    one_sided = (decision.test == "non-inferiority" or
                 (decision.test == "superiority" and decision.direction != "two-sided"))
    family = family_of(plan, decision.id)
    alpha = family.alpha if family is not None else decision.alpha
    if not one_sided or alpha <= ONE_SIDED_ALPHA:
        return None
    source = (f"the α of its {METHOD_NAME[family.method]} family" if family is not None
              else "its α")
    return (f"decision `{decision.id}` is a one-sided test at {source} = {fmt_alpha(alpha)}; "
            f"common confirmatory practice holds a one-sided test at {ONE_SIDED_ALPHA}, half "
            f"the two-sided level (ICH E9, section 5.5)")


def describe_assumption(plan: Plan, assumption: Assumption) -> str:
    analysis = plan.analysis(assumption.analysis)
    uses = (f"decisions {', '.join(assumption.applies_to)} use "
            f"{assumption.fallback.label} covariance instead of {analysis.covariance.label}")
    if assumption.check == "constant-variance":
        return (f"{assumption.id} — constant variance in analysis {analysis.id}: the "
                f"Breusch–Pagan test on the report tier {analysis.report_tier}; when "
                f"p < {fmt_alpha(assumption.p_below)}, {uses}.")
    return (f"{assumption.id} — dispersion in analysis {analysis.id}: the Pearson dispersion "
            f"(Pearson chi-square over residual df) of each named decision's tier; when it is "
            f"above {fmt_num(assumption.above)}, {uses}.")


def describe_family(plan: Plan, family: Multiplicity) -> str:
    m, alpha = len(family.decisions), family.alpha
    members = ", ".join(family.decisions)
    name = METHOD_NAME[family.method]
    head = (f"{name[0].upper()}{name[1:]} family over {members} at family-wise "
            f"α = {fmt_alpha(alpha)}")
    if family.method == "bonferroni":
        return f"{head}: each is held to α/{m} = {fmt_alpha(alpha / m)}."
    steps = [fmt_alpha(alpha / (m - j)) for j in range(m)]
    if family.method == "holm":
        return (f"{head}: in ascending order of p the j-th is held to α/(m − j + 1) "
                f"({', '.join(steps)}); testing stops at the first that fails.")
    if family.method == "hochberg":
        return (f"{head}: from the largest p down, the first that is below α/(m − j + 1) "
                f"({', '.join(reversed(steps))}) is rejected with every smaller p.")
    return (f"{head}: tested in the order {members}, each at α = {fmt_alpha(alpha)}; testing "
            f"stops at the first that fails, and later decisions are not tested.")


def describe_minimum_information(analysis: Analysis) -> str | None:
    rule = analysis.minimum_information
    parts = []
    if rule.events_per_parameter is not None:
        parts.append(f"at least {fmt_num(rule.events_per_parameter)} events per estimated "
                     f"parameter (the rarer of outcome = 1 and outcome = 0)")
    if rule.n is not None:
        parts.append(f"at least {rule.n} analysed rows")
    if not parts:
        return None
    return (f"minimum information for analysis {analysis.id}: {' and '.join(parts)}; "
            f"otherwise its verdicts are undetermined.")
