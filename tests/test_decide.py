"""The decide pass: each rule checked against scipy's reference distributions and the
multiplicity procedures against statsmodels. Fixtures are built in code (tests/fitbuilders)."""

from __future__ import annotations

import math

import pytest
from fitbuilders import (analysis_fit, comparison, decision, inference, plan_with,
                         same_exposure_fit, tier_fit, with_report_tier)
from scipy import stats
from statsmodels.stats.multitest import multipletests

from compiler.decide import decide
from compiler.fitted import JointTest
from compiler.plan import Assumption, Covariance, MinimumInformation, Multiplicity

COACHED = "guidance: coached vs none"
LEAFLET = "guidance: leaflet vs none"


def only(plan, fit):
    verdicts, _ = decide(plan, (fit,))
    return verdicts[0]


# ---- superiority -------------------------------------------------------------------------

def test_two_sided_superiority_uses_the_t_reference_p():
    v = only(plan_with(decision("H1", level="coached")),
             same_exposure_fit({COACHED: (2.0, 0.8), LEAFLET: (0.5, 0.8)}))
    assert v.numbers["p"] == pytest.approx(2 * stats.t(100).sf(2.5))  # scipy reference
    assert v.verdict == "supported"


def test_two_sided_superiority_reason_states_p_and_alpha():
    v = only(plan_with(decision("H1", level="coached")),
             same_exposure_fit({COACHED: (2.0, 0.8), LEAFLET: (0.5, 0.8)}))
    assert f"two-sided p = {2 * stats.t(100).sf(2.5):.4f} is below α = 0.05" in v.reason


def test_superiority_not_below_alpha_is_not_supported():
    v = only(plan_with(decision("H1", level="coached")),
             same_exposure_fit({COACHED: (1.0, 0.8), LEAFLET: (0.5, 0.8)}))
    assert v.verdict == "not supported" and "is not below α = 0.05" in v.reason


def test_one_sided_p_is_half_the_two_sided_p_in_the_favoured_direction():
    fit = same_exposure_fit({COACHED: (2.0, 0.8), LEAFLET: (0.5, 0.8)})
    two = only(plan_with(decision("H1", level="coached")), fit)
    one = only(plan_with(decision("H1", level="coached", direction="higher")), fit)
    assert one.numbers["p"] == pytest.approx(two.numbers["p"] / 2, rel=1e-12)


def test_one_sided_lower_p_is_half_the_two_sided_p_for_a_negative_estimate():
    fit = same_exposure_fit({COACHED: (-2.0, 0.8), LEAFLET: (0.5, 0.8)})
    two = only(plan_with(decision("H1", level="coached")), fit)
    one = only(plan_with(decision("H1", level="coached", direction="lower")), fit)
    assert one.numbers["p"] == pytest.approx(two.numbers["p"] / 2, rel=1e-12)


def test_one_sided_p_against_the_estimate_is_one_minus_half():
    fit = same_exposure_fit({COACHED: (2.0, 0.8), LEAFLET: (0.5, 0.8)})
    v = only(plan_with(decision("H1", level="coached", direction="lower")), fit)
    assert v.numbers["p"] == pytest.approx(1 - stats.t(100).sf(2.5))  # scipy t cdf
    assert v.verdict == "not supported"


def test_one_sided_interval_is_the_two_sided_one_minus_two_alpha_interval():
    fit = same_exposure_fit({COACHED: (2.0, 0.8), LEAFLET: (0.5, 0.8)})
    v = only(plan_with(decision("H1", level="coached", direction="higher", alpha=0.025)), fit)
    assert v.numbers["interval"]["level"] == pytest.approx(0.95)
    assert v.numbers["interval"]["low"] == pytest.approx(2.0 - stats.t(100).ppf(0.975) * 0.8)


def test_binomial_superiority_reports_the_odds_ratio_on_the_normal_reference():
    fit = same_exposure_fit({COACHED: (0.4, 0.15), LEAFLET: (0.1, 0.15)}, df=None,
                            family="binomial")
    v = only(plan_with(decision("S1", level="coached"), family="binomial"), fit)
    z = stats.norm.ppf(0.975)  # scipy normal quantile
    assert v.numbers["natural"]["scale"] == "odds ratio"
    assert v.numbers["natural"]["estimate"] == pytest.approx(math.exp(0.4))
    assert v.numbers["natural"]["low"] == pytest.approx(math.exp(0.4 - z * 0.15))
    assert v.numbers["scale"] == "log odds ratio"


