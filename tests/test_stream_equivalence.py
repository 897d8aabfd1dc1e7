"""A streamed run gives the in-memory run's numbers, to 12 significant digits.

The in-memory path (compiler/read.py, bind.py, design.py, fit.py — one chunked Householder QR
for the gaussian tiers, the IRLS over the rows held for binomial and Poisson, itself checked
against statsmodels in tests/test_glm_in_memory.py) is the reference the streamed path
(TSQR over batches, streamed IRLS) is checked against; the data are seeded simulations built
here, written to a CSV and read back in small batches so that every pass crosses many of them.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from schemakit import assert_follows_schema

from compiler import batches
from compiler.pipeline import analyse
from compiler.plan import (Analysis, Assumption, Covariance, DataSource, Plan, Population,
                           Condition, Study, Term, Tier, Variable)
from compiler.problems import Stop

DIGITS = 1e-12  # 12 significant digits, as a relative difference


def simulated_csv(path, n=3000, seed=2):
    rng = np.random.default_rng(seed)
    arm = rng.choice(["control", "light", "strong"], n)
    age = np.round(rng.uniform(16, 80, n), 1)
    dose = np.round(rng.normal(5, 2, n), 3)
    effect = {"control": 0.0, "light": -0.4, "strong": -0.9}
    eta = np.array([effect[a] for a in arm]) + 0.02 * (age - 50) + 0.1 * dose
    score = np.round(10 + 3 * eta + rng.normal(0, 1 + 0.02 * age, n), 4)
    improved = (rng.random(n) < 1 / (1 + np.exp(-eta))).astype(int)
    days = rng.integers(1, 30, n)
    events = rng.poisson(days * np.exp(-2 + 0.5 * eta))
    lines = ["pid,arm,age,dose,score,improved,events,days"]
    for i in range(n):
        shown = "NA" if i % 97 == 5 else f"{score[i]}"
        lines.append(f"P{i:05d},{arm[i]},{age[i]},{dose[i]},{shown},{improved[i]},"
                     f"{events[i]},{days[i]}")
    path.write_text("\n".join(lines) + "\n")
    return path


def tier_list(exposure, *added):
    terms = (Term("variable", (exposure,)),)
    tiers = [Tier("crude", (), terms)]
    for k, more in enumerate(added):
        new = tuple(more)
        terms = terms + new
        tiers.append(Tier(f"tier{k + 1}", new, terms))
    return tuple(tiers)


def bench_plan(csv):
    adjust = [Term("variable", ("age",)), Term("power", ("age",), degree=2),
              Term("variable", ("dose",))]
    analyses = (
        Analysis("linear", "score", "gaussian", "arm",
                 tier_list("arm", adjust[:1], adjust[1:]), report_tier="tier2",
                 population="adults"),
        Analysis("logistic", "improved", "binomial", "arm", tier_list("arm", adjust),
                 report_tier="tier1", population="adults"),
        Analysis("counts", "events", "poisson", "arm", tier_list("arm", adjust),
                 report_tier="tier1", offset="days"),
    )
    variables = (
        Variable("pid", "identifier"),
        Variable("arm", "categorical", levels=("control", "light", "strong"),
                 reference="control"),
        Variable("age", "continuous", min=0, max=120),
        Variable("dose", "continuous"),
        Variable("score", "continuous", max_missing=0.5),
        Variable("improved", "binary"),
        Variable("events", "count"),
        Variable("days", "count", min=1),
    )
    return Plan(1, Study("stream-check"), DataSource(str(csv), "csv", row_id="pid"), variables,
                (Population("adults", (Condition("age", "at_least", 18.0),)),), analyses,
                assumptions=(Assumption("A1", "linear", "constant-variance",
                                        Covariance("HC3"), (), p_below=0.05),),
                source=str(csv.parent / "plan.yaml"))


def numbers_agree(a, b, where="", skip=("fitted", "residuals")):
    """Every float in two nested values agrees to DIGITS (p-values on the log scale, where
    the far tail magnifies the statistic's last digits); everything else is equal."""
    if dataclasses.is_dataclass(a):
        for f in dataclasses.fields(a):
            if f.name not in skip:
                numbers_agree(getattr(a, f.name), getattr(b, f.name), f"{where}.{f.name}")
    elif isinstance(a, (tuple, list)):
        assert len(a) == len(b), where
        for i, (x, y) in enumerate(zip(a, b)):
            numbers_agree(x, y, f"{where}[{i}]")
    elif isinstance(a, dict):
        assert sorted(a) == sorted(b), where
        for key in a:
            numbers_agree(a[key], b[key], f"{where}.{key}")
    elif isinstance(a, float) and isinstance(b, float):
        if where.endswith((".p", "_p", ".p_two_sided", ".p_adjusted")) and a > 0 and b > 0:
            a, b = math.log(a), math.log(b)
        assert a == pytest.approx(b, rel=DIGITS, abs=1e-300), where
    elif not isinstance(a, np.ndarray):
        assert a == b, where


def both_stop(plan, csv) -> tuple[Stop, Stop]:
    """The Stop of an in-memory run and that of a streamed run of ``plan`` on ``csv``."""
    stops = []
    for stream in (False, True):
        with pytest.raises(Stop) as caught:
            analyse(plan, csv, stream=stream)
        stops.append(caught.value)
    return stops[0], stops[1]


@pytest.fixture
def small_batches(monkeypatch):
    monkeypatch.setattr(batches, "BATCH_BYTES", 8192)  # pyarrow's smallest useful block
    monkeypatch.setattr(batches, "GATHER_ROWS", 100)  # about 30 batches of the fixture


def test_streamed_fits_equal_in_memory_fits_in_every_family(tmp_path, small_batches):
    csv = simulated_csv(tmp_path / "trial.csv")
    plan = bench_plan(csv)
    in_memory = analyse(plan, csv, stream=False)
    streamed = analyse(plan, csv, stream=True)
    numbers_agree(in_memory.fits, streamed.fits, "fits")
    numbers_agree(in_memory.verdicts, streamed.verdicts, "verdicts")


def test_streamed_flow_digest_and_findings_equal_in_memory(tmp_path, small_batches):
    csv = simulated_csv(tmp_path / "trial.csv")
    plan = bench_plan(csv)
    in_memory = analyse(plan, csv, stream=False).bound
    streamed = analyse(plan, csv, stream=True).bound
    assert [s.flow for s in streamed.samples] == [s.flow for s in in_memory.samples]
    assert streamed.findings == in_memory.findings
    for key in ("sha256", "rows_read", "size_bytes", "unused_columns"):
        assert getattr(streamed.table, key) == getattr(in_memory.table, key)


def test_streamed_contract_names_the_same_problems_as_in_memory(tmp_path, small_batches):
    csv = simulated_csv(tmp_path / "trial.csv")
    lines = csv.read_text().splitlines()
    fields = lines[10].split(",")
    fields[1] = "Control"  # a level differing from a declared one only in case
    lines[10] = ",".join(fields)
    lines[2000] = "P00003" + lines[2000][6:]  # a repeated identifier, far from the first
    fields = lines[2500].split(",")
    fields[2] = "131.0"  # age above its declared max
    lines[2500] = ",".join(fields)
    csv.write_text("\n".join(lines) + "\n")
    plan = bench_plan(csv)
    in_memory, streamed = both_stop(plan, csv)
    assert streamed.problems == in_memory.problems
    assert {p.code for p in streamed.problems} >= {"unknown-level", "duplicate-id",
                                                         "out-of-range"}


def test_streamed_text_in_a_numeric_column_is_reported_as_in_memory(tmp_path, small_batches):
    csv = simulated_csv(tmp_path / "trial.csv")
    lines = csv.read_text().splitlines()
    fields = lines[2900].split(",")
    fields[3] = "five"
    lines[2900] = ",".join(fields)
    csv.write_text("\n".join(lines) + "\n")
    plan = bench_plan(csv)
    in_memory, streamed = both_stop(plan, csv)
    assert streamed.problems == in_memory.problems


PLAN_YAML = """\
prespec: 1
study: {id: stream-check, version: "1"}
data: {path: trial.csv, row_id: pid}
variables:
  pid: {kind: identifier}
  arm: {kind: categorical, levels: [control, light, strong], reference: control}
  age: {kind: continuous, min: 0, max: 120}
  dose: {kind: continuous}
  score: {kind: continuous, max_missing: 0.5}
  improved: {kind: binary}
  events: {kind: count}
  days: {kind: count, min: 1}
populations:
  adults: {where: [{variable: age, at_least: 18}]}
analyses:
  - id: linear
    population: adults
    outcome: score
    family: gaussian
    exposure: arm
    tiers: [{name: crude}, {name: adjusted, add: [age, {power: age, degree: 2}, dose]}]
    report_tier: adjusted
  - id: counts
    population: adults
    outcome: events
    family: poisson
    exposure: arm
    offset: days
    tiers: [{name: crude}, {name: adjusted, add: [age, dose]}]
    report_tier: adjusted
decisions:
  - {id: H1, analysis: linear, test: superiority, level: strong}
  - {id: H2, analysis: counts, test: superiority, level: strong}
assumptions:
  - {id: A1, analysis: linear, check: constant-variance, p_below: 0.05,
     fallback: {covariance: HC3}, applies_to: [H1]}
"""


def test_prespec_run_stream_writes_the_in_memory_results(tmp_path):
    import json
    import os
    import subprocess
    import sys
    from pathlib import Path

    simulated_csv(tmp_path / "trial.csv")
    (tmp_path / "plan.yaml").write_text(PLAN_YAML)
    prespec = str(Path(sys.executable).parent / "prespec")
    documents = []
    for extra in ([], ["--stream"]):
        out = tmp_path / f"out{len(documents)}"
        done = subprocess.run([prespec, "run", str(tmp_path / "plan.yaml"), "--unlocked",
                               "--out", str(out), *extra], capture_output=True, text=True,
                              env={**os.environ, "PRESPEC_STREAM_BATCH_BYTES": "8192",
                                   "PRESPEC_STREAM_BATCH_ROWS": "100",
                                   "CI": "1"})
        assert done.returncode == 0, done.stderr
        assert_follows_schema(out / "results.json")
        documents.append(json.loads((out / "results.json").read_text()))
    in_memory, streamed = documents
    for analysis in (*in_memory["analyses"], *streamed["analyses"]):
        # a streamed run holds no columns, so it has no sample characteristics (stated there)
        analysis.pop("characteristics")
    numbers_agree(in_memory, streamed, "results")


def test_streamed_aliasing_is_explained_as_in_memory(tmp_path, small_batches):
    # dose = age / 2 + 3 in every row: the dose column is a combination of the intercept and
    # age. The explanation comes from R, which both paths have (a streamed run never holds X).
    csv = simulated_csv(tmp_path / "trial.csv")
    lines = csv.read_text().splitlines()
    for k in range(1, len(lines)):
        fields = lines[k].split(",")
        fields[3] = repr(float(fields[2]) / 2 + 3)
        lines[k] = ",".join(fields)
    csv.write_text("\n".join(lines) + "\n")
    plan = bench_plan(csv)
    in_memory, streamed = both_stop(plan, csv)
    assert [p.code for p in in_memory.problems] == ["aliased-column"]
    message = in_memory.problems[0].message
    assert "`dose`" in message and "is a linear combination of" in message and "`age`" in message
    assert streamed.problems == in_memory.problems


def test_streamed_clustered_covariance_equals_in_memory(tmp_path, small_batches):
    # Forty sites, each met in nearly every batch: a cluster's scores are summed across
    # batches (stream.ClusterCodes gives a site the same code in every pass), then the
    # sandwich is finished as in memory (covariance.cluster_meat). Every family, every tier.
    csv = simulated_csv(tmp_path / "trial.csv")
    lines = csv.read_text().splitlines()
    rng = np.random.default_rng(8)
    sites = [f"s{k:02d}" for k in range(40)]
    lines = [lines[0] + ",site"] + [f"{line},{rng.choice(sites)}" for line in lines[1:]]
    csv.write_text("\n".join(lines) + "\n")
    plan = bench_plan(csv)
    clustered = Covariance("cluster", "site")
    plan = dataclasses.replace(
        plan, variables=(*plan.variables, Variable("site", "categorical", levels=tuple(sites))),
        analyses=tuple(dataclasses.replace(a, covariance=clustered) for a in plan.analyses),
        assumptions=())
    in_memory = analyse(plan, csv, stream=False)
    streamed = analyse(plan, csv, stream=True)
    numbers_agree(in_memory.fits, streamed.fits, "fits")
    for fit in streamed.fits:
        for tier in fit.tiers:
            assert all(c.standard_error is not None for c in tier.columns), (fit.analysis, tier.name)
            assert [e.covariance for e in tier.exposure] == ["clustered by site"]


@pytest.mark.parametrize("suffix", [".parquet", ".xpt", ".dta"])
def test_streamed_parquet_transport_and_stata_files_equal_in_memory(tmp_path, small_batches,
                                                                      suffix):
    # Parquet's batch iterator and pandas' chunked readers feed the batches; the file's digest,
    # the sample flow and every fit must be those of reading the file whole. Files written by
    # pandas (Parquet, Stata 118) and pyreadstat (SAS transport version 5), from the same
    # simulated trial as the CSV tests.
    import pandas as pd
    import pyreadstat

    csv = simulated_csv(tmp_path / "trial.csv")
    frame = pd.read_csv(csv, keep_default_na=True)
    path = tmp_path / f"trial{suffix}"
    if suffix == ".parquet":
        frame.to_parquet(path)
    elif suffix == ".xpt":
        pyreadstat.write_xport(frame, str(path), file_format_version=5)
    else:
        frame.to_stata(path, write_index=False, version=118)
    plan = bench_plan(path)
    plan = dataclasses.replace(plan, data=dataclasses.replace(plan.data, path=str(path),
                                                              format=None))
    in_memory = analyse(plan, path, stream=False)
    streamed = analyse(plan, path, stream=True)
    assert streamed.bound.table.sha256 == in_memory.bound.table.sha256
    assert [s.flow for s in streamed.bound.samples] == [s.flow for s in in_memory.bound.samples]
    numbers_agree(in_memory.fits, streamed.fits, "fits")


def test_a_streamed_file_without_rows_is_reported_as_in_memory(tmp_path, small_batches):
    csv = simulated_csv(tmp_path / "trial.csv")
    csv.write_text(csv.read_text().splitlines()[0] + "\n")  # the header alone
    in_memory, streamed = both_stop(bench_plan(csv), csv)
    assert [p.code for p in in_memory.problems] == ["no-rows"]
    assert streamed.problems == in_memory.problems


def test_streamed_characteristics_equal_in_memory_but_for_the_quartiles(tmp_path, small_batches):
    # Counts, shares, means, SDs, minima, maxima and missing counts are sums over the batches;
    # medians and quartiles need every value at once and are None with a reason.
    csv = simulated_csv(tmp_path / "trial.csv")
    plan = bench_plan(csv)
    in_memory = analyse(plan, csv, stream=False).characteristics
    streamed = analyse(plan, csv, stream=True).characteristics
    quartiles = ("median", "q1", "q3")

    def without_quartiles(summary):
        summary = dict(summary, quartiles=None)
        for variable in summary["variables"]:
            for cell in (*variable["groups"], variable["whole_sample"]):
                if "mean" in cell:
                    assert all(cell[q] is not None for q in quartiles) or cell["n"] == 0
                    cell.update(dict.fromkeys(quartiles), reason=None)
        return summary

    for name in in_memory:
        for variable in streamed[name]["variables"]:
            for cell in (*variable["groups"], variable["whole_sample"]):
                if "mean" in cell and cell["n"]:
                    assert cell["median"] is None and "streamed run" in cell["reason"]
                    cell["reason"] = None
        numbers_agree(without_quartiles(in_memory[name]), streamed[name], name)


@pytest.mark.parametrize("column, value", [("score", "12.5"), ("improved", "1"),
                                           ("events", "0")])
@pytest.mark.parametrize("streamed", [False, True])
def test_an_outcome_with_one_value_stops_with_exit_3_in_memory_and_streamed(
        tmp_path, small_batches, column, value, streamed):
    # gaussian: the fit's numbers would be rounding noise; binomial and Poisson: the MLE is
    # at the boundary (statsmodels' IRLS gives NaN). Every family's outcome is checked.
    csv = simulated_csv(tmp_path / "d.csv", n=600)
    lines = csv.read_text().splitlines()
    at = lines[0].split(",").index(column)
    rows = [line.split(",") for line in lines[1:]]
    for row in rows:
        row[at] = value
    csv.write_text("\n".join([lines[0], *(",".join(r) for r in rows)]) + "\n")
    with pytest.raises(Stop) as caught:
        analyse(bench_plan(csv), csv, stream=streamed)
    [problem] = caught.value.problems
    assert problem.code == "constant-outcome" and problem.column == column
    assert f"takes the one value {float(value):g} in all" in problem.message
