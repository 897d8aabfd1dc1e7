"""Design-column labels from the plan alone, and the explanation's account of each analysis.

The label forms are the ones design.md fixes: `intercept`, `VAR`, `VAR: LEVEL vs REFERENCE` (treatment
coding against the reference, levels in declared order), `VAR^K`, `log(VAR)`, products `A × B`
with each side labelled, and `spline(VAR) #j` for the k − 1 columns of a natural cubic spline
with k knots (the truncated-power basis: Harrell, Regression Modeling Strategies, 2.4.5).
"""

from __future__ import annotations

from compiler.columns import column_terms, design_labels
from compiler.explain import explain, explain_json
from compiler.pipeline import compile_plan

PLAN = """\
prespec: 1
study: {id: labels}
variables:
  y: {kind: continuous}
  n: {kind: count}
  arm: {kind: categorical, levels: [usual, brisk, slow], reference: brisk}
  district: {kind: categorical, levels: [harbour, hillside, market]}
  age: {kind: continuous, min: 18, max: 90}
  income: {kind: continuous, min: 1}
  site: {kind: identifier}
  smoker: {kind: binary}
analyses:
  - id: main
    outcome: y
    family: gaussian
    exposure: arm
    tiers:
      - name: crude
      - name: shaped
        add: [{power: age, degree: 3}, {log: income}, {spline: age, knots: [30, 45, 60, 75]}]
      - name: modified
        add: [{product: [district, age]}, {product: [arm, district]}, smoker]
  - id: counts
    outcome: n
    family: poisson
    exposure: smoker
    covariance: {cluster: site}
    tiers:
      - name: crude
      - name: adjusted
        add: [age]
"""


def plan(tmp_path):
    path = tmp_path / "plan.yaml"
    path.write_text(PLAN, encoding="utf-8")
    return compile_plan(str(path))


def test_a_categorical_exposure_expands_against_its_declared_reference(tmp_path):
    p = plan(tmp_path)
    assert design_labels(p, p.analysis("main"))[0] == ("intercept", "arm: usual vs brisk",
                                                       "arm: slow vs brisk")


def test_power_log_and_spline_columns(tmp_path):
    p = plan(tmp_path)
    shaped = design_labels(p, p.analysis("main"))[1]
    assert shaped[3:] == ("age^3", "log(income)", "spline(age) #1", "spline(age) #2",
                          "spline(age) #3")


def test_products_combine_every_column_of_each_side_first_factor_outermost(tmp_path):
    p = plan(tmp_path)
    modified = design_labels(p, p.analysis("main"))[2]
    assert modified[8:] == (
        "district: hillside vs harbour × age", "district: market vs harbour × age",
        "arm: usual vs brisk × district: hillside vs harbour",
        "arm: usual vs brisk × district: market vs harbour",
        "arm: slow vs brisk × district: hillside vs harbour",
        "arm: slow vs brisk × district: market vs harbour",
        "smoker")


def test_each_tier_is_a_prefix_of_the_next(tmp_path):
    p = plan(tmp_path)
    tiers = design_labels(p, p.analysis("main"))
    assert all(big[:len(small)] == small for small, big in zip(tiers, tiers[1:]))


def test_each_column_knows_its_term(tmp_path):
    p = plan(tmp_path)
    terms = column_terms(p, p.analysis("main"))
    assert terms[:3] == ("intercept", "arm", "arm")
    assert terms.count("district × age") == 2


def test_a_binary_exposure_is_one_column(tmp_path):
    p = plan(tmp_path)
    assert design_labels(p, p.analysis("counts"))[0] == ("intercept", "smoker")


def test_a_robust_covariance_makes_the_nested_test_a_wald_test(tmp_path):
    doc = explain_json(plan(tmp_path))
    counts = doc["analyses"][1]
    assert counts["comparisons"] == [{"from": "crude", "to": "adjusted", "method": "Wald",
                                      "test": "chi2", "df_added": 1}]


def test_comparisons_count_the_columns_a_tier_adds(tmp_path):
    main = explain_json(plan(tmp_path))["analyses"][0]
    assert [(c["test"], c["df_added"]) for c in main["comparisons"]] == [("F", 5), ("F", 7)]


def test_the_complete_case_set_covers_every_tier_and_the_cluster(tmp_path):
    counts = explain_json(plan(tmp_path))["analyses"][1]
    assert counts["sample"]["complete_cases"] == ["n", "smoker", "age", "site"]


def test_the_explanation_names_the_family_and_link(tmp_path):
    text = explain(plan(tmp_path))
    assert "Analysis counts: n by smoker, poisson family, log link" in text
    assert "covariance: clustered by site" in text


def test_population_rules_are_written_with_plain_numbers():
    text = explain(compile_plan("plans/dusk-sleep.yaml"))
    assert "per-protocol: rows where age ≥ 18 and sessions_attended ≥ 2" in text
