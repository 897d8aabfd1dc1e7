"""The data a rehearsal runs on: synthetic data from the dictionary, or real data scrambled.

`synthetic_table` draws every declared variable inside the plan's ranges, levels and population
rules (see `synthesize`), then makes each analysis' outcome from the plan's own largest model,
with the exposure effects the caller plants, each on its analysis' natural scale:

- the linear predictor is built by the design pass itself on the generated columns, so the
  outcome follows exactly the columns the fit will use;
- each exposure column gets the effect planted for its analysis and level (`effects.py`:
  given on the natural scale, a difference, an odds ratio or a rate ratio, entered as the
  difference or the ratio's logarithm; each non-reference level of a categorical exposure,
  the effect per unit of a numeric one), no effect when none is planted; terms that combine
  the exposure with something else get 0, so the effect is the same at every covariate value;
- every other column gets a modest coefficient of random sign (fixed by the seed) worth 0.2
  noise sd (gaussian), 0.2 on the log-odds scale (binomial) or 0.1 on the log-rate scale
  (poisson) per sd of the column;
- the columns are centred, so the outcome's average sits where the family wants it whatever
  the effect: gaussian at the middle of the outcome's range with noise sd range / 10,
  binomial near a probability of 0.3, poisson near a mean count of 3 (proportional to the
  offset when the analysis has one). Values past a bound are clipped into it (rare).

When several analyses share an outcome, the first one makes it. Outcomes are made in plan
order, so an analysis that adjusts for an earlier analysis' outcome sees the generated one.
"""

from __future__ import annotations

import csv
import hashlib
import io
from dataclasses import replace

import numpy as np

from . import rehearsal_size, rehearse_clusters, synthesize
from .allowed import Allowed
from .effects import PlantedEffect, coefficients
from .bound import BoundData, Sample, SampleFlow, Table
from .plan import Analysis, Plan
from .problems import Exit, Problem, Stop

DEFAULT_ROWS = 500
SYNTHETIC_PATH = "<synthetic>"

_COVARIATE_SHARE = {"gaussian": 0.2, "binomial": 0.2, "poisson": 0.1}
_MEAN_PROBABILITY = 0.3
_MEAN_COUNT = 3.0
_LOG_SCALE_LIMIT = 35.0


def synthetic_table(plan: Plan, *, rows: int | None = None, seed: int,
                    effects: tuple[PlantedEffect, ...] = ()) -> Table:
    """A data set made from the plan's dictionary alone; the same seed gives the same table.

    Raises Stop (exit 2) when the rows or seed are unusable or when a population rule leaves
    some analysis without a usable sample.
    """
    rows = (plan.data.expected_rows or DEFAULT_ROWS) if rows is None else rows
    _check_arguments(rows=rows, seed=seed, variables=len(plan.variables))
    plan_layout = synthesize.layout(plan, rows, seed)
    columns = synthesize.columns(plan, plan_layout, seed)
    rehearse_clusters.apply(plan, plan_layout, columns, seed)
    made: set[str] = set()
    for analysis in plan.analyses:
        if analysis.outcome not in made:
            columns[analysis.outcome] = _outcome(plan, analysis, plan_layout, columns, seed,
                                                 coefficients(effects, analysis.id))
            made.add(analysis.outcome)
    synthesize.punch_missing(plan, plan_layout, columns, seed)
    body = table_csv(plan, columns)
    return Table(path=SYNTHETIC_PATH, format="synthetic", sha256=hashlib.sha256(body).hexdigest(),
                 size_bytes=len(body), rows_read=rows, columns=columns)


