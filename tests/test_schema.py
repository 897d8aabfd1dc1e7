"""plan.schema.json and the validate pass: shape errors at their place, in plain words."""

from __future__ import annotations

import json

import pytest
from jsonschema import Draft202012Validator

from compiler import load, validate
from compiler.problems import Exit, Stop
from compiler.resources import schema_path

# A small valid plan; tests replace one line each, so line numbers stay put.
BASE = """\
prespec: 1
study: {id: trial, version: "1.0"}
variables:
  y: {kind: continuous}
  arm: {kind: categorical, levels: [control, active]}
  age: {kind: continuous}
analyses:
  - id: main
    outcome: y
    family: gaussian
    exposure: arm
    tiers:
      - name: crude
      - name: adjusted
        add: [age]
decisions:
  - {id: H1, analysis: main, test: superiority, alpha: 0.05}
"""


def problems(tmp_path, text: str) -> list[tuple[str, int, int, str | None]]:
    path = tmp_path / "plan.yaml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(Stop) as caught:
        validate.validate(load.load(str(path)))
    assert caught.value.exit_code == Exit.PLAN_INVALID
    return [(p.message, p.place.line, p.place.col, p.hint) for p in caught.value.problems]


def variant(old: str, new: str) -> str:
    assert old in BASE
    return BASE.replace(old, new, 1)


def schema() -> dict:
    return json.loads(schema_path("plan.schema.json").read_text(encoding="utf-8"))


# ---- the schema itself ------------------------------------------------------------------------


