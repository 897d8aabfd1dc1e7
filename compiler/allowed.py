"""What each variable's generated values may be: the dictionary narrowed by population rules.

A rehearsal draws values only inside these sets, so every synthetic row meets the plan's
ranges, levels and the rules of its population. A rule that empties a set (contradictory
conditions, a level that is not declared, a bound outside the declared range) is a plan
problem: it is reported at the condition that emptied the set.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from .plan import Analysis, Condition, Plan, Population, Variable
from .problems import Problem


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
    return f"no value of {variable.name} is left{variable.declared_range()}"


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


_NEGATION = {"at_least": "below", "below": "at_least", "above": "at_most", "at_most": "above",
             "equals": "not_equals", "not_equals": "equals", "in": "not_in", "not_in": "in"}


def negated(condition: Condition) -> Condition:
    """The condition a row meets exactly when it fails ``condition`` (on a present value)."""
    if condition.op == "is_missing":
        return replace(condition, value=not condition.value)
    return replace(condition, op=_NEGATION[condition.op])


def failing(plan: Plan, condition: Condition, others: tuple[Condition, ...],
            base: dict[str, Allowed]) -> dict[str, Allowed] | None:
    """The allowed sets of rows that fail ``condition`` but meet ``others``, so that a
    population's sample flow shows the condition excluding them; None when no value the
    dictionary allows fails it (the condition then excludes nothing)."""
    out = population_allowed(plan, Population("(excluded)", others), base, [])
    variable = plan.variable(condition.variable)
    narrowed = apply(variable, out[variable.name], negated(condition))
    if narrowed.conflict or not (narrowed.missing or distinct_values(variable, narrowed)):
        return None
    return {**out, variable.name: narrowed}
