"""Population conditions, one per operator; a comparison on a missing value never holds."""

from __future__ import annotations

import pytest
from planbuilders import make_analysis, make_plan, make_population

from compiler.bind import bind
from compiler.read import read

DICTIONARY = {
    "pid": "identifier",
    "arm": {"kind": "categorical", "levels": ["usual", "walking"]},
    "age": {"kind": "continuous"},
    "score": {"kind": "count"},
    "y": {"kind": "continuous"},
}
DATA = ("pid,arm,age,score,y\n"
        "p1,usual,17,3,1\n"
        "p2,walking,18,,1\n"
        "p3,walking,,5,1\n"
        "p4,usual,40,1,1\n"
        "p5,,65,2,1\n"
        "p6,walking,80,4,1\n")


def _population_ids(tmp_path, condition) -> list[str]:
    path = tmp_path / "d.csv"
    path.write_text(DATA)
    # the outcome alone is analysed, so only the population removes rows
    plan = make_plan(DICTIONARY, row_id="pid",
                     populations=[make_population("chosen", condition)],
                     analyses=[make_analysis("main", "y", "y", population="chosen")])
    sample = bind(plan, read(plan, path)).sample("main")
    assert sample.flow.rows_in_population == sample.flow.n
    return list(sample.row_ids)


@pytest.mark.parametrize("condition, expected", [
    (("age", "equals", 18.0), ["p2"]),
    (("arm", "equals", "walking"), ["p2", "p3", "p6"]),
    (("age", "not_equals", 18.0), ["p1", "p4", "p5", "p6"]),  # p3's missing age: not kept
    (("arm", "not_equals", "walking"), ["p1", "p4"]),  # p5's missing arm: not kept
    (("score", "in", (1.0, 2.0)), ["p4", "p5"]),
    (("arm", "in", ("usual",)), ["p1", "p4"]),
    (("score", "not_in", (1.0, 2.0)), ["p1", "p3", "p6"]),  # p2's missing score: not kept
    (("arm", "not_in", ("usual",)), ["p2", "p3", "p6"]),
    (("age", "at_least", 18.0), ["p2", "p4", "p5", "p6"]),
    (("age", "at_most", 40.0), ["p1", "p2", "p4"]),
    (("age", "above", 18.0), ["p4", "p5", "p6"]),
    (("age", "below", 40.0), ["p1", "p2"]),
    (("score", "is_missing", True), ["p2"]),
    (("score", "is_missing", False), ["p1", "p3", "p4", "p5", "p6"]),
    (("arm", "is_missing", True), ["p5"]),
])
def test_condition(tmp_path, condition, expected):
    assert _population_ids(tmp_path, condition) == expected


def test_every_condition_must_hold(tmp_path):
    path = tmp_path / "d.csv"
    path.write_text(DATA)
    plan = make_plan(DICTIONARY, populations=[make_population(
        "chosen", ("age", "at_least", 18.0), ("arm", "equals", "walking"))],
        analyses=[make_analysis("main", "y", "y", population="chosen")], row_id="pid")
    sample = bind(plan, read(plan, path)).sample("main")
    assert list(sample.row_ids) == ["p2", "p6"]
    # each step counts only the rows still in: p1 and p3 fail age, then p4 and p5 fail arm
    assert [s.excluded for s in sample.flow.by_condition] == [2, 2]
    assert [s.reason for s in sample.flow.by_condition] == ["age ≥ 18", "arm = walking"]


def test_no_population_keeps_every_row(tmp_path):
    path = tmp_path / "d.csv"
    path.write_text(DATA)
    plan = make_plan(DICTIONARY, analyses=[make_analysis("main", "y", "y")])
    flow = bind(plan, read(plan, path)).sample("main").flow
    assert flow.population is None and flow.by_condition == ()
    assert flow.rows_in_population == flow.rows_read == 6
