"""Small plans and helpers for the rehearsal-data tests, built in code from the plan dataclasses."""

from __future__ import annotations

import math

import numpy as np
import statsmodels.api as sm

from compiler import design
from compiler.bound import BoundData, Sample, SampleFlow, Table
from compiler.plan import (Analysis, Condition, DataSource, Plan, Population, Study, Term,
                           Tier, Variable)
from compiler.problems import Place
from compiler.rehearse import table_csv

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


def real_table() -> Table:
    rng = np.random.default_rng(99)
    columns = {
        "pid": np.asarray([f"P{i}" for i in range(50)], dtype=object),
        "arm": np.asarray(rng.choice(["control", "low", "high"], 50), dtype=object),
        "age": rng.uniform(18, 80, 50),
    }
    return Table("data/final.csv", "csv", "ab" * 32, 1234, 50, columns)


def written(plan: Plan, table: Table, folder) -> Table:
    from compiler import read

    path = folder / "synthetic.csv"
    path.write_bytes(table_csv(plan, table.columns))
    return read.read(plan, path)