def test_two_level_categorical_defaults_to_its_non_reference_level():
    fit = same_exposure_fit({COACHED: (2.0, 0.8)})
    v = only(plan_with(decision("H1"), levels=("none", "coached")), fit)
    assert v.numbers["estimate"] == 2.0


def test_two_sided_rule_on_three_levels_without_level_uses_the_joint_test():
    joint = JointTest("F", 2, 97, 5.1, 0.0078)
    fit = analysis_fit(tier_fit("full", inference({COACHED: (2, 0.8), LEAFLET: (1, 0.8)},
                                                  joint=joint)))
    v = only(plan_with(decision("H1")), fit)
    assert v.numbers["p"] == 0.0078 and v.verdict == "supported"
    assert "joint F test of guidance (2 df)" in v.reason


def test_missing_p_value_is_undetermined_not_a_crash():
    fit = same_exposure_fit({COACHED: (None, None), LEAFLET: (0.5, 0.8)})
    v = only(plan_with(decision("H1", level="coached")), fit)
    assert v.verdict == "undetermined" and "could not be computed" in v.reason


def test_non_finite_estimate_becomes_none_never_nan():
    fit = same_exposure_fit({COACHED: (float("nan"), 0.8), LEAFLET: (0.5, 0.8)})
    v = only(plan_with(decision("H1", level="coached")), fit)
    assert v.verdict == "undetermined"
    assert all(not (isinstance(x, float) and not math.isfinite(x)) for x in v.numbers.values())


# ---- non-inferiority and equivalence -----------------------------------------------------

def test_non_inferiority_compares_a_ratio_margin_on_the_log_scale():
    est, se, alpha = math.log(1.05), 0.1, 0.025
    fit = same_exposure_fit({COACHED: (est, se), LEAFLET: (0, se)}, df=None, family="binomial")
    v = only(plan_with(decision("N1", test="non-inferiority", level="coached",
                                direction="higher", margin=0.8, alpha=alpha),
                       family="binomial"), fit)
    lower = est - stats.norm.ppf(1 - alpha) * se  # hand computation, scipy normal quantile
    assert v.numbers["interval"]["low"] == pytest.approx(lower)
    assert v.verdict == ("supported" if lower > math.log(0.8) else "not supported")
    assert v.verdict == "supported"


def test_non_inferiority_p_is_the_shifted_one_sided_test():
    est, se = math.log(1.05), 0.1
    fit = same_exposure_fit({COACHED: (est, se), LEAFLET: (0, se)}, df=None, family="binomial")
    v = only(plan_with(decision("N1", test="non-inferiority", level="coached",
                                direction="higher", margin=0.8, alpha=0.025),
                       family="binomial"), fit)
    assert v.numbers["p"] == pytest.approx(stats.norm.sf((est - math.log(0.8)) / se))


def test_non_inferiority_lower_direction_needs_the_upper_end_below_the_margin():
    fit = same_exposure_fit({COACHED: (1.0, 1.0), LEAFLET: (0, 1.0)}, df=50)
    v = only(plan_with(decision("N1", test="non-inferiority", level="coached",
                                direction="lower", margin=3.0)), fit)
    upper = 1.0 + stats.t(50).ppf(0.95) * 1.0  # scipy t quantile: 2.676
    assert v.numbers["interval"]["high"] == pytest.approx(upper)
    assert v.verdict == "supported" and "is below the margin 3" in v.reason


def test_equivalence_matches_a_tost_hand_computation():
    est, se, df, alpha = 0.5, 0.6, 40, 0.05
    fit = same_exposure_fit({COACHED: (est, se), LEAFLET: (0, se)}, df=df)
    v = only(plan_with(decision("E1", test="equivalence", level="coached",
                                margins=(-2.0, 2.0), alpha=alpha)), fit)
    q = stats.t(df).ppf(1 - alpha)  # scipy t quantile, t_0.95(40)
    p = max(stats.t(df).sf((est + 2) / se), stats.t(df).cdf((est - 2) / se))
    interval = v.numbers["interval"]
    assert (interval["low"], interval["high"]) == pytest.approx((est - q * se, est + q * se))
    assert v.numbers["p"] == pytest.approx(p)
    assert v.verdict == "supported"


