"""The exposure effects a synthetic rehearsal plants, read from `--effect` against the plan.

Each effect names its analysis, and optionally one level of a categorical exposure, and
gives the value on the analysis' natural scale (rules_text.NATURAL):

    --effect primary=-5            every non-reference level of primary's exposure: −5 units
    --effect primary:coached=-6    the level coached only (overrides the line above for it)
    --effect settled=1.5           an odds ratio (binomial); a rate ratio for poisson
    --effect 0.4                   only in a plan with one analysis: that analysis

A numeric exposure takes the value per unit (a slope, or a ratio per unit). A ratio must be
above 0; 1 (or a difference of 0) is no effect, which is what every analysis and level not
named gets. A bare value in a plan with several analyses is refused: analyses differ in
scale and units, so one number cannot mean the same to each.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Iterable

from .plan import Analysis, Plan
from .problems import Exit, Problem, Stop
from .suggest import did_you_mean

NATURAL = {"gaussian": "difference", "binomial": "odds ratio", "poisson": "rate ratio"}


@dataclass(frozen=True)
class PlantedEffect:
    analysis: str
    level: str | None  # None: every non-reference level, or the per-unit effect
    value: float  # on the natural scale
    scale: str  # difference | odds ratio | rate ratio

    @property
    def coefficient(self) -> float:
        """The value on the model's scale: a difference as it is, a ratio as its logarithm."""
        return self.value if self.scale == "difference" else math.log(self.value)

    def describe(self) -> str:
        where = self.analysis + (f":{self.level}" if self.level is not None else "")
        return f"{where} {self.scale} {self.value!r}"

    def as_json(self) -> dict:
        return {"analysis": self.analysis, "level": self.level, "scale": self.scale,
                "value": self.value}


def from_json(items: Iterable[dict]) -> tuple[PlantedEffect, ...]:
    return tuple(PlantedEffect(i["analysis"], i["level"], float(i["value"]), i["scale"])
                 for i in items)


def read_effects(plan: Plan, specs: Iterable[str]) -> tuple[PlantedEffect, ...]:
    """Every `--effect` spec checked against the plan; raise Stop (exit 2) listing each bad one."""
    problems: list[Problem] = []
    found: dict[tuple[str, str | None], PlantedEffect] = {}
    makers = _outcome_makers(plan)
    for spec in specs:
        effect = _read(plan, spec, makers, problems)
        if effect is None:
            continue
        key = (effect.analysis, effect.level)
        if key in found:
            problems.append(_problem(spec, f"{_where(*key)} is given a second time "
                                           f"(first as {found[key].value!r})", "effect-twice"))
        found[key] = effect
    if problems:
        raise Stop(problems, Exit.PLAN_INVALID)
    return tuple(found.values())


def coefficients(effects: Iterable[PlantedEffect], analysis_id: str) -> dict[str | None, float]:
    """The model-scale effects of one analysis: key None for every level, else per level."""
    return {e.level: e.coefficient for e in effects if e.analysis == analysis_id}


def _read(plan: Plan, spec: str, makers: dict[str, str],
          problems: list[Problem]) -> PlantedEffect | None:
    target, sep, number = spec.rpartition("=")
    if not sep:
        if len(plan.analyses) != 1:
            scales = ", ".join(f"{a.id}: {NATURAL[a.family]}" for a in plan.analyses)
            first = plan.analyses[0].id
            problems.append(_problem(
                spec, f"a bare value is ambiguous in a plan with {len(plan.analyses)} analyses "
                      f"({scales})", "effect-ambiguous",
                hint=f"name the analysis, on its natural scale: --effect {first}={spec}, and "
                     f"--effect {first}:LEVEL=VALUE for one level of its exposure"))
            return None
        target = plan.analyses[0].id
    analysis_id, colon, level = target.partition(":")
    analysis = next((a for a in plan.analyses if a.id == analysis_id), None)
    if analysis is None:
        known = [a.id for a in plan.analyses]
        problems.append(_problem(spec, f"no analysis is called {analysis_id!r}", "effect-unknown",
                                 hint=did_you_mean(analysis_id, known)
                                 or "the analyses are " + ", ".join(known)))
        return None
    value = _number(number)
    scale = NATURAL[analysis.family]
    if value is None:
        problems.append(_problem(spec, f"{number!r} is not a finite number", "bad-effect"))
        return None
    if scale != "difference" and value <= 0:
        problems.append(_problem(
            spec, f"analysis {analysis.id} is {analysis.family}: its effect is {_a(scale)}, "
                  f"which must be above 0", "bad-effect",
            hint=f"1 means no effect; {0.5!r} halves the "
                 + ("odds" if scale == "odds ratio" else "rate")))
        return None
    if analysis.id in makers:
        problems.append(_problem(
            spec, f"analysis {analysis.id} shares its outcome {analysis.outcome} with analysis "
                  f"{makers[analysis.id]}, which makes the synthetic outcome", "effect-shared",
            hint=f"plant the effect on {makers[analysis.id]}"))
        return None
    if colon and not _level_ok(plan, analysis, level, spec, problems):
        return None
    return PlantedEffect(analysis.id, level if colon else None, value, scale)


def _level_ok(plan: Plan, analysis: Analysis, level: str, spec: str,
              problems: list[Problem]) -> bool:
    exposure = plan.variable(analysis.exposure)
    if exposure.kind != "categorical":
        problems.append(_problem(
            spec, f"the exposure {exposure.name} of {analysis.id} is {exposure.kind}, so it has "
                  "no levels: its effect is per unit", "effect-level",
            hint=f"--effect {analysis.id}=VALUE"))
        return False
    reference = exposure.reference if exposure.reference is not None else exposure.levels[0]
    others = [x for x in exposure.levels if x != reference]
    if level in others:
        return True
    why = (f"{level!r} is the reference level of {exposure.name}, which the other levels are "
           "compared with: it has no effect of its own" if level == reference else
           f"{level!r} is not a level of {exposure.name}")
    problems.append(_problem(spec, why, "effect-level",
                             hint=did_you_mean(level, others)
                             or f"its other levels are {', '.join(others)}"))
    return False


def _outcome_makers(plan: Plan) -> dict[str, str]:
    """Analyses whose outcome an earlier analysis makes (rehearse makes each outcome once)."""
    first: dict[str, str] = {}
    out = {}
    for a in plan.analyses:
        if a.outcome in first:
            out[a.id] = first[a.outcome]
        first.setdefault(a.outcome, a.id)
    return out


def _number(text: str) -> float | None:
    try:
        value = float(text)
    except ValueError:
        return None
    return value if math.isfinite(value) else None


def _where(analysis: str, level: str | None) -> str:
    return f"analysis {analysis}" + (f", level {level}," if level is not None else "")


def _a(word: str) -> str:
    return f"an {word}" if word[:1] in "aeiou" else f"a {word}"


def _problem(spec: str, message: str, code: str, hint: str | None = None) -> Problem:
    return Problem(f"--effect {spec}: {message}", code=code, hint=hint)
