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
"""

from __future__ import annotations

import math
import zlib
from dataclasses import dataclass, replace

import numpy as np

from .plan import Analysis, Condition, Plan, Population, Variable
from .problems import Exit, Problem, Stop

# Sub-stream purposes: each (purpose, variable) pair has its own stream, so the values of one
# variable do not shift when the dictionary gains another.
VALUES, MISSING, OUTCOME, COEFFICIENTS, BLOCKS = range(5)

_REDRAWS = 200  # rounds of redrawing for a truncated law before falling back


def stream(seed: int, purpose: int, name: str = "") -> np.random.Generator:
    """The random stream for one purpose and one variable (or analysis), fixed by the seed."""
    key = (purpose, zlib.crc32(name.encode("utf-8")))
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=key))


@dataclass(frozen=True)
class Allowed:
    """What the generated values of one variable may be, after the rules that apply."""

    low: float | None = None
    low_open: bool = False
    high: float | None = None
    high_open: bool = False
    values: tuple | None = None  # a closed list: levels, or the values of equals / in
    excluded: frozenset = frozenset()
    missing: bool | None = None  # True: always missing; False: never; None: as the dictionary says
    conflict: bool = False  # is_missing true and false together

    def tighten_low(self, bound: float, open_: bool) -> "Allowed":
        if self.low is None or bound > self.low:
            return replace(self, low=bound, low_open=open_)
        if bound == self.low:
            return replace(self, low_open=self.low_open or open_)
        return self

    def tighten_high(self, bound: float, open_: bool) -> "Allowed":
        if self.high is None or bound < self.high:
            return replace(self, high=bound, high_open=open_)
        if bound == self.high:
            return replace(self, high_open=self.high_open or open_)
        return self

    def inside(self, x: np.ndarray) -> np.ndarray:
        ok = np.ones(len(x), dtype=bool)
        if self.low is not None:
            ok &= x > self.low if self.low_open else x >= self.low
        if self.high is not None:
            ok &= x < self.high if self.high_open else x <= self.high
        if self.excluded:
            ok &= ~np.isin(x, list(self.excluded))
        return ok


@dataclass(frozen=True)
class Layout:
    """How the rows are dealt: ``block[i]`` indexes ``allowed``, one rule set per block."""

    allowed: tuple[dict[str, Allowed], ...]
    block: np.ndarray  # int per row
    protected: frozenset  # variables never given random missing values


# --- the allowed sets -----------------------------------------------------------------------

def base_allowed(plan: Plan) -> dict[str, Allowed]:
    """Each variable's allowed set from the dictionary, plus what the design needs."""
    positive = set()
    for a in plan.analyses:
        for term in a.tiers[-1].terms:
            if term.form == "log":
                positive.add(term.variables[0])
        if a.family == "poisson" and a.offset:
            positive.add(a.offset)
    out = {}
    for v in plan.variables:
        allowed = Allowed(low=v.min, high=v.max)
        if v.kind == "count":
            allowed = allowed.tighten_low(0.0, False)
        elif v.kind == "binary":
            allowed = replace(allowed, values=(0.0, 1.0))
        elif v.kind == "categorical":
            allowed = Allowed(values=tuple(v.levels))
        if v.name in positive and v.kind in ("continuous", "count"):
            allowed = allowed.tighten_low(0.0, True)
        out[v.name] = allowed
    return out


def apply(variable: Variable, allowed: Allowed, condition: Condition) -> Allowed:
    op, value = condition.op, condition.value
    if op == "is_missing":
        if allowed.missing is not None and allowed.missing != bool(value):
            return replace(allowed, conflict=True)
        return replace(allowed, missing=bool(value))
    if op in ("at_least", "above"):
        return allowed.tighten_low(float(value), op == "above")
    if op in ("at_most", "below"):
        return allowed.tighten_high(float(value), op == "below")
    listed = tuple(value) if op in ("in", "not_in") else (value,)  # type: ignore[arg-type]
    listed = tuple(_typed(variable, x) for x in listed)
    if op in ("not_equals", "not_in"):
        return replace(allowed, excluded=allowed.excluded | frozenset(listed))
    if allowed.values is None:
        return replace(allowed, values=listed)
    return replace(allowed, values=tuple(x for x in allowed.values if x in listed))


