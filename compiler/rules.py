"""Each kind of decision rule, evaluated on one analysis' fit at a given α.

Every evaluation returns a :class:`Finding`: the verdict on its own (before any multiplicity
procedure), a one-sentence reason, the numbers behind it, and the p-value a multiplicity
procedure should use. `decide` chooses the covariance and the α, and applies the families.

Scales: a gaussian effect is a difference; a binomial or Poisson effect is a log odds or
log rate ratio, with the ratio reported beside it. Margins for ratios are given as ratios
and compared on the log scale.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from scipy import special

from .change import change_between, in_words
from .fitted import AnalysisFit, Coefficient, ExposureInference
from .inference import exp_or_none, finite_or_none, natural_scale
from .plan import Analysis, Decision
from .rules_text import (RATIO, SCALE, fmt_alpha, fmt_num, fmt_p_phrase,
                         fmt_percent, level_percent)
from .verdicts import VerdictWord
from .words import METHOD_WORDS

# Every verdict carries these keys, None where they do not apply, so consumers see one shape.
# ``interval`` is {low, high, level} on the analysis scale, ``natural`` {scale, estimate, low,
# high} on the natural scale (a difference, an odds or rate ratio).
NUMBER_KEYS = ("estimate", "standard_error", "interval", "test_value", "p", "p_adjusted",
               "alpha_used", "margin", "scale", "covariance", "df", "natural")


@dataclass(frozen=True)
class Finding:
    verdict: VerdictWord
    reason: str
    numbers: dict = field(default_factory=dict)
    p: float | None = None  # what a multiplicity procedure uses
    p_name: str = "p"  # how reasons name that p: "two-sided p", "TOST p", ...


def base_numbers(analysis: Analysis) -> dict:
    numbers: dict = dict.fromkeys(NUMBER_KEYS)
    numbers["scale"] = SCALE[analysis.family]
    return numbers


class _Reference:
    """t on ``df`` degrees of freedom, or the standard normal when df is None: cdf, sf and ppf
    by the scipy.special functions scipy.stats.t and scipy.stats.norm themselves call (the
    same numbers), without importing scipy.stats (about a second of every run)."""

    def __init__(self, df: float | None):
        self.df = df

    def cdf(self, x: float) -> float:
        return special.ndtr(x) if self.df is None else special.stdtr(self.df, x)

    def sf(self, x: float) -> float:
        return self.cdf(-x)

    def ppf(self, q: float) -> float:
        return special.ndtri(q) if self.df is None else special.stdtrit(self.df, q)


def _ref(df: float | None) -> _Reference:
    """The reference distribution: t on ``df`` degrees of freedom, or the standard normal."""
    return _Reference(df)


def _undetermined(reason: str, numbers: dict) -> Finding:
    return Finding("undetermined", reason, numbers)


def effect_summary(analysis: Analysis, term: str, numbers: dict) -> str:
    """The estimate and its interval on the natural scale (a difference, an odds or rate
    ratio), naming the covariance when it is not the analysis' own: what every verdict
    line on an estimate carries."""
    level = level_percent(numbers["interval"]["level"])
    natural = numbers["natural"]
    text = (f"{natural['scale']} ({term}) {fmt_num(natural['estimate'])}, {level} CI "
            f"{fmt_num(natural['low'])} to {fmt_num(natural['high'])}")
    covariance = numbers.get("covariance")
    if covariance and covariance != analysis.covariance.label:
        text += f", {covariance} covariance"
    return text


def _coefficient(inference: ExposureInference, term: str, numbers: dict
                 ) -> tuple[Coefficient | None, str | None]:
    """The term's coefficient with a usable estimate and standard error, or why not."""
    coef = next((c for c in inference.columns if c.column == term), None)
    if coef is None:
        return None, f"the fit holds no coefficient {term} under {inference.covariance} covariance"
    numbers.update(estimate=finite_or_none(coef.estimate),
                   standard_error=finite_or_none(coef.standard_error),
                   covariance=inference.covariance, df=finite_or_none(inference.df))
    if (numbers["estimate"] is None or numbers["standard_error"] is None
            or coef.standard_error <= 0):
        why = f": {coef.reason}" if coef.reason else ""
        return None, f"the {term} estimate or its standard error could not be computed{why}"
    return coef, None


