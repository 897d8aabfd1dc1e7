"""The resolve pass on decision rules, assumption checks and multiplicity families: every
problem at the offending value's own line:col."""

from __future__ import annotations

from resolve_plans import BASE, at, compile_plan, problems, variant, with_rules, write


# ---- ids --------------------------------------------------------------------------------------


def test_a_duplicate_analysis_id(tmp_path):
    text = BASE.replace("analyses:\n", "analyses:\n  - {id: main, outcome: y, family: gaussian, exposure: arm, tiers: [{name: t}]}\n")
    assert problems(tmp_path, text) == [("analysis id `main` is used twice (first at line 20)", 21, 9)]


def test_decisions_and_assumptions_share_one_id_space(tmp_path):
    text = BASE + ("assumptions:\n  - {id: H1, analysis: main, check: constant-variance, "
                   "fallback: {covariance: HC3}, applies_to: [H1]}\n")
    assert problems(tmp_path, text) == [
        ("id `H1` is used twice (first at line 29); decisions and assumptions share one set of ids",
         31, 10)]


# ---- decision rules ---------------------------------------------------------------------------


def test_an_unknown_analysis_in_a_decision(tmp_path):
    text = with_rules("  - {id: H1, analysis: mian, test: superiority, level: high}\n")
    assert problems(tmp_path, text) == [("unknown analysis `mian` (main)", *at(text, 29, "mian"))]


def test_an_unknown_decision_tier(tmp_path):
    text = with_rules("  - {id: H1, analysis: main, test: superiority, level: high, tier: full}\n")
    assert problems(tmp_path, text) == [("`full` is not a tier of analysis `main` (crude, adjusted)", *at(text, 29, "full"))]


def test_a_one_sided_rule_on_a_multi_level_exposure_must_name_its_level(tmp_path):
    text = with_rules("  - {id: H1, analysis: main, test: superiority, direction: lower}\n")
    assert problems(tmp_path, text) == [
        ("decision `H1` must name `level`: a lower rule compares one level of `arm` with `control`, "
         "and there are 2 (low, high)", 29, 5)]


def test_a_two_sided_rule_without_level_is_a_joint_test(tmp_path):
    text = with_rules("  - {id: H1, analysis: main, test: superiority}\n")
    assert compile_plan(write(tmp_path, text)).decisions[0].level is None


def test_the_level_may_not_be_the_reference(tmp_path):
    text = with_rules("  - {id: H1, analysis: main, test: superiority, level: control}\n")
    assert problems(tmp_path, text) == [
        ("`control` is the reference level of `arm`; name a level to compare with it (low, high)",
         *at(text, 29, "control}"))]


def test_the_level_must_be_declared(tmp_path):
    text = with_rules("  - {id: H1, analysis: main, test: superiority, level: hihg}\n")
    assert problems(tmp_path, text) == [("`hihg` is not a level of `arm` (control, low, high)", *at(text, 29, "hihg"))]


def test_a_level_for_a_continuous_exposure_is_refused(tmp_path):
    text = variant("    exposure: arm\n", "    exposure: dose\n")
    assert problems(tmp_path, text) == [
        ("`level` names a level of a categorical exposure, but `dose` is continuous", *at(text, 29, "high"))]


def test_a_field_that_means_nothing_for_the_test_is_refused(tmp_path):
    text = with_rules("  - {id: H1, analysis: main, test: superiority, level: high, margin: 2}\n")
    assert problems(tmp_path, text) == [
        ("`margin` has no meaning for a superiority rule (decision `H1`)", *at(text, 29, "margin"))]


def test_non_inferiority_needs_a_margin(tmp_path):
    text = with_rules("  - {id: N1, analysis: main, test: non-inferiority, level: high, direction: higher}\n")
    assert problems(tmp_path, text) == [
        ("non-inferiority `N1` needs `margin`: the largest loss still accepted", 29, 5)]


def test_non_inferiority_needs_a_direction(tmp_path):
    text = with_rules("  - {id: N1, analysis: main, test: non-inferiority, level: high, margin: -2}\n")
    assert problems(tmp_path, text) == [
        ("non-inferiority `N1` needs `direction`: higher (larger values are better) or lower "
         "(smaller values are better)", 29, 5)]


def test_a_two_sided_non_inferiority_rule_is_told_why_two_sided_is_wrong(tmp_path):
    text = with_rules("  - {id: N1, analysis: main, test: non-inferiority, level: high, "
                      "margin: -2, direction: two-sided}\n")
    (message, line, col), = problems(tmp_path, text)
    assert "cannot be two-sided" in message and "one-sided by nature" in message
    assert "needs `direction`" not in message  # a direction was given
    assert (line, col) == at(text, 29, "two-sided")


def test_a_difference_margin_with_direction_higher_must_be_negative(tmp_path):
    text = with_rules("  - {id: N1, analysis: main, test: non-inferiority, level: high, "
                      "direction: higher, margin: 2}\n")
    assert problems(tmp_path, text) == [
        ("with direction higher (larger is better) the non-inferiority margin on the difference "
         "scale must be below 0, not 2", 29, 93)]


def test_a_ratio_margin_with_direction_lower_must_exceed_one(tmp_path):
    text = variant("    outcome: y\n    family: gaussian\n", "    outcome: event\n    family: binomial\n")
    text = with_rules("  - {id: N1, analysis: main, test: non-inferiority, level: high, "
                      "direction: lower, margin: 0.8}\n").replace(
        "    outcome: y\n    family: gaussian\n", "    outcome: event\n    family: binomial\n")
    assert problems(tmp_path, text) == [
        ("with direction lower (smaller is better) the non-inferiority margin on the ratio scale "
         "must be above 1, not 0.8", 29, 92)]


