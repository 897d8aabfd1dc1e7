"""The resolve pass: variables, populations, analyses, terms and tiers checked for meaning,
every problem at the offending value's own line:col."""

from __future__ import annotations

import pytest
from resolve_plans import BASE, at, compile_plan, hints, problems, variant, with_rules, write


# ---- the Plan built ---------------------------------------------------------------------------


def test_the_demo_plan_resolves():
    plan = compile_plan("plans/dusk-sleep.yaml")
    assert plan.study.id == "dusk-sleep"
    assert [a.id for a in plan.analyses] == ["primary", "settled", "awakenings"]


def test_the_plan_remembers_its_source_path_as_given(tmp_path):
    path = write(tmp_path, BASE)
    assert compile_plan(path).source == path


def test_defaults_are_filled_in(tmp_path):
    plan = compile_plan(write(tmp_path, BASE))
    main = plan.analysis("main")
    assert (main.report_tier, main.confidence, main.covariance.label) == ("adjusted", 0.95, "classical")
    assert plan.data.missing == ("", "NA")
    decision = plan.decisions[0]
    assert (decision.tier, decision.alpha, decision.direction) == ("adjusted", 0.05, "two-sided")


def test_a_categorical_reference_defaults_to_the_first_level(tmp_path):
    assert compile_plan(write(tmp_path, BASE)).variable("arm").reference == "control"


def test_tiers_are_cumulative_with_the_exposure_first(tmp_path):
    tiers = compile_plan(write(tmp_path, BASE)).analysis("main").tiers
    assert [t.label for t in tiers[0].terms] == ["arm"]
    assert [t.label for t in tiers[1].terms] == ["arm", "age", "sex"]
    assert [t.label for t in tiers[1].added] == ["age", "sex"]


def test_places_point_into_the_plan(tmp_path):
    plan = compile_plan(write(tmp_path, BASE))
    added = plan.analysis("main").tiers[1].added
    assert [(t.place.line, t.place.col) for t in added] == [(27, 15), (27, 20)]
    assert (plan.variable("sex").place.line, plan.analysis("main").place.line) == (8, 20)


def test_the_only_population_is_used_when_an_analysis_names_none(tmp_path):
    assert compile_plan(write(tmp_path, BASE)).analysis("main").population == "adults"


def test_no_population_means_all_rows(tmp_path):
    text = variant("populations:\n  adults:\n    where:\n      - {variable: age, at_least: 18}\n",
                   "\n\n\n\n")
    assert compile_plan(write(tmp_path, text)).analysis("main").population is None


def test_numeric_level_codes_are_kept_as_written(tmp_path):
    text = variant("levels: [north, south]}", "levels: [01, 02], reference: 02}")
    site = compile_plan(write(tmp_path, text)).variable("site")
    assert (site.levels, site.reference) == (("01", "02"), "02")


def test_a_level_named_no_stays_a_level(tmp_path):
    text = variant("levels: [f, m]}", "levels: [no, yes, off]}")
    assert compile_plan(write(tmp_path, text)).variable("sex").levels == ("no", "yes", "off")


def test_a_two_level_exposure_defaults_to_its_other_level(tmp_path):
    text = with_rules("  - {id: H1, analysis: main, test: superiority, direction: higher}\n")
    text = variant("    exposure: arm\n", "    exposure: site\n", text)
    assert compile_plan(write(tmp_path, text)).decisions[0].level == "south"


def test_members_of_a_family_take_its_alpha(tmp_path):
    text = BASE + "multiplicity:\n  - {method: holm, alpha: 0.025, decisions: [H1]}\n"
    assert compile_plan(write(tmp_path, text)).decisions[0].alpha == 0.025


# ---- variables used are declared --------------------------------------------------------------


def test_an_unknown_outcome_is_named_with_a_suggestion(tmp_path):
    text = variant("    outcome: y\n", "    outcome: yy\n")
    assert problems(tmp_path, text) == [("unknown variable `yy` (outcome of analysis `main`)", 21, 14)]
    assert hints(tmp_path, text) == ["did you mean `y`?"]


def test_a_term_that_looks_like_code_is_an_unknown_variable(tmp_path):
    text = variant("add: [age, sex]", "add: [age, \"age + os.system('x')\"]")
    assert problems(tmp_path, text) == [
        ("unknown variable `age + os.system('x')` (term of analysis `main`)", 27, 20)]


def test_nothing_written_in_a_term_is_ever_run(tmp_path):
    target = tmp_path / "ran"
    code = f"__import__('os').mkdir('{target}')"
    text = variant("add: [age, sex]", f'add: [age, "{code}"]')
    assert problems(tmp_path, text)[0][0].startswith("unknown variable `__import__")
    assert not target.exists()