def test_equivalence_fails_when_the_interval_crosses_a_margin():
    fit = same_exposure_fit({COACHED: (1.5, 0.6), LEAFLET: (0, 0.6)}, df=40)
    v = only(plan_with(decision("E1", test="equivalence", level="coached",
                                margins=(-2.0, 2.0))), fit)
    # 1.5 + t_0.95(40)·0.6 = 2.51 > 2 (scipy t quantile)
    assert v.verdict == "not supported" and "does not lie inside" in v.reason


# ---- tier selection and change in estimate -----------------------------------------------

def _walk(*p_values, report_tier="full"):
    fit = same_exposure_fit({COACHED: (2, 1), LEAFLET: (1, 1)},
                            comparisons=(comparison("crude", "baseline", p_values[0]),
                                         comparison("baseline", "full", p_values[1])))
    plan = with_report_tier(plan_with(decision("T1", test="tier-selection")), report_tier)
    return only(plan, fit)


def test_tier_selection_agreeing_with_the_report_tier_is_supported():
    v = _walk(0.001, 0.01)
    assert v.numbers["selected_tier"] == "full" and v.verdict == "supported"


def test_tier_selection_stops_at_the_first_addition_not_needed():
    v = _walk(0.001, 0.30)
    assert v.numbers["selected_tier"] == "baseline" and v.numbers["agrees"] is False


def test_tier_selection_disagreement_is_worded_as_a_reported_check():
    v = _walk(0.001, 0.30)
    assert v.verdict == "not supported"
    assert "reported check" in v.reason and "primary analysis stays on full" in v.reason


def test_tier_selection_selects_the_first_tier_when_its_first_addition_is_not_needed():
    v = _walk(0.40, 0.001, report_tier="crude")
    assert v.numbers["selected_tier"] == "crude" and v.verdict == "supported"


def test_tier_selection_records_every_comparison_as_needed_or_not():
    v = _walk(0.40, 0.001)
    assert [c["needed"] for c in v.numbers["comparisons"]] == [False, True]


def test_tier_selection_with_a_missing_p_on_the_walk_is_undetermined():
    assert _walk(0.001, None).verdict == "undetermined"


def test_tier_selection_ignores_a_missing_p_after_the_walk_stopped():
    assert _walk(0.40, None, report_tier="crude").verdict == "supported"


def _change(start, end, threshold=0.10):
    tiers = [tier_fit(name, inference({COACHED: (est, 1.0), LEAFLET: (0.0, 1.0)}))
             for name, est in (("crude", start), ("baseline", start), ("full", end))]
    plan = plan_with(decision("C1", test="change-in-estimate", level="coached",
                              from_tier="crude", threshold=threshold))
    return only(plan, analysis_fit(*tiers))


def test_change_in_estimate_above_the_threshold_flags_confounding():
    # 10 % threshold: common practice (Mickey & Greenland 1989, from memory)
    v = _change(10.0, 8.5)
    assert v.numbers["relative"] == pytest.approx(0.15)  # |8.5 − 10| / |10|, by hand
    assert v.numbers["direction"] == "toward zero"
    assert v.verdict == "supported" and "confounding flagged" in v.reason
    assert "moved 15% toward zero, from 10 in crude to 8.5 in full" in v.reason


def test_change_in_estimate_within_the_threshold_flags_nothing():
    v = _change(10.0, 9.5)
    assert v.verdict == "not supported" and "no confounding flagged" in v.reason


def test_change_in_estimate_is_relative_to_the_size_of_a_negative_start():
    v = _change(-10.0, -12.0)
    assert v.numbers["relative"] == pytest.approx(0.2)  # |−12 + 10| / |−10|, by hand
    assert v.numbers["direction"] == "away from zero" and "moved 20% away from zero" in v.reason


def test_change_from_a_zero_estimate_is_undetermined():
    assert _change(0.0, 1.0).verdict == "undetermined"


# ---- assumption checks -------------------------------------------------------------------