def test_equivalence_margins_must_straddle_no_difference(tmp_path):
    text = with_rules("  - {id: E1, analysis: main, test: equivalence, level: high, margins: [1, 3]}\n")
    assert problems(tmp_path, text) == [
        ("equivalence margins [1, 3] must satisfy low < 0 < high on the difference scale", 29, 71)]


def test_equivalence_needs_margins(tmp_path):
    text = with_rules("  - {id: E1, analysis: main, test: equivalence, level: high}\n")
    assert problems(tmp_path, text) == [("equivalence `E1` needs `margins: [low, high]`", 29, 5)]


def test_change_in_estimate_measures_from_an_earlier_tier(tmp_path):
    text = with_rules("  - {id: C1, analysis: main, test: change-in-estimate, level: high, "
                      "from_tier: adjusted, tier: crude}\n")
    assert problems(tmp_path, text) == [
        ("change-in-estimate `C1` measures the change from tier `adjusted` to tier `crude`, so "
         "`adjusted` must come first", 29, 80)]


def test_an_unknown_from_tier(tmp_path):
    text = with_rules("  - {id: C1, analysis: main, test: change-in-estimate, level: high, "
                      "from_tier: raw}\n")
    assert problems(tmp_path, text) == [("`raw` is not a tier of analysis `main` (crude, adjusted)", 29, 80)]


def test_tier_selection_takes_no_tier(tmp_path):
    text = with_rules("  - {id: T1, analysis: main, test: tier-selection, tier: crude}\n")
    assert problems(tmp_path, text) == [
        ("`tier` has no meaning for a tier-selection rule (decision `T1`)", 29, 52)]


# ---- assumptions ------------------------------------------------------------------------------

ASSUMPTION = ("assumptions:\n  - {id: A1, analysis: main, check: CHECK, fallback: {covariance: HC3}, "
              "applies_to: [H1]}\n")


def test_constant_variance_applies_to_gaussian_analyses_only(tmp_path):
    text = variant("    outcome: y\n    family: gaussian\n", "    outcome: event\n    family: binomial\n")
    text += ASSUMPTION.replace("CHECK", "constant-variance")
    assert problems(tmp_path, text) == [
        ("a constant-variance check applies to gaussian analyses; `main` is binomial",
         *at(text, 31, "constant-variance"))]


def test_dispersion_applies_to_binomial_and_poisson_only(tmp_path):
    text = BASE + ASSUMPTION.replace("CHECK", "dispersion").replace("check: dispersion,", "check: dispersion, above: 1.5,")
    assert problems(tmp_path, text) == [
        ("a dispersion check applies to binomial and poisson analyses; `main` is gaussian",
         *at(text, 31, "dispersion"))]


def test_an_assumption_applies_to_known_decisions_only(tmp_path):
    text = BASE + ASSUMPTION.replace("CHECK", "constant-variance").replace("[H1]", "[H2]")
    assert problems(tmp_path, text) == [("unknown decision `H2`", *at(text, 31, "H2"))]


def test_an_assumption_applies_to_decisions_of_its_own_analysis(tmp_path):
    text = BASE.replace("decisions:\n", "  - {id: other, outcome: y, family: gaussian, exposure: sex, "
                                        "tiers: [{name: t}], population: adults}\ndecisions:\n")
    text += ASSUMPTION.replace("CHECK", "constant-variance").replace("analysis: main", "analysis: other")
    assert problems(tmp_path, text) == [
        ("decision `H1` reads analysis `main`, not `other`", *at(text, 32, "H1]"))]


def test_an_unknown_fallback_cluster(tmp_path):
    text = BASE + ASSUMPTION.replace("CHECK", "constant-variance").replace("HC3", "{cluster: ward}")
    assert problems(tmp_path, text) == [("unknown variable `ward` (cluster of assumption `A1`)", *at(text, 31, "ward"))]


# ---- multiplicity -----------------------------------------------------------------------------


def test_a_family_member_must_exist(tmp_path):
    text = BASE + "multiplicity:\n  - {method: holm, alpha: 0.05, decisions: [H1, H9]}\n"
    assert problems(tmp_path, text) == [("unknown decision `H9`", *at(text, 31, "H9"))]


def test_a_decision_belongs_to_one_family_at_most(tmp_path):
    text = BASE + ("multiplicity:\n  - {method: holm, alpha: 0.05, decisions: [H1]}\n"
                   "  - {method: bonferroni, alpha: 0.05, decisions: [H1]}\n")
    assert problems(tmp_path, text) == [("decision `H1` already belongs to the holm family at line 31",
                                      *at(text, 32, "H1"))]


def test_a_family_holds_only_tests_of_the_exposure_effect(tmp_path):
    text = with_rules("  - {id: T1, analysis: main, test: tier-selection}\n")
    text += "multiplicity:\n  - {method: holm, alpha: 0.05, decisions: [T1]}\n"
    assert problems(tmp_path, text) == [
        ("decision `T1` is a tier-selection rule; a multiplicity family holds superiority, "
         "non-inferiority and equivalence rules", *at(text, 31, "T1"))]


def test_a_member_may_not_state_its_own_alpha(tmp_path):
    text = with_rules("  - {id: H1, analysis: main, test: superiority, level: high, alpha: 0.01}\n")
    text += "multiplicity:\n  - {method: holm, alpha: 0.05, decisions: [H1]}\n"
    assert problems(tmp_path, text) == [
        ("decision `H1` states alpha 0.01, but it belongs to a holm family held to alpha 0.05; "
         "members take the family's alpha", *at(text, 29, "0.01"))]