def test_an_unknown_variable_in_a_population_condition(tmp_path):
    text = variant("{variable: age, at_least: 18}", "{variable: agee, at_least: 18}")
    assert problems(tmp_path, text) == [
        ("unknown variable `agee` (condition of population `adults`)", 18, 20)]


def test_an_unknown_row_id(tmp_path):
    text = variant("data: {row_id: pid}", "data: {row_id: participant}")
    assert problems(tmp_path, text) == [("unknown variable `participant` (data.row_id)", 3, 16)]


def test_a_row_id_must_be_an_identifier(tmp_path):
    text = variant("data: {row_id: pid}", "data: {row_id: visits}")
    assert problems(tmp_path, text) == [
        ("row_id `visits` is declared count; a row id must be kind identifier", 3, 16)]


def test_an_unknown_cluster_variable(tmp_path):
    text = variant("    tiers:\n", "    covariance: {cluster: ward}\n    tiers:\n")
    assert problems(tmp_path, text)[0] == ("unknown variable `ward` (cluster of analysis `main`)", *at(text, 24, "ward"))


def test_a_continuous_cluster_variable_is_refused(tmp_path):
    text = variant("    tiers:\n", "    covariance: {cluster: age}\n    tiers:\n")
    assert problems(tmp_path, text)[0] == (
        "cluster variable `age` is continuous; clusters are named by an identifier, categorical "
        "or count code", *at(text, 24, "age"))


# ---- kinds fit their use ----------------------------------------------------------------------


def test_a_power_of_a_categorical_is_refused(tmp_path):
    text = variant("add: [age, sex]", "add: [age, {power: sex, degree: 2}]")
    assert problems(tmp_path, text) == [
        ("a power term needs a continuous or count variable; `sex` is categorical", 27, 28)]


def test_a_log_of_a_binary_is_refused(tmp_path):
    text = variant("add: [age, sex]", "add: [age, {log: smoker}]")
    assert problems(tmp_path, text) == [
        ("a log term needs a continuous or count variable; `smoker` is binary", 27, 26)]


def test_a_log_of_a_variable_that_may_be_zero_is_refused(tmp_path):
    text = variant("dose: {kind: continuous, min: 1,", "dose: {kind: continuous, min: 0,")
    text = variant("add: [age, sex]", "add: [age, {log: dose}]", text)
    assert problems(tmp_path, text) == [
        ("log(dose) needs positive values, but `dose` may be as small as 0 (its declared min)",
         27, 26)]


def test_a_spline_of_a_categorical_is_refused(tmp_path):
    text = variant("add: [age, sex]", "add: [age, {spline: sex, knots: [1, 2, 3]}]")
    assert problems(tmp_path, text) == [
        ("a spline term needs a continuous or count variable; `sex` is categorical", 27, 29)]


def test_spline_knots_must_increase(tmp_path):
    text = variant("add: [age, sex]", "add: [sex, {spline: age, knots: [30, 50, 40]}]")
    assert problems(tmp_path, text) == [("spline knots must increase strictly; 40 follows 50", 27, 50)]


def test_spline_knots_must_lie_in_the_declared_range(tmp_path):
    text = variant("add: [age, sex]", "add: [sex, {spline: age, knots: [10, 50, 70]}]")
    assert problems(tmp_path, text) == [
        ("knot 10 lies outside the declared range of `age` (18 to 90)", 27, 42)]


def test_a_reference_must_be_one_of_the_levels(tmp_path):
    text = variant("levels: [control, low, high]}", "levels: [control, low, high], reference: Control}")
    assert problems(tmp_path, text) == [
        ("reference `Control` is not a level of `arm` (control, low, high)", *at(text, 7, "Control"))]
    assert hints(tmp_path, text) == ["did you mean `control`?"]


def test_levels_must_be_unique(tmp_path):
    text = variant("levels: [f, m]}", "levels: [f, m, f]}")
    assert problems(tmp_path, text) == [("level `f` of `sex` is listed twice (first at column 37)", 8, 43)]


def test_min_must_not_exceed_max(tmp_path):
    text = variant("age: {kind: continuous, min: 18, max: 90}", "age: {kind: continuous, min: 90, max: 18}")
    assert problems(tmp_path, text) == [("min 90 of `age` is larger than its max 18", 9, 41)]


def test_levels_on_a_continuous_variable_are_refused(tmp_path):
    text = variant("  visits: {kind: count}", "  visits: {kind: count, levels: [a, b]}")
    assert problems(tmp_path, text) == [
        ("`levels` applies only to categorical variables; `visits` is count", *at(text, 11, "levels"))]


