"""What decided: every rule on an estimate records the covariance, the level and the
interval it used, each with why, and its verdict line carries the estimate and interval on
the natural scale (issue 21, points 1–4). Reference values from scipy's t and normal
distributions; fixtures built in code (tests/fitbuilders)."""

from __future__ import annotations

import math

import pytest
from fitbuilders import analysis_fit, decision, inference, plan_with, same_exposure_fit, tier_fit
from scipy import stats

from compiler.decide import decide
from compiler.plan import Assumption, Covariance, Multiplicity
from compiler.rules_text import fmt_num

COACHED = "guidance: coached vs none"
LEAFLET = "guidance: leaflet vs none"


def _holm_with_fallback():
    """H1, H2 in a Holm family at 0.05; A1 switches both to HC3 (Breusch–Pagan p 0.003)."""
    classical = inference({COACHED: (-7.0, 1.2), LEAFLET: (-1.4, 1.2)}, df=500)
    hc3 = inference({COACHED: (-7.0, 1.25), LEAFLET: (-1.4, 1.25)}, covariance="HC3", df=500)
    fit = analysis_fit(tier_fit("full", classical, hc3), breusch_pagan_p=0.003)
    a1 = Assumption("A1", "primary", "constant-variance", Covariance("HC3"), ("H1", "H2"),
                    p_below=0.05)
    plan = plan_with(decision("H1", level="coached"), decision("H2", level="leaflet"),
                     assumptions=(a1,), multiplicity=(Multiplicity("holm", 0.05, ("H1", "H2")),))
    verdicts, _ = decide(plan, (fit,))
    return verdicts


def test_the_decided_inference_is_the_fallback_covariance_at_the_holm_step_level():
    h1, h2 = _holm_with_fallback()
    q = stats.t(500).ppf(1 - 0.025 / 2)  # H1 is step 1 of 2: α = 0.025, interval 97.5 %
    assert h1.inference["covariance"] == "HC3"
    assert h1.inference["standard_error"] == pytest.approx(1.25)
    assert h1.inference["interval"]["level"] == pytest.approx(0.975)
    interval = h1.inference["interval"]
    assert (interval["low"], interval["high"]) == pytest.approx(
        (-7.0 - q * 1.25, -7.0 + q * 1.25))
    assert h2.inference["interval"]["level"] == pytest.approx(0.95)  # step 2 of 2: the full α


def test_the_decided_inference_says_why_the_covariance_and_why_the_level():
    h1, _ = _holm_with_fallback()
    assert "Breusch–Pagan" in h1.inference["covariance_why"]
    assert "HC3 used" in h1.inference["covariance_why"]
    why = h1.inference["level_why"]
    assert why.startswith("1 − α with α = 0.05/2 = 0.025 at Holm step 1 of 2")
    assert "two-sided" in why


def test_a_one_sided_rule_says_its_interval_is_one_minus_two_alpha():
    fit = same_exposure_fit({COACHED: (2.0, 0.8), LEAFLET: (0.5, 0.8)})
    (v,), _ = decide(plan_with(decision("S1", level="coached", direction="higher",
                                        alpha=0.025)), (fit,))
    assert v.inference["interval"]["level"] == pytest.approx(0.95)
    assert v.inference["level_why"].startswith("1 − 2α with α = 0.025, the rule's own")
    assert "lower end" in v.inference["level_why"]


def test_the_natural_scale_of_a_binomial_rule_is_the_odds_ratio():
    est, se = 0.4, 0.15
    fit = same_exposure_fit({COACHED: (est, se), LEAFLET: (0.1, se)}, df=None,
                            family="binomial")
    (v,), _ = decide(plan_with(decision("S1", level="coached"), family="binomial"), (fit,))
    z = stats.norm.ppf(0.975)  # scipy normal quantile
    natural = v.inference["natural"]
    assert natural["scale"] == "odds ratio"
    assert (natural["estimate"], natural["low"], natural["high"]) == pytest.approx(
        (math.exp(est), math.exp(est - z * se), math.exp(est + z * se)))


def test_rules_that_read_no_interval_record_no_decided_inference():
    fit = same_exposure_fit({COACHED: (2.0, 0.8), LEAFLET: (0.5, 0.8)})
    (v,), _ = decide(plan_with(decision("T1", test="tier-selection")), (fit,))
    assert v.inference is None


# ---- point 2: the verdict line carries the estimate and interval ------------------------

def test_a_gaussian_family_member_line_carries_its_difference_and_interval():
    h1, h2 = _holm_with_fallback()
    q = stats.t(500).ppf(1 - 0.025 / 2)  # scipy t quantile at H1's Holm step
    expected = (f"difference ({COACHED}) {fmt_num(-7.0)}, 97.5% CI {fmt_num(-7.0 - q * 1.25)} "
                f"to {fmt_num(-7.0 + q * 1.25)}, HC3 covariance")
    assert expected in h1.reason
    assert f"difference ({LEAFLET}) {fmt_num(-1.4)}, 95% CI" in h2.reason


