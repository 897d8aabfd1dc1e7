"""Columns made from the data dictionary alone, inside every population rule.

The rehearsal's synthetic data start here: each variable's values are drawn from a law fitted
to what the dictionary and the population rules allow (its `Allowed` set), so every row lands
inside the plan's own ranges and levels.

- continuous, both bounds: a normal law with mean at the midpoint and sd = range / 6,
  truncated to the bounds by redrawing the values that fall outside (never clipped, so an
  open bound or a log term never meets a value on the bound); one bound only: the bound plus
  (or minus) a gamma(2, max(1, |bound|) / 2) draw; no bound: the standard normal.
- count: the lower bound (0 unless declared higher) plus a Poisson draw, mean 3, or half the
  range when an upper bound is given, redrawn above the upper bound.
- binary and categorical: the allowed values at exactly even shares, in random order.
- identifier: unique codes R00001, R00002, …
- a variable that a log term or a Poisson offset uses is kept positive.

Populations. When the rules of all the analyses' populations can hold together, every row
meets all of them (nested populations, the common case, come out so). When they cannot (say one
population keeps age < 30 and another age ≥ 70), the rows are dealt out evenly among the
populations, and each row meets the rules of its own: every population then holds rows.
A population that no row can meet stops the rehearsal with the condition that empties it.

Excluded rows. So that every population rule is tried, a few rows fail one condition each
and meet every other (`allowed.failing`): 2 % of the rows per condition (at least one, and
one for a condition on an identifier), never more than a quarter of the rows in all (the
conditions in plan order take them until that share is spent). The sample flow then shows
each condition excluding rows. A condition that no value inside the dictionary fails (age ≥ 16
when the dictionary's min is 16) excludes nothing and gets no row.
"""

from __future__ import annotations

import math
import zlib
from dataclasses import dataclass

import numpy as np

from .allowed import (Allowed, analysis_problems, base_allowed, candidates,
                      distinct_values, failing, integer_bounds, population_allowed)
from .plan import Condition, Plan, Population, Variable
from .problems import Exit, Problem, Stop

# Sub-stream purposes: each (purpose, variable) pair has its own stream, so the values of one
# variable do not shift when the dictionary gains another.
VALUES, MISSING, OUTCOME, COEFFICIENTS, BLOCKS, EXCLUDED, CLUSTERS = range(7)

_REDRAWS = 200  # rounds of redrawing for a truncated law before falling back
EXCLUDED_SHARE = 0.02  # of the rows, per population condition
EXCLUDED_LIMIT = 0.25  # of the rows, for all conditions together


def stream(seed: int, purpose: int, name: str = "") -> np.random.Generator:
    """The random stream for one purpose and one variable (or analysis), fixed by the seed."""
    key = (purpose, zlib.crc32(name.encode("utf-8")))
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=key))


@dataclass(frozen=True)
class Layout:
    """How the rows are dealt: ``block[i]`` indexes ``allowed``, one rule set per block."""

    allowed: tuple[dict[str, Allowed], ...]
    block: np.ndarray  # int per row
    protected: frozenset  # variables never given random missing values
    failed: tuple[Condition | None, ...] = ()  # per block: the condition its rows fail


def layout(plan: Plan, rows: int, seed: int) -> Layout:
    """Decide which rules each row meets; raise Stop (exit 2) when a population holds no row."""
    base = base_allowed(plan)
    used = [plan.population(name) for name in dict.fromkeys(a.population for a in plan.analyses)
            if name is not None]
    problems = [Problem(f"variable {v.name}: no value fits its declaration{v.declared_range()}"
                        + (" and the positive values a log term or an offset needs"
                           if base[v.name].low_open and base[v.name].low == 0 else ""),
                        place=v.place, code="variable-empty")
                for v in plan.variables if distinct_values(v, base[v.name]) == 0]
    own = {p.name: population_allowed(plan, p, base, problems) for p in used}
    for a in plan.analyses:
        population = plan.population(a.population)
        if population is None or not any(p.details.get("population") == population.name
                                         for p in problems):
            problems += analysis_problems(plan, a, own[population.name] if population else base,
                                          population)
    if problems:
        raise Stop(problems, Exit.PLAN_INVALID)

    protected = {a.exposure for a in plan.analyses}
    protected.update(c.variable for p in used for c in p.conditions)
    if plan.data.row_id:
        protected.add(plan.data.row_id)

    joint, clashes = base, []
    if used:
        joint = population_allowed(plan, _all_rules(used), base, clashes)
        for a in plan.analyses:
            clashes += analysis_problems(plan, a, joint, None)
    if not clashes:
        kept = (joint,)
        rules = [(c, _all_rules(used).conditions) for c in _distinct(_all_rules(used).conditions)]
    else:  # the populations exclude one another: each keeps an even share of the rows
        kept = tuple(own[p.name] for p in used)
        rules = [(c, p.conditions) for p in used for c in _distinct(p.conditions)]
    excluded = _excluded_blocks(plan, rules, base, rows)
    blocks = np.empty(rows, dtype=np.int64)
    at = stream(seed, EXCLUDED).permutation(rows)
    start = 0
    for b, (_, _, k) in enumerate(excluded):
        blocks[at[start:start + k]] = len(kept) + b
        start += k
    blocks[np.sort(at[start:])] = stream(seed, BLOCKS).permutation(
        np.resize(np.arange(len(kept)), rows - start))
    return Layout(kept + tuple(a for _, a, _ in excluded), blocks, frozenset(protected),
                  (None,) * len(kept) + tuple(c for c, _, _ in excluded))