def test_no_variable_may_be_named_like_the_intercept_column(tmp_path):
    text = variant("  visits: {kind: count}", '  "intercept": {kind: count}')
    assert problems(tmp_path, text) == [
        ("`intercept` is the label of the model's intercept column, so no variable may be "
         "named so", 11, 3)]


def test_a_categorical_without_levels_is_refused(tmp_path):
    text = variant("  site: {kind: categorical, levels: [north, south]}", "  site: {kind: categorical}")
    assert problems(tmp_path, text) == [
        ("categorical variable `site` needs `levels`: every level it may hold", 14, 9)]


@pytest.mark.parametrize("family, wanted", [("binomial", "binary"), ("poisson", "count")])
def test_the_outcome_must_fit_the_family(tmp_path, family, wanted):
    text = variant("    family: gaussian\n", f"    family: {family}\n")
    assert problems(tmp_path, text) == [
        (f"outcome `y` is continuous, but a {family} analysis needs a {wanted} outcome", 21, 14)]


def test_a_gaussian_outcome_may_not_be_binary(tmp_path):
    text = variant("    outcome: y\n", "    outcome: event\n")
    assert problems(tmp_path, text) == [
        ("outcome `event` is binary, but a gaussian analysis needs a continuous or count outcome",
         21, 14)]


def test_the_exposure_may_not_be_an_identifier(tmp_path):
    text = variant("    exposure: arm\n", "    exposure: pid\n")
    found = problems(tmp_path, text)
    assert ("exposure `pid` is an identifier; identifiers are never modelled", 23, 15) in found


def test_an_identifier_may_not_be_a_term(tmp_path):
    text = variant("add: [age, sex]", "add: [age, pid]")
    assert problems(tmp_path, text) == [
        ("`pid` is an identifier; identifiers are never model terms", 27, 20)]


def test_an_offset_belongs_to_a_poisson_analysis(tmp_path):
    text = variant("    tiers:\n", "    offset: dose\n    tiers:\n")
    assert problems(tmp_path, text) == [
        ("an offset belongs to a poisson analysis; analysis `main` is gaussian", 24, 13)]


def test_an_offset_must_be_continuous_or_count(tmp_path):
    text = variant("    outcome: y\n    family: gaussian\n", "    outcome: visits\n    family: poisson\n")
    text = variant("    tiers:\n", "    offset: site\n    tiers:\n", text)
    assert problems(tmp_path, text) == [
        ("offset `site` is categorical; an offset is a continuous or count exposure time", 24, 13)]


def test_events_per_parameter_is_not_for_gaussian_analyses(tmp_path):
    text = variant("    tiers:\n", "    minimum_information: {events_per_parameter: 10}\n    tiers:\n")
    assert problems(tmp_path, text) == [
        ("events_per_parameter applies to binomial and poisson analyses, not gaussian", 24, 27)]


# ---- terms and tiers --------------------------------------------------------------------------


def test_a_term_added_twice_across_tiers(tmp_path):
    text = variant("        add: [age, sex]\n", "        add: [age, sex]\n      - name: more\n        add: [smoker, age]\n")
    assert problems(tmp_path, text) == [("term `age` is already added in tier `adjusted`", 29, 23)]


def test_a_product_written_in_another_order_is_the_same_term(tmp_path):
    text = variant("add: [age, sex]", "add: [{product: [age, sex]}, {product: [sex, age]}]")
    assert problems(tmp_path, text) == [
        ("term `sex × age` is already added in tier `adjusted`", 27, 38)]


def test_a_term_equal_to_the_exposure(tmp_path):
    text = variant("add: [age, sex]", "add: [age, arm]")
    assert problems(tmp_path, text) == [
        ("`arm` is the exposure of analysis `main`; every tier already holds it", 27, 20)]


def test_a_term_involving_the_outcome(tmp_path):
    text = variant("add: [age, sex]", "add: [age, {product: [sex, y]}]")
    assert problems(tmp_path, text) == [("`y` is the outcome; it cannot also be a term", 27, 36)]


def test_a_product_of_the_same_variable_twice(tmp_path):
    text = variant("add: [age, sex]", "add: [sex, {product: [age, age]}]")
    assert problems(tmp_path, text) == [
        ("`age` appears twice in the product; a product multiplies distinct variables", 27, 36)]


def test_a_tier_name_used_twice(tmp_path):
    text = variant("      - name: adjusted\n", "      - name: crude\n")
    assert problems(tmp_path, text) == [
        ("tier name `crude` is used twice in analysis `main` (first at line 25)", 26, 15)]


def test_the_first_tier_holds_the_exposure_alone(tmp_path):
    text = variant("      - name: crude\n", "      - {name: crude, add: [age]}\n")
    assert problems(tmp_path, text) == [
        ("the first tier (`crude`) holds the exposure alone; move its `add` terms to a later tier",
         25, 23)]