def _interval(numbers: dict, analysis: Analysis, coverage: float, df: float | None) -> None:
    """Fill ``interval`` with the two-sided ``coverage`` interval, and ``natural``."""
    q = float(_ref(df).ppf(0.5 + coverage / 2))
    est, se = numbers["estimate"], numbers["standard_error"]
    low, high = finite_or_none(est - q * se), finite_or_none(est + q * se)
    numbers.update(interval={"low": low, "high": high, "level": coverage},
                   natural=vars(natural_scale(analysis.family, est, low, high)).copy())


def _one_sided_p(test_value: float, direction: str, df: float | None) -> float:
    """H1: effect > null for ``higher`` (upper tail), effect < null for ``lower``."""
    ref = _ref(df)
    return float(ref.sf(test_value) if direction == "higher" else ref.cdf(test_value))


def superiority(analysis: Analysis, decision: Decision, inference: ExposureInference,
                term: str | None, alpha: float) -> Finding:
    numbers = base_numbers(analysis)
    numbers.update(alpha_used=alpha, covariance=inference.covariance)
    if term is None:
        return _joint_superiority(analysis, inference, alpha, numbers)
    coef, why = _coefficient(inference, term, numbers)
    if coef is None:
        return _undetermined(why, numbers)
    est, se, df = numbers["estimate"], numbers["standard_error"], inference.df
    test_value = (finite_or_none(coef.test_value) if coef.test_value is not None
                  else finite_or_none(est / se))
    if test_value is None:
        return _undetermined(f"the {term} test value could not be computed", numbers)
    if decision.direction == "two-sided":
        p = finite_or_none(coef.p_two_sided)
        if p is None:
            p = finite_or_none(2 * float(_ref(df).sf(abs(test_value))))
        name, coverage = "two-sided p", 1 - alpha
    else:
        p = finite_or_none(_one_sided_p(test_value, decision.direction, df))
        name, coverage = f"one-sided p ({decision.direction})", 1 - 2 * alpha
    numbers.update(test_value=test_value, p=p)
    _interval(numbers, analysis, coverage, df)
    if p is None:
        return _undetermined(f"the {name} for {term} could not be computed", numbers)
    below = p < alpha
    reason = (f"{fmt_p_phrase(name, p)} is {'' if below else 'not '}below α = "
              f"{fmt_alpha(alpha)} ({effect_summary(analysis, term, numbers)})")
    return Finding("supported" if below else "not supported", reason, numbers, p, name)


def _joint_superiority(analysis: Analysis, inference: ExposureInference, alpha: float,
                       numbers: dict) -> Finding:
    joint = inference.joint
    if joint is None or joint.p is None or finite_or_none(joint.p) is None:
        why = f": {joint.reason}" if joint is not None and joint.reason else ""
        return _undetermined(f"the joint test of {analysis.exposure} could not be computed"
                             f"{why}", numbers)
    p = float(joint.p)
    numbers.update(test_value=finite_or_none(joint.test_value), p=p, df_added=joint.df_added,
                   df_denominator=finite_or_none(joint.df_denominator),
                   test="chi2" if joint.df_denominator is None else "F",
                   method=METHOD_WORDS[joint.method])
    name = f"joint {joint.method} test of {analysis.exposure} ({joint.df_added} df): p"
    below = p < alpha
    reason = (f"{fmt_p_phrase(name, p)} is {'' if below else 'not '}below α = "
              f"{fmt_alpha(alpha)} under {inference.covariance} covariance"
              f"{levels_summary(analysis, inference, alpha)}")
    return Finding("supported" if below else "not supported", reason, numbers, p, "joint p")


def levels_summary(analysis: Analysis, inference: ExposureInference, alpha: float) -> str:
    """Each level's estimate and 1 − α interval, for a joint test's verdict line."""
    parts = []
    for coef in inference.columns:
        numbers = base_numbers(analysis)
        numbers.update(estimate=finite_or_none(coef.estimate),
                       standard_error=finite_or_none(coef.standard_error))
        if numbers["estimate"] is None or numbers["standard_error"] is None:
            continue
        _interval(numbers, analysis, 1 - alpha, inference.df)
        parts.append(effect_summary(analysis, coef.column, numbers))
    return f" ({'; '.join(parts)})" if parts else ""


def _to_analysis_scale(analysis: Analysis, value: float) -> float:
    return value if analysis.family == "gaussian" else math.log(value)


