"""Verdicts re-derived from the numbers results.json stores give what the fits themselves give.

Each case is a plan and a fit built in code (tests/fitbuilders, whose coefficients take their
statistic, p and interval from scipy); the fit is written as results.json writes it, read
back through canonical JSON bytes, rebuilt by stored_fits.fits_of and decided again. The
records must be byte-identical to those of the decide pass on the original fits, for every
kind of rule, covariance fallback, multiplicity procedure and undetermined outcome.
"""

from __future__ import annotations

import json

import pytest
from fitbuilders import (analysis_fit, comparison, decision, inference, plan_with,
                         same_exposure_fit, tier_fit, with_report_tier)

from compiler import results
from compiler.canonical import canonical_bytes
from compiler.decide import decide
from compiler.fitted import JointTest
from compiler.plan import Assumption, Covariance, MinimumInformation, Multiplicity
from compiler.stored_fits import fits_of, mismatch, settled

COACHED, LEAFLET = "guidance: coached vs none", "guidance: leaflet vs none"
EFFECTS = {COACHED: (2.0, 0.8), LEAFLET: (0.5, 0.8)}


def _heteroscedastic(bp_p):
    classical = inference(EFFECTS)
    hc3 = inference({COACHED: (2.0, 1.1), LEAFLET: (0.5, 1.1)}, covariance="HC3")
    fit = analysis_fit(tier_fit("crude", classical), tier_fit("baseline", classical),
                       tier_fit("full", classical, hc3), breusch_pagan_p=bp_p)
    a1 = Assumption("A1", "primary", "constant-variance", Covariance("HC3"), ("H1",),
                    p_below=0.05)
    return plan_with(decision("H1", level="coached"), assumptions=(a1,)), fit


def _overdispersed():
    classical = inference({COACHED: (0.3, 0.1), LEAFLET: (0.1, 0.1)}, df=None)
    robust = inference({COACHED: (0.3, 0.2), LEAFLET: (0.1, 0.2)}, covariance="HC0", df=None)
    tiers = [tier_fit(name, classical, robust, dispersion=2.4) for name in
             ("crude", "baseline", "full")]
    a2 = Assumption("A2", "primary", "dispersion", Covariance("HC0"), ("P1",), above=1.5)
    return (plan_with(decision("P1", level="coached"), family="poisson", assumptions=(a2,)),
            analysis_fit(*tiers, family="poisson"))


def _joint():
    joint = JointTest("F", 2, 97, 5.1, 0.0078)
    tiers = [tier_fit(name, inference(EFFECTS, joint=joint)) for name in
             ("crude", "baseline", "full")]
    return plan_with(decision("H1")), analysis_fit(*tiers)


def _tier_selection(p_full):
    tiers = [tier_fit(name, inference(EFFECTS)) for name in ("crude", "baseline", "full")]
    fit = analysis_fit(*tiers, comparisons=(comparison("crude", "baseline", 0.001),
                                            comparison("baseline", "full", p_full)))
    return with_report_tier(plan_with(decision("T1", test="tier-selection")), "full"), fit


def _change():
    tiers = [tier_fit(name, inference({COACHED: (est, 0.8), LEAFLET: (0.5, 0.8)}))
             for name, est in (("crude", 2.5), ("baseline", 2.2), ("full", 2.0))]
    return (plan_with(decision("C1", test="change-in-estimate", level="coached",
                               from_tier="crude", threshold=0.1)), analysis_fit(*tiers))


def _family(method, mi=MinimumInformation()):
    fit = same_exposure_fit({COACHED: (2.6, 1.0), LEAFLET: (2.1, 1.0)}, df=None)
    plan = plan_with(decision("H1", level="coached"), decision("H2", level="leaflet"),
                     multiplicity=(Multiplicity(method, 0.05, ("H1", "H2")),),
                     minimum_information=mi)
    return plan, fit


CASES = {
    "two-sided superiority": lambda: (plan_with(decision("H1", level="coached")),
                                      same_exposure_fit(EFFECTS)),
    "one-sided superiority": lambda: (plan_with(decision("H1", level="coached",
                                                         direction="higher", alpha=0.025)),
                                      same_exposure_fit(EFFECTS)),
    "binomial superiority": lambda: (plan_with(decision("S1", level="coached"),
                                               family="binomial"),
                                     same_exposure_fit({COACHED: (0.7, 0.3), LEAFLET: (0.1, 0.3)},
                                                       df=None, family="binomial", events=80)),
    "joint test": _joint,
    "non-inferiority": lambda: (plan_with(decision("N1", test="non-inferiority", level="coached",
                                                   direction="higher", margin=-1.0)),
                                same_exposure_fit(EFFECTS)),
    "equivalence": lambda: (plan_with(decision("E1", test="equivalence", level="coached",
                                               margins=(-3.0, 3.0))),
                            same_exposure_fit({COACHED: (0.2, 0.5), LEAFLET: (0.5, 0.8)})),
    "tier selection": lambda: _tier_selection(0.2),
    "tier selection without a p": lambda: _tier_selection(None),
    "change in estimate": _change,
    "constant variance, fallback": lambda: _heteroscedastic(0.003),
    "constant variance, kept": lambda: _heteroscedastic(0.41),
    "constant variance, not computed": lambda: _heteroscedastic(None),
    "dispersion fallback": _overdispersed,
    "holm": lambda: _family("holm"),
    "hochberg": lambda: _family("hochberg"),
    "fixed sequence": lambda: _family("fixed-sequence"),
    "bonferroni, minimum n not met": lambda: _family("bonferroni", MinimumInformation(n=500)),
    "events per parameter": lambda: (
        plan_with(decision("S1", level="coached"), family="binomial",
                  minimum_information=MinimumInformation(events_per_parameter=10)),
        same_exposure_fit({COACHED: (1.0, 0.2), LEAFLET: (0.1, 0.2)}, df=None,
                          family="binomial", events=25)),
    "no estimate": lambda: (plan_with(decision("H1", level="coached")),
                            same_exposure_fit({COACHED: (None, None), LEAFLET: (0.5, 0.8)})),
}


def stored(plan, fit) -> dict:
    """The document's analyses as results.json holds them, read back from its bytes."""
    analysis = plan.analyses[0]
    document = {"analyses": [{**results.analysis_header(plan, analysis), **results.fit_parts(fit, analysis.confidence)}]}
    return json.loads(canonical_bytes(document))


@pytest.mark.parametrize("case", sorted(CASES))
def test_verdicts_re_derived_from_the_stored_numbers_are_the_fits_verdicts(case):
    plan, fit = CASES[case]()
    verdicts, outcomes = decide(plan, (fit,))
    expected = (results.decision_records(verdicts), results.assumption_records(outcomes))
    document = stored(plan, fit)
    assert mismatch(plan, document) is None
    assert canonical_bytes(settled(plan, document)) == canonical_bytes(expected)


def test_the_stored_fit_keeps_what_decide_reads():
    plan, fit = _heteroscedastic(0.003)
    (back,) = fits_of(stored(plan, fit))
    assert back.tier("full").exposure[1].covariance == "HC3"
    assert back.diagnostics.breusch_pagan_p == 0.003
    assert [c.column for c in back.tier("full").columns] == [c.column for c in
                                                                fit.tier("full").columns]


def test_stored_analyses_that_are_not_the_plans_are_named():
    plan, fit = _change()
    document = stored(plan, fit)
    document["analyses"][0]["tiers"].pop()
    assert mismatch(plan, document) == (
        "analysis primary has tiers ['crude', 'baseline'], the plan's are "
        "['crude', 'baseline', 'full']")
