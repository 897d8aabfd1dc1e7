"""Synthetic rehearsal data honour the dictionary and the population rules, reproducibly.

Fixtures are plans built in code (tests/rehearsekit.py).
"""

from __future__ import annotations

import hashlib
import io
import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from compiler.plan import Analysis, Condition, Plan, Population, Term, Variable
from compiler import synthesize
from compiler.problems import Exit, Place, Stop
from compiler.rehearse import synthetic_table, table_csv
from rehearsekit import AT, VARIABLES, analysis, holds, make_plan, tiers


# --- reproducibility ------------------------------------------------------------------------

def test_the_same_seed_gives_the_same_table():
    plan = make_plan()
    first, second = synthetic_table(plan, seed=7), synthetic_table(plan, seed=7)
    assert first.sha256 == second.sha256
    for name, values in first.columns.items():
        assert np.array_equal(values, second.columns[name], equal_nan=values.dtype != object)


def test_different_seeds_give_different_tables():
    plan = make_plan()
    first, second = synthetic_table(plan, seed=1), synthetic_table(plan, seed=2)
    assert first.sha256 != second.sha256
    assert not np.allclose(first.columns["age"], second.columns["age"])


def test_the_digest_is_that_of_the_canonical_csv_which_reads_back_to_the_same_values():
    plan = make_plan()
    table = synthetic_table(plan, seed=3, rows=200)
    body = table_csv(plan, table.columns)
    assert table.sha256 == hashlib.sha256(body).hexdigest() and table.size_bytes == len(body)
    # pandas is the independent reader here.
    frame = pd.read_csv(io.BytesIO(body), keep_default_na=False, na_values=[""], dtype=str)
    for v in plan.variables:
        read_back = frame[v.name].to_numpy(dtype=object)
        if v.kind in ("categorical", "identifier"):
            expected = [None if x is None else x for x in table.columns[v.name]]
            assert [None if isinstance(x, float) else x for x in read_back] == expected
        else:
            numbers = np.array([np.nan if isinstance(x, float) else float(x) for x in read_back])
            assert np.array_equal(numbers, table.columns[v.name], equal_nan=True)


def test_rows_default_to_the_plans_expected_rows_then_500():
    assert synthetic_table(make_plan(expected_rows=120), seed=0).rows_read == 120
    assert synthetic_table(make_plan(), seed=0).rows_read == 500
    assert synthetic_table(make_plan(expected_rows=120), seed=0, rows=50).rows_read == 50


def test_the_table_is_labelled_synthetic():
    table = synthetic_table(make_plan(), seed=0, rows=10)
    assert (table.path, table.format, table.rows_read) == ("<synthetic>", "synthetic", 10)
    assert set(table.columns) == {v.name for v in VARIABLES}


# --- the dictionary is honoured -------------------------------------------------------------

def test_every_numeric_value_lies_inside_its_declared_range():
    plan = make_plan()
    table = synthetic_table(plan, seed=4, rows=2000)
    for v in plan.variables:
        if v.is_numeric:
            values = table.columns[v.name]
            values = values[np.isfinite(values)]
            if v.min is not None:
                assert values.min() >= v.min, v.name
            if v.max is not None:
                assert values.max() <= v.max, v.name


def test_categorical_and_binary_values_are_declared_ones_at_even_shares():
    table = synthetic_table(make_plan(), seed=5, rows=600)
    arm = table.columns["arm"]
    counts = [int(np.sum(arm == level)) for level in ("control", "low", "high")]
    assert sum(counts) == 600 and max(counts) - min(counts) <= 1
    site = table.columns["site"]
    assert set(site) <= {"north", "south", None}
    smoker = table.columns["smoker"]
    assert set(smoker[np.isfinite(smoker)]) <= {0.0, 1.0}


def test_counts_are_non_negative_integers():
    table = synthetic_table(make_plan(), seed=6, rows=500)
    for name in ("visits", "events", "months"):
        values = table.columns[name]
        assert np.all(values >= 0) and np.all(values == np.round(values)), name


def test_identifiers_are_unique_and_complete():
    ids = synthetic_table(make_plan(), seed=0, rows=1500).columns["pid"]
    assert None not in set(ids) and len(set(ids)) == 1500


def test_a_doubly_bounded_continuous_variable_follows_a_truncated_normal():
    # Reference law: scipy.stats.truncnorm at ±3 sd around the midpoint (sd = range / 6).
    plan = make_plan(populations=(), analyses=[analysis("gaussian", "score", population=None)])
    age = synthetic_table(plan, seed=8, rows=3000).columns["age"]
    reference = stats.truncnorm(-3, 3, loc=(16 + 90) / 2, scale=(90 - 16) / 6)
    assert stats.kstest(age, reference.cdf).pvalue > 0.001