def test_a_binomial_family_member_line_carries_its_odds_ratio():
    fit = same_exposure_fit({COACHED: (0.4, 0.15), LEAFLET: (0.1, 0.15)}, df=None,
                            family="binomial")
    plan = plan_with(decision("S1", level="coached"), decision("S2", level="leaflet"),
                     family="binomial",
                     multiplicity=(Multiplicity("bonferroni", 0.05, ("S1", "S2")),))
    s1, _ = decide(plan, (fit,))[0]
    z = stats.norm.ppf(1 - 0.025 / 2)  # Bonferroni: each at 0.025, interval 97.5 %
    assert (f"odds ratio ({COACHED}) {fmt_num(math.exp(0.4))}, 97.5% CI "
            f"{fmt_num(math.exp(0.4 - z * 0.15))} to {fmt_num(math.exp(0.4 + z * 0.15))}"
            in s1.reason)


def test_a_non_inferiority_line_carries_the_estimate_as_well_as_the_bound():
    fit = same_exposure_fit({COACHED: (1.0, 1.0), LEAFLET: (0, 1.0)}, df=50)
    (v,), _ = decide(plan_with(decision("N1", test="non-inferiority", level="coached",
                                        direction="lower", margin=3.0)), (fit,))
    q = stats.t(50).ppf(0.95)  # 1 − 2α interval at α = 0.05
    assert (f"difference ({COACHED}) 1, 90% CI {fmt_num(1 - q)} to {fmt_num(1 + q)}"
            in v.reason)


def test_a_joint_test_line_carries_each_levels_estimate():
    from compiler.fitted import JointTest

    joint = JointTest("F", 2, 100.0, 5.0, 0.008)
    fit = analysis_fit(tier_fit("full", inference({COACHED: (2.0, 0.8), LEAFLET: (0.5, 0.8)},
                                                  joint=joint)))
    (v,), _ = decide(plan_with(decision("J1")), (fit,))
    assert f"difference ({COACHED}) 2, 95% CI" in v.reason
    assert f"difference ({LEAFLET}) 0.5, 95% CI" in v.reason


# ---- point 3: the fixed sequence names the p that stopped it ----------------------------

def test_an_untested_member_names_the_p_of_the_member_that_stopped_the_sequence():
    fit = same_exposure_fit({COACHED: (0.1, 1.0), LEAFLET: (0.5, 1.0)}, df=None)
    plan = plan_with(decision("P1", level="coached"), decision("P2", level="leaflet"),
                     multiplicity=(Multiplicity("fixed-sequence", 0.05, ("P1", "P2")),))
    _, p2 = decide(plan, (fit,))[0]
    p1_p = 2 * stats.norm.sf(0.1)  # 0.9203, scipy normal
    p2_p = 2 * stats.norm.sf(0.5)  # 0.6171
    assert f"stopped at P1, which was not rejected (p = {p1_p:.4f})" in p2.reason
    assert f"its own two-sided p = {p2_p:.4f}" in p2.reason


# ---- point 4: a one-sided rule above 0.025 carries a caution ----------------------------

@pytest.mark.parametrize("alpha, cautioned", [(0.05, True), (0.025, False), (0.01, False)])
def test_a_one_sided_superiority_rule_is_cautioned_above_0025(alpha, cautioned):
    fit = same_exposure_fit({COACHED: (2.0, 0.8), LEAFLET: (0.5, 0.8)})
    (v,), _ = decide(plan_with(decision("S1", level="coached", direction="higher",
                                        alpha=alpha)), (fit,))
    assert bool(v.cautions) is cautioned
    if cautioned:  # ICH E9, section 5.5: half the two-sided level (from memory)
        assert "0.025" in v.cautions[0] and "one-sided" in v.cautions[0]


def test_a_two_sided_rule_at_005_is_not_cautioned():
    fit = same_exposure_fit({COACHED: (2.0, 0.8), LEAFLET: (0.5, 0.8)})
    (v,), _ = decide(plan_with(decision("H1", level="coached")), (fit,))
    assert v.cautions == ()


def test_a_non_inferiority_member_of_a_family_at_005_is_cautioned():
    fit = same_exposure_fit({COACHED: (1.0, 1.0), LEAFLET: (0.5, 1.0)}, df=50)
    plan = plan_with(decision("N1", test="non-inferiority", level="coached",
                              direction="lower", margin=3.0),
                     decision("H2", level="leaflet"),
                     multiplicity=(Multiplicity("holm", 0.05, ("N1", "H2")),))
    n1, h2 = decide(plan, (fit,))[0]
    assert n1.cautions and "Holm family" in n1.cautions[0]
    assert h2.cautions == ()