def test_the_schema_is_valid_json_schema_2020_12():
    document = schema()
    assert document["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    Draft202012Validator.check_schema(document)


def test_the_schema_has_an_id():
    assert schema()["$id"]


def _objects(node):
    if isinstance(node, dict):
        if "properties" in node:
            yield node
        for value in node.values():
            yield from _objects(value)
    elif isinstance(node, list):
        for value in node:
            yield from _objects(value)


def test_every_property_has_a_description():
    missing = [name for obj in _objects(schema()) for name, prop in obj["properties"].items()
               if "description" not in prop]
    assert missing == []


def test_every_object_refuses_unknown_keys():
    open_objects = [sorted(obj["properties"]) for obj in _objects(schema())
                    if obj.get("additionalProperties") is not False]
    assert open_objects == []


def test_the_small_plan_is_valid(tmp_path):
    path = tmp_path / "plan.yaml"
    path.write_text(BASE, encoding="utf-8")
    validate.validate(load.load(str(path)))


def test_the_demo_plan_is_valid():
    validate.validate(load.load("plans/dusk-sleep.yaml"))


# ---- shape errors -----------------------------------------------------------------------------


def test_an_unknown_key_is_named_at_its_place_with_the_nearest_known_key(tmp_path):
    text = variant("    outcome: y\n", "    outcome: y\n    populaton: all\n")
    assert problems(tmp_path, text) == [
        ("unknown key `populaton` in item 1 of `analyses`", 10, 5, "did you mean `population`?")]


def test_an_unknown_key_without_a_near_match_lists_the_allowed_keys(tmp_path):
    text = variant('study: {id: trial, version: "1.0"}', 'study: {id: trial, colour: red}')
    assert problems(tmp_path, text) == [
        ("unknown key `colour` in `study`", 2, 20, "allowed here: id, title, version")]


def test_a_misspelt_choice_suggests_the_nearest(tmp_path):
    text = variant("    family: gaussian\n", "    family: gausian\n")
    assert problems(tmp_path, text) == [
        ("`family` must be one of gaussian, binomial, poisson; not `gausian`", 10, 13,
         "did you mean `gaussian`?")]


def test_a_choice_in_the_wrong_case_suggests_the_right_case(tmp_path):
    text = variant("    tiers:\n", "    covariance: hc3\n    tiers:\n")
    assert problems(tmp_path, text) == [
        ("`covariance` must be one of classical, HC0, HC1, HC2, HC3; not `hc3`", 12, 17,
         "did you mean `HC3`?")]


def test_a_number_where_text_is_expected_suggests_quotes_keeping_its_spelling(tmp_path):
    text = variant('version: "1.0"', "version: 1.0")
    assert problems(tmp_path, text) == [
        ("`version` must be text, not the number `1.0`", 2, 29,
         'put it in quotes to make it text: "1.0"')]


def test_a_missing_required_key_is_reported_at_its_mapping(tmp_path):
    text = variant("    family: gaussian\n", "    \n")
    assert problems(tmp_path, text) == [
        ("missing required key `family` in item 1 of `analyses`", 8, 5, None)]


def test_a_missing_version_marker_is_reported(tmp_path):
    text = variant("prespec: 1\n", "\n")
    assert problems(tmp_path, text) == [("missing required key `prespec`", 2, 1, None)]


def test_a_wrong_language_version_is_refused(tmp_path):
    text = variant("prespec: 1\n", "prespec: 2\n")
    assert problems(tmp_path, text) == [
        ("`prespec` must be 1 (the plan-language version), not `2`", 1, 10, None)]


def test_a_version_written_as_text_is_shown_with_its_quotes(tmp_path):
    # `prespec: '1'` is the text "1": shown bare, the message read "must be 1, not `1`"
    text = variant("prespec: 1\n", "prespec: '1'\n")
    assert problems(tmp_path, text) == [
        ('`prespec` must be 1 (the plan-language version), not `"1"`', 1, 10, None)]


def test_a_bad_study_id_is_refused(tmp_path):
    text = variant("{id: trial,", "{id: My Trial,")
    assert problems(tmp_path, text) == [
        ("study id `My Trial` must be lower-case letters, digits and hyphens, starting with a "
         "letter or digit", 2, 13, None)]


@pytest.mark.parametrize("alpha, words", [("0", "greater than 0"), ("1", "less than 1"),
                                          ("1.5", "less than 1")])
def test_alpha_must_lie_strictly_between_0_and_1(tmp_path, alpha, words):
    text = variant("alpha: 0.05}", f"alpha: {alpha}}}")
    assert problems(tmp_path, text) == [(f"`alpha` must be {words}, not `{alpha}`", 17, 56, None)]


def test_confidence_must_lie_strictly_between_0_and_1(tmp_path):
    text = variant("    tiers:\n", "    confidence: 95\n    tiers:\n")
    assert problems(tmp_path, text) == [("`confidence` must be less than 1, not `95`", 12, 17, None)]


def test_a_term_mapping_reports_the_form_it_was_meant_as(tmp_path):
    text = variant("add: [age]", "add: [{power: age}]")
    assert problems(tmp_path, text) == [
        ("missing required key `degree` in item 1 of `add`", 15, 15, None)]


def test_a_term_of_no_known_form_lists_the_forms(tmp_path):
    text = variant("add: [age]", "add: [{powr: age, degree: 2}]")
    assert problems(tmp_path, text) == [
        ("`{powr: age, degree: 2}` is not a variable name, {power: VAR, degree: K}, {log: VAR}, "
         "{product: [VAR, VAR, ...]} or {spline: VAR, knots: [k1, k2, k3, ...]}", 15, 15,
         "did you mean `power`?")]


def test_a_power_below_two_is_refused(tmp_path):
    text = variant("add: [age]", "add: [{power: age, degree: 1}]")
    assert problems(tmp_path, text) == [("`degree` must be at least 2, not `1`", 15, 36, None)]


def test_a_product_of_one_variable_is_refused(tmp_path):
    text = variant("add: [age]", "add: [{product: [age]}]")
    assert problems(tmp_path, text) == [("a product needs at least two variables", 15, 25, None)]


def test_a_spline_needs_three_knots(tmp_path):
    text = variant("add: [age]", "add: [{spline: age, knots: [30, 50]}]")
    assert problems(tmp_path, text) == [
        ("a natural cubic spline needs at least three knots", 15, 36, None)]


def test_a_term_written_as_a_formula_with_a_star_is_refused(tmp_path):
    text = variant("add: [age]", "add: [age*arm]")
    (message, line, col, _), = problems(tmp_path, text)
    assert message.startswith("`age*arm` is not a usable variable name")
    assert (line, col) == (15, 15)


def test_a_condition_needs_one_comparison(tmp_path):
    text = BASE + "populations:\n  adults:\n    where:\n      - {variable: age}\n"
    assert problems(tmp_path, text) == [
        ("a condition needs one comparison: equals, not_equals, in, not_in, at_least, at_most, "
         "above, below or is_missing", 21, 9, None)]


def test_a_condition_holds_only_one_comparison(tmp_path):
    text = BASE + "populations:\n  adults:\n    where:\n      - {variable: age, above: 1, below: 9}\n"
    assert problems(tmp_path, text) == [
        ("a condition holds exactly one comparison; write each comparison as its own condition",
         21, 9, None)]


def test_is_missing_takes_true_or_false_not_yes(tmp_path):
    text = BASE + "populations:\n  adults:\n    where:\n      - {variable: age, is_missing: yes}\n"
    assert problems(tmp_path, text) == [
        ("`is_missing` must be true or false, not the text `yes`", 21, 37, "write true or false")]


def test_variable_names_may_be_upper_case_or_non_ascii(tmp_path):
    text = variant("  age: {kind: continuous}\n",
                   "  age: {kind: continuous}\n  AVAL: {kind: continuous}\n  größe: {kind: count}\n"
                   "  âge: {kind: continuous}\n")
    path = tmp_path / "plan.yaml"
    path.write_text(text, encoding="utf-8")
    validate.validate(load.load(str(path)))


def test_a_variable_name_with_surrounding_spaces_is_refused_at_the_key(tmp_path):
    text = variant("  age: {kind: continuous}\n", '  age: {kind: continuous}\n  " wt": {kind: count}\n')
    (message, line, col, _), = problems(tmp_path, text)
    assert message.startswith("` wt` is not a usable variable name")
    assert (line, col) == (7, 3)


def test_a_categorical_variable_needs_two_levels(tmp_path):
    text = variant("levels: [control, active]", "levels: [control]")
    assert problems(tmp_path, text) == [
        ("a categorical variable needs at least two levels", 5, 36, None)]


def test_every_shape_error_is_reported_at_once(tmp_path):
    text = variant("    family: gaussian\n", "    family: normal\n").replace(
        "alpha: 0.05}", "alpha: 2}")
    found = problems(tmp_path, text)
    assert [(line, col) for _, line, col, _ in found] == [(10, 13), (17, 56)]


def test_an_empty_value_is_named_as_empty(tmp_path):
    text = variant("    outcome: y\n", "    outcome:\n")
    assert problems(tmp_path, text) == [("`outcome` must be text; it is empty", 9, 13, None)]