def test_an_unbounded_count_follows_a_poisson_law_with_mean_three():
    # A Poisson law has variance equal to its mean (textbook); tolerance ±4 standard errors.
    plan = make_plan(populations=(), analyses=[analysis("gaussian", "score", population=None)])
    visits = synthetic_table(plan, seed=9, rows=4000).columns["visits"]
    assert abs(visits.mean() - 3) < 4 * math.sqrt(3 / 4000)
    assert abs(visits.var(ddof=1) - 3) < 0.3
    assert stats.chisquare(*_poisson_bins(visits, 3.0)).pvalue > 0.001


def _poisson_bins(values: np.ndarray, mean: float):
    observed = np.array([np.sum(values == k) for k in range(8)] + [np.sum(values >= 8)])
    p = np.append(stats.poisson.pmf(np.arange(8), mean), stats.poisson.sf(7, mean))
    return observed, p * len(values)


def test_a_variable_with_only_a_minimum_stays_above_it_with_a_spread():
    weight = synthetic_table(make_plan(), seed=2, rows=500).columns["weight"]
    assert weight.min() >= 0 and weight.std() > 0.1


def test_missing_values_are_half_of_each_max_missing():
    # Exactly ⌊rows · max_missing / 2⌋ rows, so the share is inside any binomial-proportion
    # tolerance around max_missing / 2 and never passes max_missing by chance.
    table = synthetic_table(make_plan(), seed=10, rows=777)
    score, site = table.columns["score"], table.columns["site"]
    assert np.isnan(score).sum() == math.floor(777 * 0.2 / 2)
    assert sum(x is None for x in site) == math.floor(777 * 0.1 / 2)


def test_the_row_identifier_exposure_and_population_variables_are_never_missing():
    plan = make_plan(variables=tuple(
        Variable(v.name, v.kind, min=v.min, max=v.max, levels=v.levels, reference=v.reference,
                 max_missing=0.5) for v in VARIABLES))
    table = synthetic_table(plan, seed=11, rows=300)
    assert None not in set(table.columns["pid"]) and None not in set(table.columns["arm"])
    assert not np.isnan(table.columns["age"]).any() and not np.isnan(table.columns["visits"]).any()
    assert np.isnan(table.columns["weight"]).sum() == 75


def test_a_log_term_keeps_its_variable_positive():
    log_weight = (Term("log", ("weight",)),)
    a = Analysis("a", "score", "gaussian", "arm", tiers("arm", ("crude", ()), ("log", log_weight)),
                 "log")
    weight = synthetic_table(make_plan(analyses=[a], populations=()), seed=1,
                             rows=300).columns["weight"]
    assert np.all(weight > 0)


# --- populations ----------------------------------------------------------------------------

def _failed(plan: Plan, table) -> np.ndarray:
    """Per row, how many of the plan's distinct population conditions it fails."""
    conditions = list(dict.fromkeys(c for p in plan.populations for c in p.conditions))
    return sum((~holds(c, table.columns[c.variable])).astype(int) for c in conditions)


def test_rows_meet_every_population_condition_but_a_few_that_fail_exactly_one():
    plan = make_plan()  # adults: age ≥ 18; compliant: age ≥ 18, visits ≥ 2
    table = synthetic_table(plan, seed=12, rows=800)
    failed = _failed(plan, table)
    assert failed.max() == 1
    assert np.sum(failed == 1) == 2 * math.floor(800 * 0.02)  # 2 % per condition


TENURE = Variable("tenure", "count")  # no declared range: 0, 1, 2, … all allowed
CLINIC = Variable("clinic", "categorical", levels=("east", "west", "lakeside"))
AT_PLACES = [Place("plan.yaml", 50 + k, 9) for k in range(12)]
# one condition of every kind, on variables the analysis does not otherwise use (a rule on a
# covariate would fix it and alias its column)
MANY = Population("many", tuple(Condition(*spec, AT_PLACES[k]) for k, spec in enumerate([
    ("tenure", "at_least", 3.0), ("age", "above", 20.0), ("age", "below", 80.0),
    ("score", "at_most", 95.0), ("cured", "in", (0.0,)), ("clinic", "equals", "east"),
    ("visits", "not_equals", 1.0), ("visits", "not_in", (0.0, 7.0)),
    ("weight", "is_missing", False), ("months", "is_missing", True),
    ("pid", "not_in", ("R00004",))])))


def test_every_population_condition_excludes_rows_in_the_sample_flow():
    # The first defect: tenure ≥ 3 excluded 0 of 3,000 synthetic rows.
    plan = make_plan(variables=VARIABLES + (TENURE, CLINIC), populations=(MANY,),
                     analyses=[analysis("gaussian", "score", population="many")])
    from compiler.pipeline import analyse

    table = synthetic_table(plan, seed=3, rows=3000)
    flow = analyse(plan, None, table=table).bound.sample("a-gaussian").flow
    excluded = {step.reason: step.excluded for step in flow.by_condition}
    assert len(excluded) == len(MANY.conditions)
    for condition in MANY.conditions:
        assert excluded[condition.describe()] >= 1, condition.describe()
    assert excluded["tenure ≥ 3"] == math.floor(3000 * 0.02)
    assert excluded["pid not in {R00004}"] == 1  # one row carries the excluded code
    assert len(set(table.columns["pid"])) == 3000  # and the identifier stays unique
    assert flow.rows_in_population >= 0.75 * 3000