def _bound_words(analysis: Analysis, value: float | None) -> str:
    return fmt_num(value if analysis.family == "gaussian" else exp_or_none(value))


def non_inferiority(analysis: Analysis, decision: Decision, inference: ExposureInference,
                    term: str | None, alpha: float) -> Finding:
    numbers = base_numbers(analysis)
    numbers.update(alpha_used=alpha, covariance=inference.covariance, margin=decision.margin)
    if term is None or decision.direction == "two-sided" or decision.margin is None:
        return _undetermined("a non-inferiority rule needs one exposure column, a margin and "
                             "a direction (higher or lower)", numbers)
    coef, why = _coefficient(inference, term, numbers)
    if coef is None:
        return _undetermined(why, numbers)
    margin = _to_analysis_scale(analysis, decision.margin)
    est, se, df = numbers["estimate"], numbers["standard_error"], inference.df
    test_value = finite_or_none((est - margin) / se)
    p = None if test_value is None else finite_or_none(
        _one_sided_p(test_value, decision.direction, df))
    numbers.update(test_value=test_value, p=p, margin_analysis_scale=margin)
    _interval(numbers, analysis, 1 - 2 * alpha, df)
    if decision.direction == "higher":
        end, bound, word = "lower", numbers["interval"]["low"], "above"
        cleared = bound is not None and bound > margin
    else:
        end, bound, word = "upper", numbers["interval"]["high"], "below"
        cleared = bound is not None and bound < margin
    numbers["bound"] = bound
    if bound is None:
        return _undetermined(f"the {end} end of the interval for {term} could not be "
                             f"computed", numbers)
    what = "difference" if analysis.family == "gaussian" else RATIO[analysis.family]
    reason = (f"the {end} end of the {level_percent(1 - 2 * alpha)} interval for the {what} "
              f"({term}), {_bound_words(analysis, bound)}, is {'' if cleared else 'not '}"
              f"{word} the margin {fmt_num(decision.margin)} "
              f"({fmt_p_phrase('non-inferiority p', p)}, α = {fmt_alpha(alpha)}; "
              f"{effect_summary(analysis, term, numbers)})")
    return Finding("supported" if cleared else "not supported", reason, numbers, p,
                   "non-inferiority p")


def equivalence(analysis: Analysis, decision: Decision, inference: ExposureInference,
                term: str | None, alpha: float) -> Finding:
    numbers = base_numbers(analysis)
    numbers.update(alpha_used=alpha, covariance=inference.covariance,
                   margins=list(decision.margins) if decision.margins else None)
    if term is None or decision.margins is None:
        return _undetermined("an equivalence rule needs one exposure column and two margins",
                             numbers)
    coef, why = _coefficient(inference, term, numbers)
    if coef is None:
        return _undetermined(why, numbers)
    low, high = (_to_analysis_scale(analysis, m) for m in decision.margins)
    est, se, df = numbers["estimate"], numbers["standard_error"], inference.df
    ref = _ref(df)
    # two one-sided tests: H1 effect > low, and H1 effect < high
    p_low = finite_or_none(float(ref.sf((est - low) / se)))
    p_high = finite_or_none(float(ref.cdf((est - high) / se)))
    p = None if p_low is None or p_high is None else max(p_low, p_high)
    numbers.update(p=p, p_lower_margin=p_low, p_upper_margin=p_high,
                   margins_analysis_scale=[low, high])
    _interval(numbers, analysis, 1 - 2 * alpha, df)
    lower, upper = numbers["interval"]["low"], numbers["interval"]["high"]
    if lower is None or upper is None or p is None:
        return _undetermined(f"the interval for {term} could not be computed", numbers)
    inside = low < lower and upper < high
    what = "difference" if analysis.family == "gaussian" else RATIO[analysis.family]
    reason = (f"the {level_percent(1 - 2 * alpha)} interval for the {what} ({term}), "
              f"{_bound_words(analysis, lower)} to {_bound_words(analysis, upper)}, "
              f"{'lies' if inside else 'does not lie'} inside the margins "
              f"{fmt_num(decision.margins[0])} to {fmt_num(decision.margins[1])} "
              f"({fmt_p_phrase('TOST p', p)}, α = {fmt_alpha(alpha)}; "
              f"{effect_summary(analysis, term, numbers)})")
    return Finding("supported" if inside else "not supported", reason, numbers, p, "TOST p")


