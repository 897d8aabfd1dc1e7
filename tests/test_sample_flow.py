"""The sample flow: rows read → population → complete cases → analysed, step by step."""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from planbuilders import make_analysis, make_plan, make_population

from compiler.bind import bind
from compiler.problems import Stop
from compiler.read import read

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "plans"))
import make_demo_data  # noqa: E402  (the demo's own generator, with its missing values)

DICTIONARY = {
    "sleeper_id": "identifier",
    "guidance": {"kind": "categorical", "levels": ["none", "leaflet", "coached"]},
    "age": {"kind": "continuous"},
    "night_shift": "binary",
    "district": {"kind": "categorical",
                 "levels": ["harbour", "hillside", "market", "riverside"]},
    "screen_hours": {"kind": "continuous"},
    "latency_w0": {"kind": "continuous"},
    "latency_w8": {"kind": "continuous"},
    "sessions_attended": "count",
}
SMALL = {name: DICTIONARY[name]
         for name in ("sleeper_id", "guidance", "age", "latency_w8", "screen_hours")}
ADJUST = ["latency_w0", "age", "night_shift", "district", ("power", "age", 2), "screen_hours"]


@pytest.fixture
def demo_csv(tmp_path):
    records = make_demo_data.generate(400, seed=5)
    path = tmp_path / "demo.csv"
    pd.DataFrame(records).to_csv(path, index=False)
    return path


def _plan(dictionary=SMALL, **kwargs):
    return make_plan(dictionary, row_id="sleeper_id", populations=[
        make_population("adults", ("age", "at_least", 18.0))], **kwargs)


def test_flow_counts_add_up(demo_csv):
    plan = _plan(DICTIONARY, analyses=[make_analysis("primary", "latency_w8", "guidance",
                                                     add=ADJUST, population="adults")])
    flow = bind(plan, read(plan, demo_csv)).sample("primary").flow
    excluded = sum(s.excluded for s in flow.by_condition + flow.by_missing)
    assert flow.rows_read - excluded == flow.n
    assert flow.rows_read - sum(s.excluded for s in flow.by_condition) == flow.rows_in_population


def test_analysed_rows_match_pandas_complete_cases(demo_csv):
    plan = _plan(DICTIONARY, analyses=[make_analysis("primary", "latency_w8", "guidance",
                                                     add=ADJUST, population="adults")])
    sample = bind(plan, read(plan, demo_csv)).sample("primary")
    # reference: pandas' own reader, filter and dropna over the same variables
    frame = pd.read_csv(demo_csv, dtype={"sleeper_id": str})
    used = ["latency_w8", "guidance", "latency_w0", "age", "night_shift", "district",
            "screen_hours"]
    expected = frame[frame.age >= 18].dropna(subset=used)
    assert list(sample.row_ids) == list(expected.sleeper_id)
    np.testing.assert_array_equal(sample.rows, expected.index.to_numpy())
    assert sample.flow.rows_in_population == int((frame.age >= 18).sum())


def test_missing_values_are_counted_once_at_the_first_variable_in_order(tmp_path):
    path = tmp_path / "d.csv"
    path.write_text("sleeper_id,guidance,age,latency_w8,screen_hours\n"
                    "a,none,30,,\n"        # missing the outcome and screen hours
                    "b,leaflet,40,12,\n"   # missing screen hours only
                    "c,coached,50,15,2\n"
                    "d,none,60,20,3\n"
                    "e,leaflet,35,18,1\n")
    plan = _plan(analyses=[make_analysis("primary", "latency_w8", "guidance",
                                         add=["screen_hours"])])
    flow = bind(plan, read(plan, path)).sample("primary").flow
    assert [(s.variable, s.excluded) for s in flow.by_missing] == [
        ("latency_w8", 1), ("guidance", 0), ("screen_hours", 1)]
    assert [s.reason for s in flow.by_missing][0] == "missing latency_w8"
    assert flow.n == 3


def test_one_sample_serves_every_tier(tmp_path):
    path = tmp_path / "d.csv"
    path.write_text("sleeper_id,guidance,age,latency_w8,screen_hours\n"
                    "a,none,30,10,\n"  # the crude tier could use it; the adjusted tier cannot
                    "b,leaflet,40,12,1\n"
                    "c,coached,50,15,2\n"
                    "d,none,60,20,3\n")
    plan = _plan(analyses=[make_analysis("primary", "latency_w8", "guidance",
                                         add=["screen_hours"])])
    sample = bind(plan, read(plan, path)).sample("primary")
    assert list(sample.row_ids) == ["b", "c", "d"]


def test_row_ids_are_row_numbers_without_a_row_id(tmp_path):
    path = tmp_path / "d.csv"
    path.write_text("sleeper_id,guidance,age,latency_w8\n"
                    "a,none,30,\nb,leaflet,40,12\nc,coached,50,15\nd,none,45,9\n")
    plan = make_plan({n: SMALL[n] for n in ("sleeper_id", "guidance", "age", "latency_w8")},
                     analyses=[make_analysis("primary", "latency_w8", "guidance")])
    sample = bind(plan, read(plan, path)).sample("primary")
    assert sample.rows.dtype == np.int64 and list(sample.rows) == [1, 2, 3]
    assert list(sample.row_ids) == ["2", "3", "4"]  # 1-based data row numbers, as text


def test_an_empty_sample_names_the_analysis_and_its_flow(tmp_path):
    path = tmp_path / "d.csv"
    path.write_text("sleeper_id,guidance,age,latency_w8\n"
                    "a,none,12,10\nb,leaflet,40,\nc,coached,15,15\n")
    plan = _plan({n: SMALL[n] for n in ("sleeper_id", "guidance", "age", "latency_w8")},
                 analyses=[make_analysis("primary", "latency_w8", "guidance",
                                         population="adults")])
    with pytest.raises(Stop) as caught:
        bind(plan, read(plan, path))
    problem = next(p for p in caught.value.problems if p.code == "empty-sample")
    assert problem.details["analysis"] == "primary"
    assert "age ≥ 18: −2" in problem.message and "missing latency_w8: −1" in problem.message


def test_the_demo_plan_binds_its_demo_data_end_to_end(tmp_path):
    from compiler.pipeline import compile_plan

    root = Path(__file__).resolve().parents[1]
    plan = compile_plan(root / "plans" / "dusk-sleep.yaml")
    path = tmp_path / "dusk-sleep.csv"
    pd.DataFrame(make_demo_data.generate(600, seed=20261202)).to_csv(path, index=False)
    bound = bind(plan, read(plan, path))
    # reference: pandas over the same file, each population's conditions and complete cases
    frame = pd.read_csv(path, dtype={"sleeper_id": str})
    for analysis in plan.analyses:
        population = plan.population(analysis.population)
        chosen = frame
        for condition in population.conditions:
            assert condition.op == "at_least"  # the demo's populations use only this operator
            chosen = chosen[chosen[condition.variable] >= condition.value]
        expected = chosen.dropna(subset=list(analysis.variables_used))
        sample = bound.sample(analysis.id)
        assert sample.flow.rows_in_population == len(chosen), analysis.id
        assert list(sample.row_ids) == list(expected.sleeper_id), analysis.id
    assert not [p for p in bound.findings if p.is_error]
    assert bound.table.rows_read == 600