def scrambled_table(plan: Plan, table: Table, variable: str, seed: int) -> Table:
    """The real table with the exposure column permuted by the seed (over all rows, or by
    cluster in a clustered plan: `rehearse_clusters.permutation`); the rest untouched. Only the exposure may be scrambled, and only when every analysis has it: any
    other column would leave the real exposure effects in the rehearsal's report.

    The permutation keeps the column's values, so the data contract sees the real values; the
    file digest stays the real file's, naming what was scrambled.
    """
    _check_arguments(seed=seed)
    declared = {v.name for v in plan.variables}
    if variable not in declared or variable not in table.columns:
        where = ("is not in the data dictionary" if variable not in declared
                 else f"is not a column of {table.path}")
        raise Stop([Problem(
            f"--scramble {variable}: {variable} {where}", code="scramble-unknown",
            hint="name a declared variable, usually an analysis' exposure: "
                 + ", ".join(dict.fromkeys(a.exposure for a in plan.analyses)))],
            Exit.PLAN_INVALID)
    exposures = list(dict.fromkeys(a.exposure for a in plan.analyses))
    if exposures != [variable]:
        others = [e for e in exposures if e != variable]
        why = (f"{variable} is not the exposure of any analysis, so the rehearsal would show "
               "the real exposure effects" if len(others) == len(exposures) else
               f"the exposure {', '.join(others)} of other analyses would stay unscrambled")
        raise Stop([Problem(
            f"--scramble {variable}: {why}", code="scramble-not-exposure",
            hint=f"scramble the exposure ({exposures[0]})" if len(exposures) == 1 else
                 "a scrambled rehearsal blinds one exposure, and this plan has several "
                 f"({', '.join(exposures)}): rehearse on synthetic data (no --data)")],
            Exit.PLAN_INVALID)
    order = rehearse_clusters.permutation(plan, table, variable, seed)
    columns = dict(table.columns)
    columns[variable] = table.columns[variable][order]
    changes: dict = {"columns": columns}
    cached = getattr(table, "codes", {})
    if variable in cached:  # read's category codes must follow the values they stand for
        codes, values = cached[variable]
        changes["codes"] = {**cached, variable: (codes[order], values)}
    # Unparsed-value findings keep their positions in the real file, where the analyst looks.
    return replace(table, **changes)


def table_csv(plan: Plan, columns: dict[str, np.ndarray]) -> bytes:
    """The canonical serialisation of synthetic columns: a CSV in dictionary order that `read`
    can load back to the same values (floats written shortest-exact, missing as the plan's
    first missing marker). Its sha256 is the synthetic table's digest."""
    missing = plan.data.missing[0] if plan.data.missing else ""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow([v.name for v in plan.variables])
    texts = []
    for v in plan.variables:
        values = columns[v.name]
        if values.dtype == object:
            text = values.copy()
            text[values == None] = missing  # noqa: E711
        else:
            known = np.isfinite(values)
            text = np.full(len(values), missing, dtype=object)
            if v.kind in ("count", "binary"):
                text[known] = values[known].astype(np.int64).astype(str)
            else:  # repr: the shortest text that reads back to the same double
                text[known] = list(map(repr, values[known].tolist()))
        texts.append(text.tolist())
    writer.writerows(zip(*texts))
    return out.getvalue().encode("utf-8")


def _check_arguments(*, seed: int, rows: int | None = None, variables: int = 1) -> None:
    problems = []
    if rows is not None and rows < 1:
        problems.append(Problem(f"--rows {rehearsal_size.shown(rows)}: a rehearsal needs at "
                                "least one row", code="bad-rows"))
    too_many = None if rows is None else rehearsal_size.too_many(rows, variables)
    if too_many:
        problems.append(Problem(f"--rows {too_many}",
                                hint="a rehearsal checks the plan, which a few thousand rows "
                                     "do; give a smaller --rows", code="too-many-rows"))
    if seed < 0:
        problems.append(Problem(f"--seed {seed}: the seed must be 0 or more", code="bad-seed"))
    if problems:
        raise Stop(problems, Exit.PLAN_INVALID)