def _distinct(conditions: tuple[Condition, ...]) -> list[Condition]:
    return list(dict.fromkeys(conditions))


def _excluded_blocks(plan: Plan, rules, base, rows: int) -> list:
    """(condition, allowed sets, rows) for each condition whose failing rows can be made."""
    out, seen, left = [], set(), math.floor(rows * EXCLUDED_LIMIT)
    for condition, conditions in rules:
        if condition in seen:
            continue
        seen.add(condition)
        allowed = failing(plan, condition, tuple(c for c in conditions if c != condition), base)
        wanted = 1 if plan.variable(condition.variable).kind == "identifier" else max(
            1, math.floor(rows * EXCLUDED_SHARE))
        k = min(wanted, left)
        if allowed is None or not k:
            continue
        out.append((condition, allowed, k))
        left -= k
    return out


def _all_rules(populations: list[Population]) -> Population:
    return Population("(all)", tuple(c for p in populations for c in p.conditions))


# --- drawing values -------------------------------------------------------------------------

def draw(variable: Variable, allowed: Allowed, size: int, rng: np.random.Generator) -> np.ndarray:
    """``size`` values of ``variable`` inside ``allowed``, complete (missingness comes later)."""
    if variable.kind in ("categorical", "identifier"):
        if allowed.missing:
            return np.full(size, None, dtype=object)
        return even_shares(np.asarray(candidates(variable, allowed), dtype=object), size, rng)
    if allowed.missing:
        return np.full(size, np.nan)
    listed = candidates(variable, allowed)
    if listed is not None and (variable.kind != "count" or allowed.values is not None):
        return even_shares(np.asarray(listed, dtype=np.float64), size, rng)
    if variable.kind == "count":
        return _counts(allowed, size, rng, listed)
    return _continuous(allowed, size, rng)


def even_shares(values: np.ndarray, size: int, rng: np.random.Generator) -> np.ndarray:
    return rng.permutation(np.resize(values, size))


def _continuous(allowed: Allowed, size: int, rng: np.random.Generator) -> np.ndarray:
    low, high = allowed.low, allowed.high
    if low is not None and high is not None:
        if low == high:
            return np.full(size, float(low))
        middle, sd = (low + high) / 2, (high - low) / 6

        def law(k):
            return rng.normal(middle, sd, k)
    elif low is not None:
        def law(k):
            return low + rng.gamma(2.0, max(1.0, abs(low)) / 2, k)
    elif high is not None:
        def law(k):
            return high - rng.gamma(2.0, max(1.0, abs(high)) / 2, k)
    else:
        def law(k):
            return rng.standard_normal(k)
    values = law(size)
    for _ in range(_REDRAWS):
        bad = np.flatnonzero(~allowed.inside(values))
        if not len(bad):
            return values
        values[bad] = law(len(bad))
    # Only a sliver of an open interval is left: fall back to its midpoint.
    values[~allowed.inside(values)] = (low + high) / 2 if low is not None and high is not None \
        else (low if low is not None else high)
    return values


def _counts(allowed: Allowed, size: int, rng: np.random.Generator,
            listed: list | None) -> np.ndarray:
    low, high = integer_bounds(allowed)
    mean = 3.0 if high is None else max((high - low) / 2, 0.5)
    values = low + rng.poisson(mean, size).astype(np.float64)
    for _ in range(_REDRAWS):
        bad = np.flatnonzero(~allowed.inside(values))
        if not len(bad):
            return values
        values[bad] = low + rng.poisson(mean, len(bad))
    bad = ~allowed.inside(values)
    if listed:
        values[bad] = rng.choice(np.asarray(listed, dtype=np.float64), int(bad.sum()))
    else:
        k = low
        while float(k) in allowed.excluded:
            k += 1
        values[bad] = float(k)
    return values