def _typed(variable: Variable, x: object) -> object:
    if variable.kind in ("categorical", "identifier"):
        if isinstance(x, float) and x.is_integer():
            return str(int(x))
        return str(x)
    return float(x)  # type: ignore[arg-type]


def candidates(variable: Variable, allowed: Allowed) -> list | None:
    """The allowed values when they are few and known (a closed list or a short integer range);
    None when the law is continuous or the integer range is long."""
    if allowed.values is not None:
        values = list(allowed.values)
        if variable.kind in ("categorical", "identifier"):
            return [x for x in values if x not in allowed.excluded]
        values = np.asarray(values, dtype=np.float64)
        if variable.kind in ("count", "binary"):
            values = values[values == np.round(values)]
        return [float(x) for x in values[allowed.inside(values)]]
    if variable.kind == "count":
        low, high = integer_bounds(allowed)
        if high is not None and high - low <= 10_000:
            return [float(k) for k in range(low, high + 1) if float(k) not in allowed.excluded]
    return None


def integer_bounds(allowed: Allowed) -> tuple[int, int | None]:
    low = 0 if allowed.low is None else (
        math.floor(allowed.low) + 1 if allowed.low_open else math.ceil(allowed.low))
    high = None if allowed.high is None else (
        math.ceil(allowed.high) - 1 if allowed.high_open else math.floor(allowed.high))
    return low, high


def distinct_values(variable: Variable, allowed: Allowed) -> int:
    """How many different values the allowed set holds (2 stands for 'two or more')."""
    if allowed.conflict:
        return 0
    if allowed.missing:
        return 1 if variable.kind == "identifier" else 0
    if variable.kind == "identifier" and allowed.values is None:
        return 2
    listed = candidates(variable, allowed)
    if listed is not None:
        return min(len(listed), 2)
    if variable.kind == "count":
        low, high = integer_bounds(allowed)
        return 2 if high is None or high > low else (1 if high == low else 0)
    low, high = allowed.low, allowed.high
    if low is None or high is None or low < high:
        return 2
    return 1 if low == high and not (allowed.low_open or allowed.high_open) else 0


def _empty_reason(variable: Variable, allowed: Allowed, condition: Condition) -> str:
    if allowed.conflict:
        return f"{variable.name} cannot be both missing and present"
    if condition.op in ("equals", "in") and variable.kind == "categorical":
        wanted = condition.value if condition.op == "in" else (condition.value,)
        unknown = [str(x) for x in wanted if _typed(variable, x) not in variable.levels]  # type: ignore[union-attr]
        if unknown:
            return (f"{', '.join(repr(x) for x in unknown)} is not a level of {variable.name} "
                    f"({', '.join(variable.levels)})")
    if variable.kind == "identifier":
        return (f"it restricts the identifier {variable.name} to listed codes, and a rehearsal "
                "makes every identifier unique")
    declared = _declared_range(variable)
    return f"no value of {variable.name} is left{declared}"


def _declared_range(variable: Variable) -> str:
    if variable.min is None and variable.max is None:
        return ""
    low = "−∞" if variable.min is None else f"{variable.min:g}"
    high = "∞" if variable.max is None else f"{variable.max:g}"
    return f" (declared range [{low}, {high}])"