def _heteroscedastic(bp_p):
    classical = inference({COACHED: (2.0, 0.8), LEAFLET: (0.5, 0.8)})
    hc3 = inference({COACHED: (2.0, 1.1), LEAFLET: (0.5, 1.1)}, covariance="HC3")
    fit = analysis_fit(tier_fit("full", classical, hc3), breusch_pagan_p=bp_p)
    a1 = Assumption("A1", "primary", "constant-variance", Covariance("HC3"), ("H1",),
                    p_below=0.05)
    return decide(plan_with(decision("H1", level="coached"), assumptions=(a1,)), (fit,))


def test_constant_variance_fallback_switches_to_the_named_covariance():
    (v,), _ = _heteroscedastic(0.003)
    assert v.covariance == "HC3"
    assert v.numbers["p"] == pytest.approx(2 * stats.t(100).sf(2.0 / 1.1))


def test_constant_variance_fallback_says_why_in_the_branch():
    (v,), (outcome,) = _heteroscedastic(0.003)
    assert "Breusch–Pagan p = 0.0030" in v.branch and "HC3 used" in v.branch
    assert outcome.triggered and outcome.covariance == "HC3"


def test_constant_variance_not_triggered_keeps_the_analysis_covariance():
    (v,), (outcome,) = _heteroscedastic(0.41)
    assert v.covariance == "classical" and "classical kept" in v.branch
    assert not outcome.triggered


def test_uncomputable_assumption_check_leaves_its_decisions_undetermined():
    (v,), (outcome,) = _heteroscedastic(None)
    assert v.verdict == "undetermined" and "could not be computed" in v.reason
    assert outcome.determined is False


def test_overdispersion_switches_a_poisson_rule_to_its_fallback():
    classical = inference({COACHED: (0.3, 0.1), LEAFLET: (0.1, 0.1)}, df=None)
    robust = inference({COACHED: (0.3, 0.2), LEAFLET: (0.1, 0.2)}, covariance="HC0", df=None)
    fit = analysis_fit(tier_fit("full", classical, robust, dispersion=2.4), family="poisson")
    a1 = Assumption("A2", "primary", "dispersion", Covariance("HC0"), ("P1",), above=1.5)
    (v,), _ = decide(plan_with(decision("P1", level="coached"), family="poisson",
                               assumptions=(a1,)), (fit,))
    assert v.covariance == "HC0" and "Pearson dispersion 2.4" in v.branch


# ---- minimum information -----------------------------------------------------------------

def test_too_few_events_per_parameter_makes_the_verdict_undetermined():
    # 10 events per parameter: common practice (Peduzzi et al. 1996, from memory);
    # 25 of 200 outcome events over 5 parameters = 5 per parameter
    fit = same_exposure_fit({COACHED: (1.0, 0.2), LEAFLET: (0.1, 0.2)}, df=None,
                            family="binomial", events=25)
    plan = plan_with(decision("S1", level="coached"), family="binomial",
                     minimum_information=MinimumInformation(events_per_parameter=10))
    v = only(plan, fit)
    assert v.verdict == "undetermined" and v.numbers["events_per_parameter"] == 5.0
    assert "below the plan's minimum of 10" in v.reason


def test_events_per_parameter_counts_the_rarer_outcome():
    # 180 events of 200: the rarer count is the 20 non-events, 4 per parameter
    fit = same_exposure_fit({COACHED: (1.0, 0.2), LEAFLET: (0.1, 0.2)}, df=None,
                            family="binomial", events=180)
    plan = plan_with(decision("S1", level="coached"), family="binomial",
                     minimum_information=MinimumInformation(events_per_parameter=3))
    v = only(plan, fit)
    assert v.numbers["events_per_parameter"] == 4.0 and v.verdict == "supported"


def test_too_small_a_sample_makes_the_verdict_undetermined():
    fit = same_exposure_fit({COACHED: (2.0, 0.8), LEAFLET: (0.5, 0.8)})
    v = only(plan_with(decision("H1", level="coached"),
                       minimum_information=MinimumInformation(n=500)), fit)
    assert v.verdict == "undetermined" and "only 200 rows" in v.reason


# ---- multiplicity through decide ---------------------------------------------------------