def test_a_condition_no_declared_value_fails_gets_no_excluded_rows():
    redundant = Population("redundant", (Condition("age", "at_least", 16.0, AT),))  # min is 16
    plan = make_plan(populations=(redundant,),
                     analyses=[analysis("gaussian", "score", population="redundant")])
    assert _failed(plan, synthetic_table(plan, seed=1, rows=500)).max() == 0


def test_excluded_rows_never_take_more_than_a_quarter_of_the_rows():
    plan = make_plan(variables=VARIABLES + (TENURE, CLINIC), populations=(MANY,),
                     analyses=[analysis("gaussian", "score", population="many")])
    failed = _failed(plan, synthetic_table(plan, seed=2, rows=20))
    assert np.sum(failed > 0) == 5 and failed.max() == 1  # ⌊20 / 4⌋, one row per condition


def test_level_rules_fix_the_generated_levels():
    narrow = Population("two-arms", (Condition("arm", "in", ("control", "high")),
                                     Condition("site", "not_equals", "south"),
                                     Condition("weight", "is_missing", False)))
    plan = make_plan(populations=(narrow,),
                     analyses=[analysis("gaussian", "score", population="two-arms")])
    table = synthetic_table(plan, seed=13, rows=300)
    kept = _failed(plan, table) == 0  # the rows inside the population
    assert set(table.columns["arm"][kept]) == {"control", "high"}
    assert set(table.columns["site"][kept]) == {"north"}
    assert set(table.columns["arm"][~kept]) <= {"control", "low", "high"}


def test_populations_that_exclude_one_another_each_keep_a_share_of_the_rows():
    young = Population("young", (Condition("age", "below", 30.0),))
    old = Population("old", (Condition("age", "at_least", 70.0),))
    plan = make_plan(populations=(young, old),
                     analyses=[analysis("gaussian", "score", population="young"),
                               analysis("binomial", "cured", population="old")])
    age = synthetic_table(plan, seed=14, rows=400).columns["age"]
    # 8 rows (2 %) fail each population's rule; the other 384 are dealt out evenly
    assert np.sum(age < 30) >= 192 and np.sum(age >= 70) >= 192
    layout = synthesize.layout(plan, 400, 14)
    assert list(np.bincount(layout.block)) == [192, 192, 8, 8]


def _stop(plan: Plan) -> Stop:
    with pytest.raises(Stop) as caught:
        synthetic_table(plan, seed=0, rows=100)
    assert caught.value.exit_code == Exit.PLAN_INVALID
    return caught.value


def test_contradictory_conditions_stop_with_the_condition_and_its_place():
    at = Place("plan.yaml", 41, 11)
    impossible = Population("elderly-young", (Condition("age", "at_least", 70.0),
                                              Condition("age", "below", 30.0, at)))
    stop = _stop(make_plan(populations=(impossible,),
                           analyses=[analysis("gaussian", "score", population="elderly-young")]))
    (problem,) = stop.problems
    assert problem.place == at
    assert "population elderly-young" in problem.message
    assert "age < 30" in problem.message and "age ≥ 70" in problem.message


def test_a_bound_outside_the_declared_range_stops_with_the_range():
    beyond = Population("centenarians", (Condition("age", "above", 120.0, AT),))
    stop = _stop(make_plan(populations=(beyond,),
                           analyses=[analysis("gaussian", "score", population="centenarians")]))
    assert stop.problems[0].place == AT
    assert "declared range [16, 90]" in stop.problems[0].message


def test_an_undeclared_level_stops_naming_the_level():
    wrong = Population("west", (Condition("site", "equals", "west", AT),))
    stop = _stop(make_plan(populations=(wrong,),
                           analyses=[analysis("gaussian", "score", population="west")]))
    assert "'west' is not a level of site (north, south)" in stop.problems[0].message


def test_a_population_that_fixes_the_exposure_stops():
    one_arm = Population("controls", (Condition("arm", "equals", "control", AT),))
    stop = _stop(make_plan(populations=(one_arm,),
                           analyses=[analysis("gaussian", "score", population="controls")]))
    assert stop.problems[0].code == "exposure-fixed" and stop.problems[0].place == AT


def test_a_rule_that_empties_an_analysis_sample_stops():
    no_age = Population("no-age", (Condition("age", "is_missing", True, AT),))
    stop = _stop(make_plan(populations=(no_age,),
                           analyses=[analysis("gaussian", "score", population="no-age")]))
    assert stop.problems[0].code == "sample-empty" and "age" in stop.problems[0].message


def test_unusable_rows_or_seed_stop_with_exit_2():
    for kwargs in ({"rows": 0, "seed": 1}, {"seed": -1}):
        with pytest.raises(Stop) as caught:
            synthetic_table(make_plan(), **kwargs)
        assert caught.value.exit_code == Exit.PLAN_INVALID