def population_allowed(plan: Plan, population: Population, base: dict[str, Allowed],
                       problems: list[Problem]) -> dict[str, Allowed]:
    """Fold the population's conditions into the allowed sets; report the one that empties a set."""
    out = dict(base)
    said: dict[str, list[Condition]] = {}
    for condition in population.conditions:
        variable = plan.variable(condition.variable)
        before = said.setdefault(variable.name, [])
        out[variable.name] = apply(variable, out[variable.name], condition)
        usable = distinct_values(variable, out[variable.name]) > 0 or (
            out[variable.name].missing and not out[variable.name].conflict)
        if variable.kind == "identifier" and out[variable.name].values is not None:
            usable = False
        if not usable and not any(p.details.get("variable") == variable.name
                                  and p.details.get("population") == population.name
                                  for p in problems):
            together = (" together with " + ", ".join(c.describe() for c in before)) if before else ""
            problems.append(Problem(
                f"population {population.name}: no row can meet {condition.describe()}{together}: "
                f"{_empty_reason(variable, out[variable.name], condition)}",
                place=condition.place, code="population-empty",
                hint="a population that holds no row leaves its analyses nothing to fit; "
                     "fix the rule before freezing",
                details={"population": population.name, "variable": variable.name}))
        before.append(condition)
    return out


def analysis_problems(plan: Plan, analysis: Analysis, allowed: dict[str, Allowed],
                      population: Population | None) -> list[Problem]:
    """Rules that leave an analysis without a usable sample: the exposure fixed to one value,
    or a variable it uses required to be missing."""
    where = f"population {population.name}" if population else "the data dictionary"
    problems = []

    def culprit(name: str):
        conditions = [c for c in (population.conditions if population else ()) if c.variable == name]
        place = conditions[-1].place if conditions else analysis.place
        return place, ", ".join(c.describe() for c in conditions)

    exposure = plan.variable(analysis.exposure)
    if distinct_values(exposure, allowed[exposure.name]) < 2:
        place, said = culprit(exposure.name)
        problems.append(Problem(
            f"analysis {analysis.id}: {where} leaves the exposure {exposure.name} fewer than two "
            f"values" + (f" ({said})" if said else "") + ", so its effect cannot be estimated",
            place=place, code="exposure-fixed",
            hint="the exposure must vary inside the analysis' population"))
    for name in analysis.variables_used:
        if allowed[name].missing and name != exposure.name:
            place, said = culprit(name)
            problems.append(Problem(
                f"analysis {analysis.id}: {where} requires {name} to be missing ({said}), "
                f"but the analysis uses {name}: its sample would be empty",
                place=place, code="sample-empty"))
    if plan.data.row_id and allowed[plan.data.row_id].missing:
        place, said = culprit(plan.data.row_id)
        problems.append(Problem(
            f"{where} requires the row identifier {plan.data.row_id} to be missing ({said})",
            place=place, code="sample-empty"))
    return problems


def layout(plan: Plan, rows: int, seed: int) -> Layout:
    """Decide which rules each row meets; raise Stop (exit 2) when a population holds no row."""
    base = base_allowed(plan)
    used = [plan.population(name) for name in dict.fromkeys(a.population for a in plan.analyses)
            if name is not None]
    problems = [Problem(f"variable {v.name}: no value fits its declaration{_declared_range(v)}"
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
        return Layout((joint,), np.zeros(rows, dtype=np.int64), frozenset(protected))
    # The populations exclude one another: deal the rows out so each keeps its share.
    blocks = np.resize(np.arange(len(used)), rows)
    blocks = stream(seed, BLOCKS).permutation(blocks)
    return Layout(tuple(own[p.name] for p in used), blocks, frozenset(protected))


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
    width = max(5, len(str(size + len(allowed.excluded))))
    out, k = [], 0
    while len(out) < size:
        k += 1
        code = f"R{k:0{width}d}"
        if code not in allowed.excluded:
            out.append(code)
    return np.asarray(out, dtype=object)


def conform(variable: Variable, allowed: Allowed, values: np.ndarray,
            rng: np.random.Generator) -> np.ndarray:
    """Bring generated outcome values inside the allowed set (clipped into the interval, or a
    disallowed value replaced by an allowed one): needed only rarely, at the extremes."""
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
            present = np.array([not plan_layout.allowed[b][v.name].missing
                                for b in plan_layout.block], dtype=bool)
            excluded = frozenset().union(*(a[v.name].excluded for a in plan_layout.allowed))
            values[present] = identifiers(int(present.sum()), Allowed(excluded=excluded))
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
