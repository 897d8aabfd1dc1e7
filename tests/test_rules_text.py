"""The plain-words description of each rule, printed by `check --explain` before any data."""

from __future__ import annotations

from fitbuilders import decision, plan_with

from compiler.plan import Assumption, Covariance, Multiplicity
from compiler.rules_text import (describe_assumption, describe_family, describe_rule,
                                 exposure_term, fmt_num, fmt_p)


def test_p_values_print_to_four_decimals_or_as_below_a_ten_thousandth():
    assert (fmt_p(0.01274), fmt_p(0.00004)) == ("0.0127", "< 0.0001")


def test_numbers_print_to_three_significant_digits_without_exponents():
    assert (fmt_num(-6.2134), fmt_num(0.000812), fmt_num(12345.6)) == ("-6.21", "0.000812",
                                                                        "12346")


def test_a_huge_number_prints_in_exponent_notation_not_all_its_digits():
    # an outcome measured at 1e154 gave a verdict reason with a 157-digit integer
    assert (fmt_num(-7.1207e156), fmt_num(999999.4), fmt_num(2.5e6)) == ("-7.12e+156",
                                                                         "999999", "2.5e+06")


def test_a_rule_on_a_named_level_reads_that_level_column():
    plan = plan_with(decision("H1", level="coached"))
    assert exposure_term(plan, plan.decisions[0]) == "guidance: coached vs none"


def test_a_rule_without_level_on_three_levels_reads_the_joint_test():
    plan = plan_with(decision("H1"))
    assert exposure_term(plan, plan.decisions[0]) is None


def test_a_family_member_is_described_with_the_family_alpha():
    plan = plan_with(decision("H1", level="coached", alpha=0.01),
                     decision("H2", level="leaflet"),
                     multiplicity=(Multiplicity("holm", 0.05, ("H1", "H2")),))
    text = describe_rule(plan, plan.decisions[0])
    assert "family-wise α = 0.05 of its Holm family (H1, H2)" in text


def test_a_rule_with_a_fallback_names_it():
    a1 = Assumption("A1", "primary", "constant-variance", Covariance("HC3"), ("H1",),
                    p_below=0.05)
    plan = plan_with(decision("H1", level="coached"), assumptions=(a1,))
    assert "classical covariance (HC3 if A1 triggers)" in describe_rule(plan, plan.decisions[0])


def test_non_inferiority_is_described_by_its_interval_end_and_margin():
    plan = plan_with(decision("N1", test="non-inferiority", level="coached",
                              direction="higher", margin=0.8), family="binomial")
    text = describe_rule(plan, plan.decisions[0])
    assert "lower end of the one-sided (1 − α) interval" in text and "margin 0.8" in text
    assert "odds ratio" in text


def test_tier_selection_is_described_as_a_reported_check():
    plan = plan_with(decision("T1", test="tier-selection"))
    assert "never changes the primary analysis" in describe_rule(plan, plan.decisions[0])


def test_assumption_description_names_test_level_and_fallback():
    a1 = Assumption("A1", "primary", "constant-variance", Covariance("HC3"), ("H1", "H2"),
                    p_below=0.05)
    text = describe_assumption(plan_with(), a1)
    assert "Breusch–Pagan" in text and "p < 0.05" in text and "use HC3" in text


def test_bonferroni_family_description_gives_the_alpha_each_is_held_to():
    family = Multiplicity("bonferroni", 0.05, ("H1", "H2"))
    assert "each is held to α/2 = 0.025" in describe_family(plan_with(), family)


def test_holm_family_description_lists_the_step_alphas():
    family = Multiplicity("holm", 0.05, ("H1", "H2", "H3"))
    assert "(0.01667, 0.025, 0.05)" in describe_family(plan_with(), family)
