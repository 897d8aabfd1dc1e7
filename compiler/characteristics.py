"""The analysed sample's characteristics by exposure group: numbers for results.json.

For one analysis, every variable it uses (outcome, covariates, offset, cluster; not an
identifier) is summarised on the analysed rows, per exposure group and for the whole sample:
continuous → mean, SD (n − 1 divisor), median and quartiles; count → the same (the report
shows "median (IQR q1 to q3)"); binary → count and share of 1s; categorical → count and share per
declared level. Missing counts are taken in the population's rows, before the complete-case
step (the analysed rows have none by construction), using the same population conditions
as bind (compiler.population.holds). A categorical or binary exposure defines the groups;
any other exposure is summarised overall only, as a variable of its own.

Quartiles are numpy.quantile's default: linear interpolation between order statistics
(Hyndman & Fan 1996, definition 7). When the exposure groups make up the analysed rows, the
overall cell is built from the groups' selected values and moments rather than from another
pass over each column: the same quartiles to the bit, the mean and SD within an ulp or two.
Everything returned is a plain int, float, str or None.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import reduce

import numpy as np

from .bound import BoundData, Table
from .inference import finite_or_none
from .order_stats import quartiles_by_selection, quartiles_of_selected
from .plan import Analysis, Plan, Variable
from .population import holds, missing_mask

QUARTILES = "linear interpolation between order statistics (numpy default, Hyndman–Fan 7)"
STREAMED = ("not computed: a streamed run never holds the data's columns, so the sample "
            "is summarised by its flow only")
NO_QUARTILES = ("not computed in a streamed run: exact quartiles need every value at once "
                "(counts, means, SDs, minima and maxima are summed over the batches)")
EMPTY = "no analysed rows in this group"


def summarise(plan: Plan, analysis: Analysis, bound: BoundData, map=map) -> dict:
    """The characteristics of ``analysis``' sample (layout: see the module docstring).
    ``map`` runs the per-variable summaries (an executor's map spreads them over threads;
    each is numpy passes that release the GIL); the order of the result does not depend on it."""
    table = bound.table
    exposure = plan.variable(analysis.exposure)
    grouped = exposure.kind in ("categorical", "binary")
    names = _summarised(plan, analysis, exposure, grouped)
    sample = bound.sample(analysis.id)
    base = {"exposure": exposure.name, "grouped": grouped, "quartiles": QUARTILES}
    if any(n not in table.columns for n in (*names, exposure.name)) or sample.rows is None:
        return {**base, "missing_basis": None, "groups": [], "whole_sample": {"n": int(sample.flow.n)},
                "variables": [], "exposure_missing": None, "reason": STREAMED}

    analysed = np.zeros(table.rows_read, bool)
    analysed[sample.rows] = True
    population = _population(plan, analysis, table)
    levels, group_masks = _groups(exposure, table) if grouped else ((), ())
    everyone = np.ones(table.rows_read, bool)

    # Each group's analysed rows as positions, found once for every variable: picking values
    # by position is about ten times faster than by a boolean mask whose pattern is random
    # (every branch mispredicted), and gives the same values in the same order.
    picks = [np.flatnonzero(analysed & m) for m in group_masks]
    # the groups split the analysed rows (bind keeps no row without a declared exposure
    # level): the overall cell can then come from the groups' selected values and moments,
    # and needs no positions of its own
    split = grouped and sum(len(rows) for rows in picks) == int(np.count_nonzero(analysed))
    overall_rows = None if split else np.flatnonzero(analysed)

    def summary(name: str) -> dict:
        variable = plan.variable(name)
        absent = missing_mask(variable, table)
        values = table.columns[variable.name]

        def stats(group: np.ndarray, rows: np.ndarray, parts=None):
            # parts: the groups' selected values and moments, when they make up these rows
            picked = values[rows] if parts is None else None  # a copy _describe reorders
            out, moments = _describe(variable, picked, parts)
            out["missing"] = int(np.count_nonzero(population & group & absent))
            return out, (picked, moments)

        described = [stats(m, rows) for m, rows in zip(group_masks, picks)]
        groups = [out for out, _ in described]
        overall, _ = stats(everyone, overall_rows,
                           [part for _, part in described] if split else None)
        return _entry(analysis, exposure, variable, groups, overall)

    variables = list(map(summary, names))
    exposure_absent = missing_mask(exposure, table)
    return {
        **base, "missing_basis": "population",
        "groups": [{"level": level, "n": int(np.count_nonzero(analysed & m)),
                    "n_population": int(np.count_nonzero(population & m))}
                   for level, m in zip(levels, group_masks)],
        "whole_sample": {"n": int(np.count_nonzero(analysed)),
                    "n_population": int(np.count_nonzero(population))},
        "variables": variables,
        "exposure_missing": int(np.count_nonzero(population & exposure_absent)),
        "reason": None,
    }


def _population(plan: Plan, analysis: Analysis, table: Table) -> np.ndarray:
    keep = np.ones(table.rows_read, bool)
    population = plan.population(analysis.population)
    for condition in population.conditions if population else ():
        keep &= holds(condition, plan.variable(condition.variable), table)
    return keep


def _summarised(plan: Plan, analysis: Analysis, exposure: Variable, grouped: bool) -> list[str]:
    """The variables a summary describes: every one the analysis uses but identifiers, and
    the exposure itself when it defines the groups."""
    return [n for n in analysis.variables_used
            if plan.variable(n).kind != "identifier" and not (grouped and n == exposure.name)]


def _entry(analysis: Analysis, exposure: Variable, variable: Variable, groups: list,
           overall: dict) -> dict:
    name = variable.name
    role = ("outcome" if name == analysis.outcome else "exposure" if name == exposure.name
            else "offset" if name == analysis.offset
            else "cluster" if name == analysis.covariance.cluster else "covariate")
    return {"name": name, "role": role, "kind": variable.kind, "label": variable.label,
            "unit": variable.unit, "groups": groups, "whole_sample": overall}


def _group_levels(exposure: Variable) -> tuple[str, ...]:
    return ("0", "1") if exposure.kind == "binary" else exposure.levels


def _groups(exposure: Variable, table: Table) -> tuple[tuple[str, ...], list[np.ndarray]]:
    values = table.columns[exposure.name]
    if exposure.kind == "binary":
        return _group_levels(exposure), [values == 0.0, values == 1.0]
    return _group_levels(exposure), [values == level for level in exposure.levels]


def _counted(variable: Variable, counts, n: int) -> dict:
    """A categorical cell from its counts per declared level, or a binary one from its
    count of 1s (``counts`` then holds that one count)."""
    if variable.kind == "categorical":
        cell = {"n": n, "levels": [{"level": level, "count": int(c), "share": _ratio(int(c), n)}
                                   for level, c in zip(variable.levels, counts)]}
    else:
        ones = int(counts[0])
        cell = {"n": n, "count": ones, "share": _ratio(ones, n)}
    return {**cell, **({"reason": EMPTY} if n == 0 else {})}


def _no_rows() -> dict:
    """A continuous or count cell of a group without analysed rows."""
    return {"n": 0, **dict.fromkeys(("mean", "sd", "median", "q1", "q3", "min", "max")),
            "reason": EMPTY}


def _describe(variable: Variable, values: np.ndarray | None,
              parts=None) -> tuple[dict, Moments | None]:
    """One cell, and for a continuous or count variable its moments. ``values`` is reordered
    in place (``quartiles_by_selection``), unless ``parts`` (its values split into parts,
    each reordered so and with its moments) gives its order statistics and moments instead
    (``values`` is then None)."""
    pieces = [values] if parts is None else [part for part, _ in parts]
    n = sum(len(piece) for piece in pieces)

    def count(value) -> int:
        return sum(int(np.count_nonzero(piece == value)) for piece in pieces)

    if variable.kind == "categorical":
        return _counted(variable, [count(level) for level in variable.levels], n), None
    if variable.kind == "binary":
        return _counted(variable, [count(1.0)], n), None
    if n == 0:
        return _no_rows(), Moments()
    if parts is None:
        moments = Moments.of(values)
        # last, because it reorders ``values``, this group's own copy (picked by position)
        q1, median, q3 = quartiles_by_selection(values)
        low, high = np.min(values), np.max(values)
    else:
        moments = Moments.pooled([m for _, m in parts])
        q1, median, q3 = quartiles_of_selected(pieces)
        low = min(np.min(piece) for piece in pieces if len(piece))
        high = max(np.max(piece) for piece in pieces if len(piece))
    out = {"n": n, **moments.cell(),
           "median": finite_or_none(median), "q1": finite_or_none(q1),
           "q3": finite_or_none(q3), "min": finite_or_none(low), "max": finite_or_none(high)}
    if n < 2:
        out["reason"] = "a standard deviation needs at least two rows"
    return out, moments


@dataclass(frozen=True)
class Moments:
    """n, the mean and the sum of squared deviations from it, of some values: what a cell's
    mean and SD need, in memory (a group's values, or the groups' pooled) and streamed (a
    group's batches, merged)."""

    n: int = 0
    mean: float = 0.0
    m2: float = 0.0

    @classmethod
    def of(cls, values: np.ndarray) -> "Moments":
        """As numpy.mean and numpy.std compute them (pairwise sums; the same bits). Values
        whose squares overflow (beyond 1e154) give an infinite m2, hence no SD, and no
        warning on the terminal."""
        with np.errstate(over="ignore", invalid="ignore"):
            mean = np.mean(values)
            deviations = values - mean
            np.square(deviations, out=deviations)
            return cls(len(values), float(mean), float(np.sum(deviations)))

    def merge(self, other: "Moments") -> "Moments":
        """The moments of both parts' values together, without another pass over them
        (Chan, Golub & LeVeque 1983, Am Stat 37:242-247, the pairwise update)."""
        if other.n == 0:
            return self
        if self.n == 0:
            return other
        n = self.n + other.n
        delta = other.mean - self.mean
        return Moments(n, self.mean + delta * other.n / n,
                       self.m2 + other.m2 + delta * delta * self.n * other.n / n)

    @staticmethod
    def pooled(parts: list["Moments"]) -> "Moments":
        """The parts merged in order: the sample's overall moments from its groups'."""
        return reduce(Moments.merge, parts, Moments())

    def cell(self) -> dict:
        """A cell's mean and SD (n − 1 divisor; None below two values)."""
        return {"mean": finite_or_none(self.mean),
                "sd": finite_or_none(np.sqrt(self.m2 / (self.n - 1))) if self.n >= 2 else None}


class StreamedSummary:
    """``summarise`` for a streamed run, as a reduction over the batches of the bind pass.

    Each batch adds its analysed rows' counts, moments (``Moments.merge``), minima and
    maxima per group and variable, and its
    missing counts in the population; ``result`` gives summarise's layout, with the medians
    and quartiles None and NO_QUARTILES as the reason (they need every value at once).
    """

    def __init__(self, plan: Plan, analysis: Analysis):
        exposure = plan.variable(analysis.exposure)
        self.plan, self.analysis, self.exposure = plan, analysis, exposure
        self.grouped = exposure.kind in ("categorical", "binary")
        self.names = _summarised(plan, analysis, exposure, self.grouped)
        self.levels = _group_levels(exposure) if self.grouped else ()
        width = len(self.levels) + 1  # the groups, then everyone
        self.n = np.zeros(width, np.int64)
        self.n_population = np.zeros(width, np.int64)
        self.exposure_missing = 0
        self.parts = {name: [_Part() for _ in range(width)] for name in self.names}

    def add(self, table: Table, sample) -> None:
        analysed = np.zeros(table.rows_read, bool)
        analysed[sample.rows] = True
        population = _population(self.plan, self.analysis, table)
        masks = [*(_groups(self.exposure, table)[1] if self.grouped else ()),
                 np.ones(table.rows_read, bool)]
        picks = [np.flatnonzero(analysed & m) for m in masks]
        self.n += [len(p) for p in picks]
        self.n_population += [int(np.count_nonzero(population & m)) for m in masks]
        self.exposure_missing += int(np.count_nonzero(
            population & missing_mask(self.exposure, table)))
        for name in self.names:
            variable = self.plan.variable(name)
            values = table.columns[name]
            absent = missing_mask(variable, table)
            for part, mask, rows in zip(self.parts[name], masks, picks):
                part.missing += int(np.count_nonzero(population & mask & absent))
                picked = values[rows]
                if variable.kind == "categorical":
                    part.count([np.count_nonzero(picked == level) for level in variable.levels])
                elif variable.kind == "binary":
                    part.count([np.count_nonzero(picked == 1.0)])
                elif len(picked):
                    part.moments = part.moments.merge(Moments.of(picked))
                    part.low = min(part.low, float(np.min(picked)))
                    part.high = max(part.high, float(np.max(picked)))

    def result(self) -> dict:
        def described(variable: Variable, part: "_Part", n: int) -> dict:
            if variable.kind in ("categorical", "binary"):
                width = len(variable.levels) if variable.kind == "categorical" else 1
                return _counted(variable, [0] * width if part.counts is None else part.counts,
                                n)
            if n == 0:
                return _no_rows()
            reasons = [NO_QUARTILES]
            if n < 2:
                reasons.insert(0, "a standard deviation needs at least two rows")
            return {"n": n, **part.moments.cell(),
                    "min": finite_or_none(part.low), "max": finite_or_none(part.high),
                    "median": None, "q1": None, "q3": None, "reason": "; ".join(reasons)}

        exposure = self.exposure
        variables = []
        for name in self.names:
            variable = self.plan.variable(name)
            cells = [dict(described(variable, part, int(n)), missing=int(part.missing))
                     for part, n in zip(self.parts[name], self.n)]
            variables.append(_entry(self.analysis, exposure, variable, cells[:-1], cells[-1]))
        return {
            "exposure": exposure.name, "grouped": self.grouped, "quartiles": None,
            "missing_basis": "population",
            "groups": [{"level": level, "n": int(n), "n_population": int(m)}
                       for level, n, m in zip(self.levels, self.n, self.n_population)],
            "whole_sample": {"n": int(self.n[-1]), "n_population": int(self.n_population[-1])},
            "variables": variables, "exposure_missing": int(self.exposure_missing),
            "reason": None,
        }


class _Part:
    """One group's running sums for one variable."""

    def __init__(self):
        self.missing = 0
        self.counts: np.ndarray | None = None  # per declared level (categorical) or of 1s
        self.moments = Moments()
        self.low, self.high = np.inf, -np.inf

    def count(self, found: list[int]) -> None:
        found = np.asarray(found, np.int64)
        self.counts = found if self.counts is None else self.counts + found


def _ratio(count: int, n: int) -> float | None:
    return count / n if n else None