def _family(method, estimates, mi=MinimumInformation()):
    """One decision per exposure level; z statistics give the p-values."""
    effects = {COACHED: (estimates[0], 1.0), LEAFLET: (estimates[1], 1.0)}
    family = Multiplicity(method, 0.05, ("H1", "H2"))
    plan = plan_with(decision("H1", level="coached"), decision("H2", level="leaflet"),
                     multiplicity=(family,), minimum_information=mi)
    verdicts, _ = decide(plan, (same_exposure_fit(effects, df=None),))
    return verdicts


def test_holm_family_verdicts_follow_statsmodels_holm():
    verdicts = _family("holm", (2.6, 2.1))
    p = [v.numbers["p"] for v in verdicts]
    reject, corrected, _, _ = multipletests(p, alpha=0.05, method="holm")  # reference library
    assert [v.numbers["p_adjusted"] for v in verdicts] == pytest.approx(list(corrected))
    assert [v.verdict == "supported" for v in verdicts] == list(reject)


def test_holm_family_reason_names_the_adjustment():
    verdicts = _family("holm", (2.6, 2.1))
    assert "after Holm adjustment (adjusted p = " in verdicts[0].reason
    assert verdicts[0].multiplicity == "holm over H1, H2 at α = 0.05"


def test_family_members_are_held_to_the_step_alpha():
    verdicts = _family("holm", (2.6, 2.1))
    assert [v.numbers["alpha_used"] for v in verdicts] == pytest.approx([0.025, 0.05])


def test_holm_step_down_stop_is_explained():
    # z = 2.1 → p = 0.0357 > 0.025 fails step 1; z = 2.0 → 0.0455 < 0.05 is not reached
    verdicts = _family("holm", (2.1, 2.0))
    assert verdicts[1].verdict == "not supported"
    assert "step-down stopped earlier, at H1" in verdicts[1].reason


def test_hochberg_step_up_rejection_is_explained():
    # p = 0.0357 and 0.0455 (normal reference): 0.0455 < 0.05 rejects both (Hochberg 1988)
    verdicts = _family("hochberg", (2.1, 2.0))
    assert [v.verdict for v in verdicts] == ["supported", "supported"]
    assert "step-up rejects it" in verdicts[0].reason


def test_fixed_sequence_reports_members_it_never_reached():
    verdicts = _family("fixed-sequence", (1.0, 3.0))
    assert [v.verdict for v in verdicts] == ["not supported", "not supported"]
    assert verdicts[1].reason.startswith("not tested: the fixed sequence stopped at H1")


def test_undetermined_member_counts_as_not_rejected_and_others_say_so():
    effects = {COACHED: (None, None), LEAFLET: (3.0, 1.0)}
    plan = plan_with(decision("H1", level="coached"), decision("H2", level="leaflet"),
                     multiplicity=(Multiplicity("bonferroni", 0.05, ("H1", "H2")),))
    v1, v2 = decide(plan, (same_exposure_fit(effects, df=None),))[0]
    assert v1.verdict == "undetermined"
    assert v2.numbers["p_adjusted"] == pytest.approx(2 * 2 * stats.norm.sf(3.0))  # m = 2
    assert "H1 undetermined and counted as not rejected" in v2.reason


def test_decide_is_deterministic():
    first, second = _family("holm", (2.6, 2.1)), _family("holm", (2.6, 2.1))
    assert first == second


def test_member_undetermined_by_minimum_information_is_counted_as_not_rejected():
    verdicts = _family("holm", (4.0, 4.0), mi=MinimumInformation(n=500))
    assert [v.verdict for v in verdicts] == ["undetermined", "undetermined"]
    assert "counted as not rejected in the Holm family" in verdicts[0].reason


def test_change_in_estimate_that_reverses_the_sign_says_so():
    v = _change(2.0, -1.0)
    assert v.numbers["relative"] == pytest.approx(1.5)  # |−1 − 2| / |2|, by hand
    assert v.numbers["direction"] == "sign reversed"
    assert v.verdict == "supported" and "moved 150% and reversed its sign" in v.reason


def test_an_unchanged_estimate_did_not_move():
    v = _change(-4.0, -4.0)
    assert v.numbers["relative"] == 0.0 and v.numbers["direction"] == "none"
    assert v.verdict == "not supported" and "did not move" in v.reason
