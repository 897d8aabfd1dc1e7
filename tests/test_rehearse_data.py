"""The data a rehearsal runs on: synthetic tables from the dictionary, scrambled real tables.

Fixtures are plans built in code from the plan dataclasses. Fits that check a known effect use
statsmodels (a reference library) on the design pass's own columns.
"""

from __future__ import annotations

import hashlib
import io
import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

from compiler import design
from compiler.bound import BoundData, Sample, SampleFlow, Table
from compiler.plan import (Analysis, Condition, DataSource, Plan, Population, Study, Term,
                           Tier, Variable)
from compiler.problems import Exit, Place, Stop
from compiler.rehearse import scrambled_table, synthetic_table, table_csv


# --- fixtures -------------------------------------------------------------------------------

def term(name: str) -> Term:
    return Term("variable", (name,))


def tiers(exposure: str, *added: tuple[str, tuple[Term, ...]]) -> tuple[Tier, ...]:
    out, terms = [], (term(exposure),)
    for name, add in added:
        terms = terms + add
        out.append(Tier(name, add, terms))
    return tuple(out)


VARIABLES = (
    Variable("pid", "identifier"),
    Variable("score", "continuous", min=0, max=100, max_missing=0.2),
    Variable("arm", "categorical", levels=("control", "low", "high"), reference="control"),
    Variable("age", "continuous", min=16, max=90),
    Variable("smoker", "binary", max_missing=0.1),
    Variable("site", "categorical", levels=("north", "south"), max_missing=0.1),
    Variable("visits", "count"),
    Variable("cured", "binary"),
    Variable("events", "count"),
    Variable("months", "count", min=1, max=24),
    Variable("weight", "continuous", min=0),
)
AT = Place("plan.yaml", 30, 9)
ADULTS = Population("adults", (Condition("age", "at_least", 18.0, AT),))
COMPLIANT = Population("compliant", (Condition("age", "at_least", 18.0, AT),
                                     Condition("visits", "at_least", 2.0, Place("plan.yaml", 33, 9))))


def analysis(family: str, outcome: str, population: str | None = "adults", **kw) -> Analysis:
    adjusted = (term("age"), term("smoker"), term("site"), Term("power", ("age",), degree=2))
    return Analysis(f"a-{family}", outcome, family, "arm",
                    tiers("arm", ("crude", ()), ("adjusted", adjusted)), "adjusted",
                    population=population, **kw)


def make_plan(analyses=None, populations=(ADULTS, COMPLIANT), variables=VARIABLES,
              expected_rows=None) -> Plan:
    if analyses is None:
        analyses = (analysis("gaussian", "score"), analysis("binomial", "cured"),
                    analysis("poisson", "events", population="compliant", offset="months"))
    return Plan(1, Study("rehearsal-test"), DataSource(None, None, row_id="pid",
                                                       expected_rows=expected_rows),
                variables, populations, tuple(analyses))


def holds(condition: Condition, values: np.ndarray) -> np.ndarray:
    """An independent reading of a population condition, row by row."""
    missing = np.array([v is None or (isinstance(v, float) and math.isnan(v)) for v in values])
    if condition.op == "is_missing":
        return missing if condition.value else ~missing
    v = condition.value
    tests = {"at_least": lambda x: x >= v, "above": lambda x: x > v, "at_most": lambda x: x <= v,
             "below": lambda x: x < v, "equals": lambda x: x == v, "not_equals": lambda x: x != v,
             "in": lambda x: x in v, "not_in": lambda x: x not in v}
    return np.array([not m and bool(tests[condition.op](x)) for x, m in zip(values, missing)])


def complete_sample(plan: Plan, a: Analysis, table: Table) -> BoundData:
    """The analysis' complete cases (the rows bind would keep when every row is in the
    population), for fitting with statsmodels."""
    keep = np.ones(table.rows_read, dtype=bool)
    for name in a.variables_used:
        values = table.columns[name]
        keep &= (values != None) if values.dtype == object else np.isfinite(values)  # noqa: E711
    rows = np.flatnonzero(keep)
    flow = SampleFlow(table.rows_read, a.population, (), table.rows_read, (), len(rows))
    sample = Sample(a.id, rows, np.asarray([str(i + 1) for i in rows], dtype=object), flow)
    return BoundData(table, (sample,), ())


