"""Build resolved Plans in a few lines, straight from the dataclasses of compiler/plan.py.

    plan = make_plan(
        {"pid": "identifier", "arm": {"kind": "categorical", "levels": ["a", "b"]},
         "y": {"kind": "continuous", "min": 0}},
        analyses=[make_analysis("main", "y", "arm", add=["age", ("log", "dose")])],
        populations=[make_population("adults", ("age", "at_least", 18))],
        row_id="pid")

Variables are given as the plan's YAML would give them (a kind, or a mapping of fields).
An analysis gets a `crude` tier holding the exposure and, when ``add`` is given, an `adjusted`
tier adding those terms: a name, ("log", VAR), ("power", VAR, K) or ("product", A, B).
"""

from __future__ import annotations

from compiler.plan import (Analysis, Condition, DataSource, Plan, Population, Study, Term, Tier,
                           Variable)


def make_variable(name: str, spec) -> Variable:
    spec = {"kind": spec} if isinstance(spec, str) else dict(spec)
    if "levels" in spec:
        spec["levels"] = tuple(spec["levels"])
        spec.setdefault("reference", spec["levels"][0])
    return Variable(name=name, **spec)


def make_term(spec) -> Term:
    if isinstance(spec, str):
        return Term("variable", (spec,))
    form, *rest = spec
    if form == "power":
        return Term("power", (rest[0],), degree=rest[1])
    return Term(form, tuple(rest))


def make_analysis(analysis_id: str, outcome: str, exposure: str, *, add=(), family="gaussian",
                  population: str | None = None, offset: str | None = None) -> Analysis:
    exposure_term = Term("variable", (exposure,))
    tiers = [Tier("crude", (), (exposure_term,))]
    if add:
        added = tuple(make_term(t) for t in add)
        tiers.append(Tier("adjusted", added, (exposure_term, *added)))
    return Analysis(analysis_id, outcome, family, exposure, tuple(tiers), tiers[-1].name,
                    population=population, offset=offset)


def make_population(name: str, *conditions: tuple) -> Population:
    return Population(name, tuple(Condition(v, op, value) for v, op, value in conditions))


def make_plan(variables: dict, *, analyses=(), populations=(), row_id: str | None = None,
              missing=("", "NA"), data_format: str | None = None) -> Plan:
    return Plan(
        language=1, study=Study("test-study", "A test plan", "1"),
        data=DataSource(None, data_format, row_id=row_id, missing=tuple(missing)),
        variables=tuple(make_variable(n, s) for n, s in variables.items()),
        populations=tuple(populations), analyses=tuple(analyses))
