"""Rehearsal outcomes carry a known exposure effect; scrambling keeps the real values and sample.

Fits that check a known effect use statsmodels (a reference library) on the design pass's own
columns. Fixtures are plans built in code (tests/rehearsekit.py).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from compiler.bound import Table
from compiler.plan import Analysis
from compiler.problems import Exit, Stop
from compiler.effects import read_effects
from compiler.rehearse import scrambled_table, synthetic_table
from rehearsekit import analysis, exposure_intervals, make_plan, real_table, term, tiers, written


# --- outcomes from the plan's largest model -------------------------------------------------

# Model for the seeded simulations: the synthetic outcome follows the plan's largest tier with
# the planted exposure effect (rehearse.py's docstring); statsmodels fits that tier on the
# design pass's columns, and each 95 % Wald interval covers the planted value with probability
# about 0.95. With 20 seeds, at least 16 covering has probability 0.98 under Binomial(20, 0.95)
# (scipy.stats.binom.sf(15, 20, 0.95) = 0.984).
SEEDS, COVERING = 20, 16


@pytest.mark.parametrize("family, outcome, planted, levels", [
    ("gaussian", "score", {None: -5.0, "high": -8.0}, {"low": -5.0, "high": -8.0}),
    ("binomial", "cured", {None: 1.8}, {"low": 1.8, "high": 1.8}),
    ("binomial", "cured", {"low": 0.5, "high": 2.5}, {"low": 0.5, "high": 2.5}),
    ("poisson", "events", {None: 0.6, "low": 1.3}, {"low": 1.3, "high": 0.6}),
    ("gaussian", "score", {}, {"low": 0.0, "high": 0.0})])
def test_a_planted_effect_on_the_natural_scale_lies_in_its_interval_in_most_seeds(
        family, outcome, planted, levels):
    a = analysis(family, outcome, offset="months" if family == "poisson" else None)
    plan = make_plan(analyses=[a])
    specs = [f"{a.id}{'' if level is None else ':' + level}={value}"
             for level, value in planted.items()]
    effects = read_effects(plan, specs)
    # the model scale: a difference as it is, a ratio's logarithm (arm: control, low, high)
    expected = [v if family == "gaussian" else math.log(v) for v in (levels["low"], levels["high"])]
    covered = 0
    for seed in range(SEEDS):
        table = synthetic_table(plan, seed=seed, rows=600, effects=effects)
        intervals = exposure_intervals(plan, a, table)
        covered += all(low <= b <= high for (low, high), b in zip(intervals, expected))
    assert covered >= COVERING


def test_a_continuous_exposure_gets_the_effect_as_its_slope():
    a = Analysis("age-slope", "score", "gaussian", "age",
                 tiers("age", ("crude", ()), ("adjusted", (term("weight"), term("smoker")))),
                 "adjusted")
    plan = make_plan(analyses=[a], populations=())
    planted = read_effects(plan, ["age-slope=0.3"])  # a difference of 0.3 per unit of age
    intervals = [exposure_intervals(plan, a, synthetic_table(plan, seed=s, rows=400,
                                                             effects=planted))
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
    scrambled = scrambled_table(make_plan(), table, "arm", seed=1)
    assert sorted(scrambled.columns["arm"]) == sorted(table.columns["arm"])
    assert list(scrambled.columns["arm"]) != list(table.columns["arm"])


def test_only_the_exposure_may_be_scrambled():
    # any other column scrambled leaves the real exposure effect in the rehearsal's report
    with pytest.raises(Stop) as caught:
        scrambled_table(make_plan(), real_table(), "age", seed=1)
    assert caught.value.exit_code == Exit.PLAN_INVALID
    problem = caught.value.problems[0]
    assert problem.code == "scramble-not-exposure" and "not the exposure" in problem.message
    assert problem.hint == "scramble the exposure (arm)"


def test_a_plan_with_two_exposures_cannot_be_blinded_by_scrambling_one():
    from dataclasses import replace

    other = replace(analysis("binomial", "cured"), exposure="smoker")
    plan = make_plan(analyses=[analysis("gaussian", "score"), other])
    with pytest.raises(Stop) as caught:
        scrambled_table(plan, real_table(), "arm", seed=1)
    assert "the exposure smoker of other analyses would stay unscrambled" in \
        caught.value.problems[0].message
    assert "rehearse on synthetic data" in caught.value.problems[0].hint


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
    planted = read_effects(plan, ["a-gaussian=8"])
    real = written(plan, synthetic_table(plan, seed=17, rows=400, effects=planted), tmp_path)
    before = analyse(plan, None, table=real)
    after = analyse(plan, None, table=scrambled_table(plan, real, "arm", seed=1))
    for a in plan.analyses:
        kept, moved = before.bound.sample(a.id), after.bound.sample(a.id)
        assert np.array_equal(kept.rows, moved.rows) and kept.flow == moved.flow
    for first, second in zip(before.fits, after.fits):
        assert first.exposure[-1].estimate != pytest.approx(second.exposure[-1].estimate, abs=1e-6)