def exposure_intervals(plan: Plan, a: Analysis, table: Table, free_offset: bool = False):
    built = design.design(plan, a, complete_sample(plan, a, table))
    x = built.x
    if a.family == "gaussian":
        fitted = sm.OLS(built.y, x).fit()
    elif a.family == "binomial":
        fitted = sm.GLM(built.y, x, family=sm.families.Binomial()).fit()
    elif free_offset:
        fitted = sm.GLM(built.y, np.column_stack([x, built.offset]),
                        family=sm.families.Poisson()).fit()
        return fitted.conf_int()[[-1]]
    else:
        fitted = sm.GLM(built.y, x, family=sm.families.Poisson(), offset=built.offset).fit()
    return fitted.conf_int()[list(built.exposure_columns)]


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

def test_every_row_meets_every_population_condition():
    plan = make_plan()
    table = synthetic_table(plan, seed=12, rows=800)
    for population in plan.populations:
        for condition in population.conditions:
            assert holds(condition, table.columns[condition.variable]).all(), condition.describe()


def test_level_rules_fix_the_generated_levels():
    narrow = Population("two-arms", (Condition("arm", "in", ("control", "high")),
                                     Condition("site", "not_equals", "south"),
                                     Condition("weight", "is_missing", False)))
    plan = make_plan(populations=(narrow,),
                     analyses=[analysis("gaussian", "score", population="two-arms")])
    table = synthetic_table(plan, seed=13, rows=300)
    assert set(table.columns["arm"]) == {"control", "high"}
    assert set(table.columns["site"]) == {"north"}


def test_populations_that_exclude_one_another_each_keep_a_share_of_the_rows():
    young = Population("young", (Condition("age", "below", 30.0),))
    old = Population("old", (Condition("age", "at_least", 70.0),))
    plan = make_plan(populations=(young, old),
                     analyses=[analysis("gaussian", "score", population="young"),
                               analysis("binomial", "cured", population="old")])
    age = synthetic_table(plan, seed=14, rows=400).columns["age"]
    assert np.sum(age < 30) == 200 and np.sum(age >= 70) == 200


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


# --- outcomes from the plan's largest model -------------------------------------------------

@pytest.mark.parametrize("family, outcome, effect", [
    ("gaussian", "score", 4.0), ("binomial", "cured", 0.6), ("poisson", "events", -0.4),
    ("gaussian", "score", 0.0)])
def test_a_known_effect_is_recovered_within_its_interval_in_most_seeds(family, outcome, effect):
    # Each 95 % interval covers with probability 0.95; 5 seeds, at least 4 covering both levels.
    a = analysis(family, outcome, offset="months" if family == "poisson" else None)
    plan = make_plan(analyses=[a])
    covered = 0
    for seed in range(5):
        table = synthetic_table(plan, seed=seed, rows=600, effect=effect)
        intervals = exposure_intervals(plan, a, table)
        covered += all(low <= effect <= high for low, high in intervals)
    assert covered >= 4


def test_a_continuous_exposure_gets_the_effect_as_its_slope():
    a = Analysis("age-slope", "score", "gaussian", "age",
                 tiers("age", ("crude", ()), ("adjusted", (term("weight"), term("smoker")))),
                 "adjusted")
    plan = make_plan(analyses=[a], populations=())
    intervals = [exposure_intervals(plan, a, synthetic_table(plan, seed=s, rows=400, effect=0.3))
                 for s in range(5)]
    assert sum(bool(low <= 0.3 <= high) for ((low, high),) in intervals) >= 4


def test_expected_counts_are_proportional_to_the_offset():
    # log(offset) fitted as a free covariate should get a coefficient of 1.
    a = analysis("poisson", "events", offset="months")
    plan = make_plan(analyses=[a])
    covered = sum(
        bool(low <= 1.0 <= high)
        for s in range(5)
        for low, high in exposure_intervals(plan, a, synthetic_table(plan, seed=s, rows=800),
                                            free_offset=True))
    assert covered >= 4


