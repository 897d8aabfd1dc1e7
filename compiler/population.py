"""Populations and the sample flow: which rows each analysis uses, and why the others are out.

A population is a list of structured conditions, all of which must hold. A comparison on a
missing value does not hold (the row is excluded) — only ``is_missing`` looks at missingness.
The rows left are then narrowed to complete cases over every variable the analysis uses, in
the analysis' own variable order, so every tier is fitted on the same rows. Each step counts
the rows it removes from those still in, so rows_read − Σ excluded = n.
"""

from __future__ import annotations

import numpy as np

from .bound import FlowStep, RowLabels, Sample, SampleFlow, Table, TextColumn
from .plan import Analysis, Condition, Plan, Variable


class Masks:
    """Missing-value masks per column, computed once and shared by every analysis."""

    def __init__(self, plan: Plan, table: Table):
        self._plan, self._table, self._cache = plan, table, {}

    def missing(self, name: str) -> np.ndarray:
        if name not in self._cache:
            self._cache[name] = missing_mask(self._plan.variable(name), self._table)
        return self._cache[name]


def missing_mask(variable: Variable, table: Table) -> np.ndarray:
    if variable.is_numeric:
        return np.isnan(table.columns[variable.name])
    if variable.kind == "categorical":
        return table.categories(variable.name)[0] < 0
    column = table.columns[variable.name]
    return column.missing() if isinstance(column, TextColumn) else np.equal(column, None)


def holds(condition: Condition, variable: Variable, table: Table) -> np.ndarray:
    """Rows where the condition holds; a comparison on a missing value does not hold."""
    op, value = condition.op, condition.value
    if op == "is_missing":
        absent = missing_mask(variable, table)
        return absent if value else ~absent
    if variable.is_numeric:
        values = table.columns[variable.name]
        present = ~np.isnan(values)
        listed = np.asarray([float(v) for v in value], float) if op in ("in", "not_in") \
            else None
        return {
            "equals": lambda: values == float(value),
            "not_equals": lambda: (values != float(value)) & present,
            "in": lambda: np.isin(values, listed),
            "not_in": lambda: ~np.isin(values, listed) & present,
            "at_least": lambda: values >= float(value),
            "at_most": lambda: values <= float(value),
            "above": lambda: values > float(value),
            "below": lambda: values < float(value),
        }[op]()
    codes, distinct = table.categories(variable.name)
    if op not in ("equals", "not_equals", "in", "not_in"):
        # resolve refuses an ordered comparison on text; nothing can hold if one slips through
        return np.zeros(len(codes), bool)
    wanted = [_text(v) for v in (value if op in ("in", "not_in") else (value,))]
    hits = [k for k, d in enumerate(distinct) if d in wanted]
    inside = np.isin(codes, hits)
    return inside if op in ("equals", "in") else ~inside & (codes >= 0)


def draw(plan: Plan, analysis: Analysis, table: Table, masks: Masks | None = None) -> Sample:
    """The analysis' sample and its flow: population conditions, then complete cases."""
    masks = masks or Masks(plan, table)
    keep = np.ones(table.rows_read, bool)
    in_sample = table.rows_read
    by_condition = []
    population = plan.population(analysis.population)
    for condition in population.conditions if population else ():
        keep &= holds(condition, plan.variable(condition.variable), table)
        left = int(np.count_nonzero(keep))
        by_condition.append(FlowStep(condition.describe(), condition.variable, in_sample - left))
        in_sample = left
    rows_in_population = in_sample
    by_missing = []
    for name in analysis.variables_used:
        keep &= ~masks.missing(name)
        left = int(np.count_nonzero(keep))
        by_missing.append(FlowStep(f"missing {name}", name, in_sample - left))
        in_sample = left
    rows = np.flatnonzero(keep).astype(np.int64, copy=False)
    flow = SampleFlow(table.rows_read, analysis.population, tuple(by_condition),
                      rows_in_population, tuple(by_missing), in_sample)
    return Sample(analysis.id, rows, row_ids(plan, table, rows), flow)


def row_ids(plan: Plan, table: Table, rows: np.ndarray) -> RowLabels:
    """The rows' row_id values, or their 1-based data row numbers as text; each label is made
    only when asked for (a report names a handful of rows out of millions)."""
    if plan.data.row_id and plan.data.row_id in table.columns:
        return RowLabels(rows, table.columns[plan.data.row_id])
    return RowLabels(rows)


def _text(value) -> str:
    """A condition value compared with a text column: 2.0 written in YAML as 2 means "2"."""
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value)