def tier_selection(analysis: Analysis, decision: Decision, fit: AnalysisFit) -> Finding:
    """Walk the successive comparisons; needed additions extend the selected tier until the
    first addition that is not needed."""
    alpha = decision.alpha
    names = [t.name for t in analysis.tiers]
    numbers = base_numbers(analysis)
    numbers.update(alpha_used=alpha, report_tier=analysis.report_tier, scale=None)
    walked, selected, broken, missing = [], names[0], False, None
    words: list[str] = []
    for reduced, larger in zip(names, names[1:]):
        comparison = next((c for c in fit.comparisons
                           if c.from_tier == reduced and c.to_tier == larger), None)
        p = None if comparison is None else finite_or_none(comparison.p)
        needed = None if p is None else p < alpha
        walked.append({"from": reduced, "to": larger, "p": p, "needed": needed,
                       "method": None if comparison is None else METHOD_WORDS[comparison.method]})
        if broken:
            continue
        if p is None:
            missing = (reduced, larger, comparison.reason if comparison is not None else None)
            broken = True
        elif needed:
            selected = larger
            words.append(f"the additions of {larger} were needed ({fmt_p_phrase('p', p)})")
        else:
            broken = True
            words.append(f"those of {larger} were not ({fmt_p_phrase('p', p)} is not below "
                         f"α = {fmt_alpha(alpha)})")
    numbers["comparisons"] = walked
    if missing is not None:
        numbers.update(selected_tier=None, agrees=None)
        why = f": {missing[2]}" if missing[2] else ""
        return _undetermined(f"the comparison of {missing[0]} with {missing[1]} has no p-value"
                             f"{why}, so the walk cannot go on", numbers)
    agrees = selected == analysis.report_tier
    numbers.update(selected_tier=selected, agrees=agrees)
    walk = "; ".join(words) if words else "the analysis has a single tier"
    if agrees:
        tail = f"agrees with the pre-specified report tier {analysis.report_tier}"
    else:
        tail = (f"differs from the pre-specified report tier {analysis.report_tier}; this is "
                f"a reported check, and the primary analysis stays on {analysis.report_tier}")
    reason = f"{walk}; the nested tests select tier {selected}, which {tail}"
    return Finding("supported" if agrees else "not supported", reason, numbers)


def change_in_estimate(analysis: Analysis, decision: Decision, fit: AnalysisFit,
                       term: str | None) -> Finding:
    """Relative change of the exposure estimate (on the analysis scale) between two tiers:
    its size |b − b₁| / |b₁| against the threshold, with the direction it went."""
    numbers = base_numbers(analysis)
    numbers.update(threshold=decision.threshold, from_tier=decision.from_tier,
                   estimate_from=None, relative=None, direction=None, flagged=None)
    if term is None:
        return _undetermined(f"{analysis.exposure} has several levels: a change-in-estimate "
                             f"rule must name one", numbers)
    estimates = []
    for tier in (decision.from_tier, decision.tier):
        coef = next((c for c in fit.tier(tier).columns if c.column == term), None)
        estimates.append(None if coef is None else finite_or_none(coef.estimate))
    start, end = estimates
    numbers.update(estimate_from=start, estimate=end)
    if start is None or end is None:
        return _undetermined(f"the {term} estimate is not available in both tiers "
                             f"{decision.from_tier} and {decision.tier}", numbers)
    if start == 0:
        return _undetermined(f"the {term} estimate in tier {decision.from_tier} is exactly 0, "
                             f"so a relative change is not defined", numbers)
    change = change_between(start, end)
    if change.relative is None:
        return _undetermined(f"the relative change of the {term} estimate from "
                             f"{decision.from_tier} to {decision.tier} is not finite", numbers)
    flagged = change.relative > decision.threshold
    numbers.update(relative=change.relative, direction=change.direction, flagged=flagged)
    verdict_words = ("confounding flagged" if flagged else "no confounding flagged")
    reason = (f"the estimate of {term} ({SCALE[analysis.family]}) {in_words(change)}, from "
              f"{fmt_num(start)} in {decision.from_tier} to {fmt_num(end)} in {decision.tier}: "
              f"a change whose size {'exceeds' if flagged else 'does not exceed'} "
              f"the {fmt_percent(decision.threshold)} threshold, {verdict_words}")
    return Finding("supported" if flagged else "not supported", reason, numbers)
