"""The analysed sample's characteristics, checked against numpy on a small frame built here.

Reference: numpy (mean, std with ddof=1, quantile with its default linear method) applied by
hand to the rows this file lists as analysed; counts and shares are counted by hand.
"""

from __future__ import annotations

import json
from dataclasses import replace

import numpy as np
import pytest
from planbuilders import make_analysis, make_plan, make_population

from compiler.bind import bind
from compiler.characteristics import Moments, summarise
from compiler.read import read

DICTIONARY = {
    "pid": "identifier",
    "arm": {"kind": "categorical", "levels": ["usual", "walking"]},
    "age": {"kind": "continuous"},
    "smoker": {"kind": "binary"},
    "site": {"kind": "categorical", "levels": ["north", "south", "east"]},
    "visits": {"kind": "count"},
    "y": {"kind": "continuous"},
}
# p1 is under age (out of the population); p5 misses y and p8 misses smoker (in the
# population, out of the analysed rows); p9 has no arm.
DATA = ("pid,arm,age,smoker,site,visits,y\n"
        "p1,usual,16,0,north,1,10.0\n"
        "p2,usual,30,1,north,2,12.5\n"
        "p3,usual,41,0,south,0,9.0\n"
        "p4,usual,52,0,north,4,14.0\n"
        "p5,usual,60,1,south,3,\n"
        "p6,walking,35,1,south,5,7.5\n"
        "p7,walking,47,0,north,2,8.0\n"
        "p8,walking,58,,south,1,6.5\n"
        "p9,,44,0,north,2,11.0\n")

USUAL = {"age": [30, 41, 52], "y": [12.5, 9.0, 14.0], "visits": [2, 0, 4], "smoker": [1, 0, 0],
         "site": ["north", "south", "north"]}
WALKING = {"age": [35, 47], "y": [7.5, 8.0], "visits": [5, 2], "smoker": [1, 0],
           "site": ["south", "north"]}


@pytest.fixture(scope="module")
def summary(tmp_path_factory):
    path = tmp_path_factory.mktemp("chars") / "d.csv"
    path.write_text(DATA)
    plan = make_plan(DICTIONARY, row_id="pid",
                     populations=[make_population("adults", ("age", "at_least", 18.0))],
                     analyses=[make_analysis("main", "y", "arm", population="adults",
                                             add=["age", "smoker", "site", "visits"])])
    bound = bind(plan, read(plan, path))
    return summarise(plan, plan.analyses[0], bound)


def _variable(summary, name):
    return next(v for v in summary["variables"] if v["name"] == name)


def test_groups_are_the_exposure_levels_with_their_analysed_rows(summary):
    assert [(g["level"], g["n"]) for g in summary["groups"]] == [("usual", 3), ("walking", 2)]
    assert summary["whole_sample"]["n"] == 5


def test_a_continuous_variable_matches_numpy(summary):
    usual = _variable(summary, "age")["groups"][0]
    ref = np.array(USUAL["age"], float)
    assert usual["mean"] == pytest.approx(np.mean(ref))
    assert usual["sd"] == pytest.approx(np.std(ref, ddof=1))
    assert (usual["q1"], usual["median"], usual["q3"]) == pytest.approx(
        tuple(np.quantile(ref, [0.25, 0.5, 0.75])))


def test_the_overall_column_pools_every_group(summary):
    overall = _variable(summary, "y")["whole_sample"]
    ref = np.array(USUAL["y"] + WALKING["y"])
    assert overall["n"] == 5
    assert overall["mean"] == pytest.approx(np.mean(ref))
    assert overall["sd"] == pytest.approx(np.std(ref, ddof=1))
    # taken from the groups' sorted values, not a sort of their union: the same bits
    assert [overall[k] for k in ("q1", "median", "q3")] == list(
        np.quantile(ref, [0.25, 0.5, 0.75]))
    assert (overall["min"], overall["max"]) == (ref.min(), ref.max())


def test_a_count_variable_has_median_and_quartiles(summary):
    walking = _variable(summary, "visits")["groups"][1]
    assert walking["median"] == pytest.approx(np.median(WALKING["visits"]))
    assert (walking["q1"], walking["q3"]) == pytest.approx(
        tuple(np.quantile(WALKING["visits"], [0.25, 0.75])))


def test_a_binary_variable_counts_its_ones(summary):
    usual = _variable(summary, "smoker")["groups"][0]
    assert (usual["count"], usual["share"]) == (1, pytest.approx(1 / 3))


def test_a_categorical_variable_counts_every_declared_level(summary):
    usual = _variable(summary, "site")["groups"][0]
    assert [(lv["level"], lv["count"]) for lv in usual["levels"]] == [
        ("north", 2), ("south", 1), ("east", 0)]
    assert usual["levels"][0]["share"] == pytest.approx(2 / 3)


def test_missing_values_are_counted_in_the_population_per_group(summary):
    # p5 (usual) misses y; p8 (walking) misses smoker; p1's values are outside the population
    assert [g["missing"] for g in _variable(summary, "y")["groups"]] == [1, 0]
    assert [g["missing"] for g in _variable(summary, "smoker")["groups"]] == [0, 1]
    assert _variable(summary, "y")["whole_sample"]["missing"] == 1


def test_a_population_row_without_an_exposure_counts_overall_only(summary):
    assert summary["exposure_missing"] == 1
    assert summary["whole_sample"]["n_population"] == 8
    assert sum(g["n_population"] for g in summary["groups"]) == 7