def _outcome(plan: Plan, analysis: Analysis, plan_layout: synthesize.Layout,
             columns: dict[str, np.ndarray], seed: int,
             effect: dict[str | None, float]) -> np.ndarray:
    from . import design

    rows = len(plan_layout.block)
    variable = plan.variable(analysis.outcome)
    allowed = [rules[variable.name] for rules in plan_layout.allowed]
    rng = synthesize.stream(seed, synthesize.OUTCOME, analysis.outcome)
    middle, noise_sd = _location(allowed) if analysis.family == "gaussian" else (0.0, 1.0)

    complete = _complete_rows(analysis, columns, rows)
    built = design.design(plan, analysis, _bound_for(analysis, columns, complete))
    levels = _exposure_levels(plan, analysis)
    exposure = {j: effect.get(levels[i], effect.get(None, 0.0))
                for i, j in enumerate(built.exposure_columns)}
    with_exposure = {t.label for t in analysis.tiers[-1].terms if analysis.exposure in t.variables}
    x = np.asarray(built.x)  # the whole matrix (a gaussian design builds its rows on demand)
    centred = x - x.mean(axis=0)
    spread = centred.std(axis=0)
    signs = synthesize.stream(seed, synthesize.COEFFICIENTS, analysis.id).choice(
        [-1.0, 1.0], size=x.shape[1])
    beta = np.zeros(x.shape[1])
    for j in range(1, x.shape[1]):
        if j in exposure:
            beta[j] = exposure[j]
        elif built.column_term[j] not in with_exposure and spread[j] > 0:
            beta[j] = signs[j] * _COVARIATE_SHARE[analysis.family] * noise_sd / spread[j]
    # Rows the design could not take (a variable a rule keeps missing) sit at the average.
    eta = np.zeros(rows)
    eta[complete] = centred @ beta
    clustered = rehearse_clusters.intercepts(plan, analysis, columns, seed, _MEAN_COUNT)
    icc = 0.0
    if clustered is not None:  # a random cluster intercept (gaussian: in noise sd units)
        intercept, icc = clustered
        eta = eta + (intercept * noise_sd if analysis.family == "gaussian" else intercept)
    if analysis.family != "gaussian":  # keep exp() finite however large an --effect is asked
        eta = np.clip(eta, -_LOG_SCALE_LIMIT, _LOG_SCALE_LIMIT)

    if analysis.family == "gaussian":
        y = middle + eta + rng.normal(0.0, noise_sd * np.sqrt(1.0 - icc), rows)
        if variable.kind == "count":
            y = np.round(y)
    elif analysis.family == "binomial":
        log_odds = np.log(_MEAN_PROBABILITY / (1 - _MEAN_PROBABILITY)) + eta
        y = (rng.random(rows) < 1 / (1 + np.exp(-log_odds))).astype(np.float64)
        if variable.kind == "categorical":
            y = _as_levels(plan, analysis, y)
    else:
        mean = _MEAN_COUNT * np.exp(eta)
        if analysis.offset:
            offset = np.asarray(columns[analysis.offset], dtype=np.float64)
            known = np.isfinite(offset)
            mean = mean * np.where(known, offset / np.mean(offset[known]), 1.0)
        y = rng.poisson(mean).astype(np.float64)
    for b, rules in enumerate(allowed):
        at = plan_layout.block == b
        y[at] = synthesize.conform(variable, rules, y[at], rng)
    return y


def _exposure_levels(plan: Plan, analysis: Analysis) -> list[str | None]:
    """The level each exposure column stands for (None for a numeric exposure's one column)."""
    variable = plan.variable(analysis.exposure)
    if variable.kind != "categorical":
        return [None]
    reference = variable.reference if variable.reference is not None else variable.levels[0]
    return [level for level in variable.levels if level != reference]


def _location(allowed: list[Allowed]) -> tuple[float, float]:
    """Where a gaussian outcome sits and its noise sd: the middle of its range, range / 10."""
    lows = [a.low for a in allowed]
    highs = [a.high for a in allowed]
    low = None if None in lows else min(lows)  # type: ignore[type-var]
    high = None if None in highs else max(highs)  # type: ignore[type-var]
    if low is not None and high is not None:
        return (low + high) / 2, (high - low) / 10
    if low is not None:
        sd = max(1.0, abs(low)) / 2
        return low + 4 * sd, sd
    if high is not None:
        sd = max(1.0, abs(high)) / 2
        return high - 4 * sd, sd
    return 0.0, 1.0


def _complete_rows(analysis: Analysis, columns: dict[str, np.ndarray], rows: int) -> np.ndarray:
    keep = np.ones(rows, dtype=bool)
    for name in analysis.variables_used:
        if name == analysis.outcome:
            continue
        values = columns[name]
        keep &= (values != None) if values.dtype == object else np.isfinite(values)  # noqa: E711
    return keep


def _bound_for(analysis: Analysis, columns: dict[str, np.ndarray],
               complete: np.ndarray) -> BoundData:
    """A stand-in for `bind`'s output, so the design pass can build the generating columns."""
    rows = np.flatnonzero(complete).astype(np.int64)
    n = len(complete)
    flow = SampleFlow(rows_read=n, population=analysis.population, by_condition=(),
                      rows_in_population=n, by_missing=(), n=len(rows))
    sample = Sample(analysis.id, rows, (rows + 1).astype(str).astype(object), flow)
    table = Table(SYNTHETIC_PATH, "synthetic", "", 0, n, columns)
    return BoundData(table, (sample,), ())


def _as_levels(plan: Plan, analysis: Analysis, y: np.ndarray) -> np.ndarray:
    """A 0/1 outcome as a two-level categorical: 0 the reference, 1 the other level."""
    variable = plan.variable(analysis.outcome)
    reference = variable.reference if variable.reference is not None else variable.levels[0]
    other = next(level for level in variable.levels if level != reference)
    return np.where(y == 1, other, reference).astype(object)