def test_a_later_tier_must_add_terms(tmp_path):
    text = variant("        add: [age, sex]\n", "        add: [age, sex]\n      - name: same\n")
    assert problems(tmp_path, text) == [
        ("tier `same` adds no terms; every tier after the first adds at least one", 28, 9)]


def test_an_unknown_report_tier(tmp_path):
    text = variant("    tiers:\n", "    report_tier: adjustd\n    tiers:\n")
    assert problems(tmp_path, text) == [
        ("report_tier `adjustd` is not a tier of analysis `main` (crude, adjusted)", 24, 18)]
    assert hints(tmp_path, text) == ["did you mean `adjusted`?"]


# ---- populations ------------------------------------------------------------------------------


def test_an_unknown_population(tmp_path):
    text = variant("    outcome: y\n", "    population: adult\n    outcome: y\n")
    assert problems(tmp_path, text) == [("unknown population `adult` (adults)", *at(text, 21, "adult"))]


def test_an_analysis_must_name_its_population_when_several_are_declared(tmp_path):
    text = variant("      - {variable: age, at_least: 18}\n",
                   "      - {variable: age, at_least: 18}\n  smokers: {where: [{variable: smoker, equals: 1}]}\n")
    assert problems(tmp_path, text) == [
        ("analysis `main` must name its `population`: the plan declares 2 (adults, smokers)", 21, 5)]


def test_an_ordered_comparison_on_a_categorical_is_refused(tmp_path):
    text = variant("{variable: age, at_least: 18}", "{variable: sex, at_least: 1}")
    assert problems(tmp_path, text) == [("`at_least` compares numbers, but `sex` is categorical", *at(text, 18, "1}"))]


def test_a_categorical_is_compared_with_declared_levels_only(tmp_path):
    text = variant("{variable: age, at_least: 18}", "{variable: site, in: [north, west]}")
    assert problems(tmp_path, text) == [("`west` is not a level of `site`", *at(text, 18, "west"))]


def test_a_level_in_the_wrong_case_gets_a_hint(tmp_path):
    text = variant("{variable: age, at_least: 18}", "{variable: site, equals: North}")
    assert problems(tmp_path, text) == [("`North` is not a level of `site`", *at(text, 18, "North"))]
    assert hints(tmp_path, text) == ["levels match exactly, letter case included: did you mean `north`?"]


def test_a_binary_is_compared_with_0_or_1_only(tmp_path):
    text = variant("{variable: age, at_least: 18}", "{variable: smoker, equals: 2}")
    assert problems(tmp_path, text) == [("`smoker` is binary (0/1); compare it with 0 or 1, not 2", *at(text, 18, "2}"))]


def test_a_number_is_not_compared_with_text(tmp_path):
    text = variant("{variable: age, at_least: 18}", "{variable: age, equals: old}")
    assert problems(tmp_path, text) == [
        ("`age` is continuous; `equals` needs a number here, not `old`", *at(text, 18, "old"))]


# ---- all together -----------------------------------------------------------------------------


def test_every_problem_is_reported_at_once_in_file_order(tmp_path):
    text = variant("    outcome: y\n", "    outcome: yy\n")
    text = variant("add: [age, sex]", "add: [age, pid]", text)
    text = variant("{variable: age, at_least: 18}", "{variable: sex, at_least: 1}", text)
    assert [(line, col) for _, line, col in problems(tmp_path, text)] == [
        at(text, 18, "1}"), at(text, 21, "yy"), at(text, 27, "pid")]


@pytest.mark.parametrize("extra, said", [
    ("{variable: age, below: 18}",
     "no value of `age` can meet age < 18 together with age ≥ 18 (declared range [18, 90])"),
    ("{variable: age, above: 90}",
     "no value of `age` can meet age > 90 together with age ≥ 18 (declared range [18, 90])"),
])
def test_a_population_whose_bounds_leave_no_value_is_refused_at_its_condition(tmp_path, extra, said):
    text = variant("      - {variable: age, at_least: 18}\n",
                   f"      - {{variable: age, at_least: 18}}\n      - {extra}\n")
    [(message, line, col)] = problems(tmp_path, text)
    assert message == f"population `adults`: {said}" and (line, col) == (19, 9)


@pytest.mark.parametrize("extra", ["{variable: age, at_most: 18}", "{variable: age, below: 18.5}"])
def test_bounds_that_leave_one_value_or_a_sliver_are_accepted(tmp_path, extra):
    text = variant("      - {variable: age, at_least: 18}\n",
                   f"      - {{variable: age, at_least: 18}}\n      - {extra}\n")
    assert compile_plan(write(tmp_path, text)).populations[0].name == "adults"