def test_outcomes_sit_where_each_family_wants_them():
    table = synthetic_table(make_plan(), seed=15, rows=3000)
    score = table.columns["score"]
    assert abs(np.nanmean(score) - 50) < 2 and 8 < np.nanstd(score) < 14  # noise sd = range / 10
    assert 0.25 < table.columns["cured"].mean() < 0.35
    assert 2.5 < table.columns["events"].mean() < 3.5


# --- scrambling the real data ---------------------------------------------------------------

def real_table() -> Table:
    rng = np.random.default_rng(99)
    columns = {
        "pid": np.asarray([f"P{i}" for i in range(50)], dtype=object),
        "arm": np.asarray(rng.choice(["control", "low", "high"], 50), dtype=object),
        "age": rng.uniform(18, 80, 50),
    }
    return Table("data/final.csv", "csv", "ab" * 32, 1234, 50, columns)


def test_scrambling_permutes_the_named_column_by_the_seed_and_nothing_else():
    table = real_table()
    scrambled = scrambled_table(make_plan(), table, "arm", seed=5)
    order = np.random.default_rng(5).permutation(50)  # the documented permutation
    assert list(scrambled.columns["arm"]) == list(table.columns["arm"][order])
    assert scrambled.columns["age"] is table.columns["age"]
    assert scrambled.columns["pid"] is table.columns["pid"]
    assert (scrambled.sha256, scrambled.path, scrambled.rows_read) == (table.sha256, table.path, 50)


def test_scrambling_keeps_the_columns_values():
    table = real_table()
    scrambled = scrambled_table(make_plan(), table, "age", seed=1)
    assert np.array_equal(np.sort(scrambled.columns["age"]), np.sort(table.columns["age"]))
    assert not np.array_equal(scrambled.columns["age"], table.columns["age"])


@pytest.mark.parametrize("name, said", [("dose", "not in the data dictionary"),
                                        ("site", "not a column of data/final.csv")])
def test_scrambling_an_unknown_column_stops_with_exit_2(name, said):
    with pytest.raises(Stop) as caught:
        scrambled_table(make_plan(), real_table(), name, seed=1)
    assert caught.value.exit_code == Exit.PLAN_INVALID
    assert said in caught.value.problems[0].message and name in caught.value.problems[0].message


def test_scrambling_moves_reads_category_codes_with_the_values():
    table = real_table()
    codes, values = pd.factorize(table.columns["arm"])
    table = Table(table.path, table.format, table.sha256, table.size_bytes, table.rows_read,
                  table.columns, codes={"arm": (codes.astype(np.int32), tuple(values))})
    scrambled = scrambled_table(make_plan(), table, "arm", seed=3)
    codes, values = scrambled.categories("arm")
    assert list(np.asarray(values, dtype=object)[codes]) == list(scrambled.columns["arm"])


# --- through the pipeline -------------------------------------------------------------------

def written(plan: Plan, table: Table, folder) -> Table:
    from compiler import read

    path = folder / "synthetic.csv"
    path.write_bytes(table_csv(plan, table.columns))
    return read.read(plan, path)


def test_read_loads_the_synthetic_csv_back_to_the_same_table(tmp_path):
    plan = make_plan()
    table = synthetic_table(plan, seed=16, rows=300)
    again = written(plan, table, tmp_path)
    assert again.sha256 == table.sha256 and again.rows_read == 300
    for name, values in table.columns.items():
        assert np.array_equal(again.columns[name], values, equal_nan=values.dtype != object), name


def test_scrambling_changes_the_exposure_estimate_but_not_the_sample(tmp_path):
    from compiler.pipeline import analyse

    plan = make_plan()
    real = written(plan, synthetic_table(plan, seed=17, rows=400, effect=0.8), tmp_path)
    before = analyse(plan, None, table=real)
    after = analyse(plan, None, table=scrambled_table(plan, real, "arm", seed=1))
    for a in plan.analyses:
        kept, moved = before.bound.sample(a.id), after.bound.sample(a.id)
        assert np.array_equal(kept.rows, moved.rows) and kept.flow == moved.flow
    for first, second in zip(before.fits, after.fits):
        assert first.exposure[-1].estimate != pytest.approx(second.exposure[-1].estimate, abs=1e-6)