def identifiers(size: int, allowed: Allowed) -> np.ndarray:
    """Unique codes R00001 …, skipping any code a population rule excludes."""
    spare = len(allowed.excluded)
    width = max(5, len(str(size + spare)))
    numbers = np.arange(1, size + spare + 1).astype(str)
    codes = np.char.add("R", np.char.zfill(numbers, width)).astype(object)
    if spare:
        codes = codes[~np.isin(codes, np.asarray(list(allowed.excluded), dtype=object))]
    return codes[:size]


def conform(variable: Variable, allowed: Allowed, values: np.ndarray,
            rng: np.random.Generator) -> np.ndarray:
    """Bring generated outcome values inside the allowed set (clipped into the interval, or a
    disallowed value replaced by an allowed one): needed only rarely, at the extremes; all
    missing in rows that a rule wants missing."""
    if allowed.missing:
        return np.full(len(values), None if values.dtype == object else np.nan,
                       dtype=values.dtype)
    if variable.kind in ("categorical", "identifier"):
        listed = candidates(variable, allowed)
        bad = ~np.isin(values, np.asarray(listed, dtype=object))
        values = values.copy()
        values[bad] = rng.choice(np.asarray(listed, dtype=object), int(bad.sum()))
        return values
    listed = candidates(variable, allowed)
    if listed is not None and (allowed.values is not None or variable.kind == "binary"):
        bad = ~np.isin(values, listed)
        values = values.copy()
        values[bad] = rng.choice(np.asarray(listed, dtype=np.float64), int(bad.sum()))
        return values
    low, high = allowed.low, allowed.high
    if variable.kind == "count":
        low, high = integer_bounds(allowed)
    else:  # an open bound is not a value: clip to the nearest double inside it
        low = np.nextafter(low, np.inf) if low is not None and allowed.low_open else low
        high = np.nextafter(high, -np.inf) if high is not None and allowed.high_open else high
    return np.clip(values, -np.inf if low is None else low, np.inf if high is None else high)


def columns(plan: Plan, plan_layout: Layout, seed: int) -> dict[str, np.ndarray]:
    """Every declared variable, complete except where a rule requires it missing."""
    rows = len(plan_layout.block)
    out: dict[str, np.ndarray] = {}
    for v in plan.variables:
        rng = stream(seed, VALUES, v.name)
        dtype = object if v.kind in ("categorical", "identifier") else np.float64
        values = np.empty(rows, dtype=dtype)
        for b, allowed in enumerate(plan_layout.allowed):
            at = np.flatnonzero(plan_layout.block == b)
            if v.kind == "identifier" and not allowed[v.name].missing:
                continue
            values[at] = draw(v, allowed[v.name], len(at), rng)
        if v.kind == "identifier":
            kept = np.array([not a[v.name].missing for a in plan_layout.allowed], dtype=bool)
            present = kept[plan_layout.block]
            excluded = frozenset().union(*(a[v.name].excluded for a in plan_layout.allowed))
            values[present] = identifiers(int(present.sum()), Allowed(excluded=excluded))
            for b, allowed in enumerate(plan_layout.allowed):  # rows failing a code rule
                if allowed[v.name].values is not None and not allowed[v.name].missing:
                    at = np.flatnonzero(plan_layout.block == b)
                    values[at] = np.resize(np.asarray(allowed[v.name].values, dtype=object),
                                           len(at))
        out[v.name] = values
    return out


def punch_missing(plan: Plan, plan_layout: Layout, table: dict[str, np.ndarray],
                  seed: int) -> None:
    """Make half of each variable's max_missing share missing (exactly ⌊rows · share / 2⌋ rows,
    so that chance never takes a small sample past the contract). The row identifier, the
    exposures and the variables a population rule names keep every value."""
    rows = len(plan_layout.block)
    for v in plan.variables:
        if not v.max_missing or v.name in plan_layout.protected:
            continue
        k = math.floor(rows * v.max_missing / 2)
        if not k:
            continue
        at = stream(seed, MISSING, v.name).choice(rows, size=k, replace=False)
        table[v.name][at] = None if table[v.name].dtype == object else np.nan