def test_the_outcome_is_marked_and_the_identifier_and_exposure_are_left_out(summary):
    roles = {v["name"]: v["role"] for v in summary["variables"]}
    assert roles == {"y": "outcome", "age": "covariate", "smoker": "covariate",
                     "site": "covariate", "visits": "covariate"}


def test_the_summary_is_plain_json_without_nan(summary):
    json.dumps(summary, allow_nan=False)


def test_every_row_analysed_leaves_the_columns_unsorted_and_matches_numpy(tmp_path):
    # Every row analysed: the overall cell comes from the groups' sorted copies and moments,
    # and nothing may sort the bound column. Reference: numpy on the column as written.
    path = tmp_path / "d.csv"
    y = [5.0, 1.0, 4.0, 2.0, 3.0, 9.0, 0.5]
    arm = ["b", "a", "a", "b", "a", "b", "a"]
    path.write_text("pid,arm,y\n" + "".join(f"p{i},{a},{v}\n" for i, (a, v) in
                                             enumerate(zip(arm, y))))
    plan = make_plan({"pid": "identifier", "arm": {"kind": "categorical", "levels": ["a", "b"]},
                      "y": "continuous"}, row_id="pid", analyses=[make_analysis("main", "y", "arm")])
    bound = bind(plan, read(plan, path))
    overall = _variable(summarise(plan, plan.analyses[0], bound), "y")["whole_sample"]
    assert list(bound.table.columns["y"]) == y
    assert [overall[k] for k in ("q1", "median", "q3")] == list(np.quantile(y, [0.25, 0.5, 0.75]))
    assert (overall["min"], overall["max"]) == (0.5, 9.0)
    assert (overall["mean"], overall["sd"]) == pytest.approx((np.mean(y), np.std(y, ddof=1)),
                                                             rel=1e-15)


def test_a_continuous_exposure_is_summarised_overall_only(tmp_path):
    path = tmp_path / "d.csv"
    path.write_text("pid,dose,y\np1,1.0,2.0\np2,2.0,3.5\np3,4.0,5.0\n")
    plan = make_plan({"pid": "identifier", "dose": "continuous", "y": "continuous"},
                     row_id="pid", analyses=[make_analysis("main", "y", "dose")])
    summary = summarise(plan, plan.analyses[0], bind(plan, read(plan, path)))
    assert summary["grouped"] is False and summary["groups"] == []
    dose = _variable(summary, "dose")
    assert dose["role"] == "exposure"
    assert dose["whole_sample"]["mean"] == pytest.approx(np.mean([1.0, 2.0, 4.0]))


def test_an_empty_group_gives_no_statistics_and_says_why(tmp_path):
    # bind refuses an absent exposure level, so the sample is narrowed here by hand
    path = tmp_path / "d.csv"
    path.write_text("pid,arm,y\np1,usual,2.0\np2,usual,3.0\np3,walking,4.0\n")
    plan = make_plan({"pid": "identifier",
                      "arm": {"kind": "categorical", "levels": ["usual", "walking"]},
                      "y": "continuous"},
                     row_id="pid", analyses=[make_analysis("main", "y", "arm")])
    bound = bind(plan, read(plan, path))
    narrowed = replace(bound.samples[0], rows=np.array([0, 1], dtype=np.int64))
    bound = replace(bound, samples=(narrowed,))
    walking = _variable(summarise(plan, plan.analyses[0], bound), "y")["groups"][1]
    assert walking["n"] == 0 and walking["mean"] is None and walking["reason"]


def test_a_streamed_run_without_columns_gives_a_reason_not_numbers(tmp_path):
    path = tmp_path / "d.csv"
    path.write_text(DATA)
    plan = make_plan(DICTIONARY, row_id="pid", analyses=[make_analysis("main", "y", "arm")])
    bound = bind(plan, read(plan, path))
    streamed = replace(bound, table=replace(bound.table, columns={}))
    summary = summarise(plan, plan.analyses[0], streamed)
    assert summary["variables"] == [] and "streamed" in summary["reason"]


def test_a_group_s_moments_are_numpy_s_mean_and_sd_to_the_bit():
    # Reference: numpy.mean and numpy.std(ddof=1), which Moments.of computes the same way.
    values = np.random.default_rng(7).normal(50.0, 10.0, 10_001)
    moments = Moments.of(values)
    assert moments.mean == np.mean(values)
    assert np.sqrt(moments.m2 / (len(values) - 1)) == np.std(values, ddof=1)


@pytest.mark.parametrize("offset", [0.0, 1e9])
def test_pooled_moments_match_exact_arithmetic_on_the_union(offset):
    # Reference: Python's statistics.fmean and statistics.stdev, which sum in exact rational
    # arithmetic. The tolerance is the data's conditioning (10·κ·ε, κ = |mean| / SD, at
    # least 1e-13): at an offset of 1e9 the stored values themselves fix the SD to about
    # seven digits, and a sum-of-squares formula would lose all of them.
    import statistics

    rng = np.random.default_rng(11)
    parts = [offset + rng.normal(0.0, 1.0, 3_000), np.empty(0),
             offset + rng.normal(0.5, 2.0, 7_001)]
    union = [float(v) for v in np.concatenate(parts)]
    pooled = Moments.pooled([Moments.of(p) if len(p) else Moments(0, 0.0, 0.0) for p in parts])
    mean, sd = statistics.fmean(union), statistics.stdev(union)
    tolerance = max(1e-13, 10 * abs(mean) / sd * np.finfo(float).eps)
    assert pooled.n == len(union)
    assert pooled.mean == pytest.approx(mean, rel=1e-15)
    assert np.sqrt(pooled.m2 / (pooled.n - 1)) == pytest.approx(sd, rel=tolerance)
