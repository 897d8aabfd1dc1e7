"""The third pass: a schema-valid source tree → a :class:`~compiler.plan.Plan`, meaning checked.

The schema fixed the shape; this pass checks what the shape cannot: every variable used is
declared and its kind fits its use, names and ids are unique, every reference (tier,
population, analysis, decision) resolves. Decision rules, assumption checks and multiplicity
families are checked in :mod:`compiler.resolve_rules`. Every problem is collected with the
place of the value at fault and raised together as one Stop (exit 2). Nothing written in the
plan is evaluated: a term is a declared variable name or a structured mapping, nothing else.
"""

from __future__ import annotations

import math

from . import rehearsal_size
from .columns import INTERCEPT
from .load import Mapping, Node, Scalar, Sequence, Tree
from .plan import (
    PLAN_LANGUAGE_VERSION, Analysis, Condition, Covariance, DataSource, MinimumInformation,
    Plan, Population, Study, Term, Tier, Variable,
)
from .problems import Exit, Place, Problem, Stop, stop_if_errors
from .suggest import did_you_mean
from .wellformed import NOTHING_BROKEN, Broken

_FAMILY_OUTCOMES = {"gaussian": ("continuous", "count"), "binomial": ("binary",),
                    "poisson": ("count",)}
_ORDERED = ("at_least", "at_most", "above", "below")
_SHAPED = ("power", "log", "spline")  # term forms that need a numeric scale
_CODE_LIKE = set("()+-/*^=<>!,;:'\"[]{} \t")


class Context:
    """What resolution has learnt so far, and every problem found on the way."""

    def __init__(self, tree: Tree, broken: Broken = NOTHING_BROKEN):
        self.source = tree.source
        self.problems: list[Problem] = []
        self.variables: dict[str, Variable] = {}
        self.unresolved: set[str] = set()  # decision ids whose analysis is unknown
        self.broken = broken  # parts the schema found fault with, left out (wellformed.py)

    def error(self, message: str, place: Place, hint: str | None = None, code: str = "") -> None:
        self.problems.append(Problem(message, place, hint=hint, code=code))

    def variable(self, node: Node, use: str) -> Variable | None:
        """The declared variable ``node`` names, or None after reporting it unknown."""
        name = node.value if isinstance(node, Scalar) else None
        if isinstance(name, str) and name in self.variables:
            return self.variables[name]
        if self.broken.hides("variables", name):
            return None  # declared, but its entry was reported by the schema check
        hint = did_you_mean(name, self.variables)
        if hint is None and isinstance(name, str) and _CODE_LIKE & set(name):
            hint = ("a condition names one declared variable and compares it in its own key, "
                    "such as {variable: age, at_least: 18}; nothing is evaluated"
                    if use.startswith("condition of population") else
                    "a term is a declared variable name or a mapping such as {log: VAR}, "
                    "{power: VAR, degree: 2} or {product: [A, B]}; nothing is evaluated")
        self.error(f"unknown variable `{_text(node)}` ({use})", node.place, hint=hint,
                   code="unknown-variable")
        return None


def value(mapping: Mapping, key: str, default=None):
    node = mapping.get(key)
    return default if node is None else node.to_python()


def place_of(mapping: Mapping, key: str) -> Place:
    """The place of ``key``'s value, or of the mapping itself when the key is absent."""
    node = mapping.get(key)
    return mapping.place if node is None else node.place


def level_text(node: Node) -> str:
    """A level as the data write it: ``1`` stays ``"1"``, ``01`` stays ``"01"``."""
    return node.value if isinstance(node, Scalar) and isinstance(node.value, str) else _text(node)


def _text(node: Node) -> str:
    return node.text if isinstance(node, Scalar) else str(node.to_python())


def first_at(first: Place, again: Place) -> str:
    """Where the first of two clashing values stands, in words, for "(first at ...)"."""
    if first.line == again.line:
        return f"column {first.col}"
    return f"line {first.line}"


def article(word: str) -> str:
    return f"an {word}" if word[:1] in "aeiou" else f"a {word}"


# ---------------------------------------------------------------------------------------------


def resolve(tree: Tree, broken: Broken = NOTHING_BROKEN) -> Plan:
    """Build the Plan; raise one Stop (exit 2) with every semantic problem found.
    ``broken``: the parts of a plan that failed the schema, already left out of ``tree``
    (compiler.wellformed), whose absence is not to be reported again."""
    from .resolve_rules import resolve_rules

    ctx = Context(tree, broken)
    root = tree.root
    empty = Mapping({}, {}, root.place)
    study_node = root.get("study") or empty
    study = Study(value(study_node, "id"), value(study_node, "title"), value(study_node, "version"))
    variables = root.get("variables") or empty
    for name, node in variables.entries.items():
        if name == INTERCEPT:
            ctx.error(f"`{INTERCEPT}` is the label of the model's intercept column, so no "
                      "variable may be named so", variables.key_places[name],
                      code="reserved-name")
        ctx.variables[name] = _variable(ctx, name, node)
    data = _data(ctx, root.get("data") or empty)
    populations = tuple(_population(ctx, name, node)
                        for name, node in (root.get("populations") or empty).entries.items())
    analyses = _analyses(ctx, root.get("analyses") or Sequence((), root.place), populations)
    decisions, assumptions, multiplicity = resolve_rules(ctx, root, analyses)
    stop_if_errors(ctx.problems, Exit.PLAN_INVALID)
    return Plan(PLAN_LANGUAGE_VERSION, study, data, tuple(ctx.variables.values()), populations,
                analyses, decisions, assumptions, multiplicity, source=tree.source)


def problems_in(tree: Tree, broken: Broken) -> tuple[Problem, ...]:
    """The resolver's problems with the well-formed parts of a plan that failed the schema."""
    try:
        resolve(tree, broken)
    except Stop as stop:
        return stop.problems
    return ()


def _variable(ctx: Context, name: str, node: Mapping) -> Variable:
    kind = value(node, "kind")
    levels: list[str] = []
    levels_node = node.get("levels")
    if levels_node is not None:
        seen: dict[str, Place] = {}
        for item in levels_node.items:
            level = level_text(item)
            if level in seen:
                ctx.error(f"level `{level}` of `{name}` is listed twice (first at "
                          f"{first_at(seen[level], item.place)})", item.place,
                          code="duplicate-level")
            else:
                seen[level] = item.place
                levels.append(level)
        if kind != "categorical":
            ctx.error(f"`levels` applies only to categorical variables; `{name}` is {kind}",
                      node.key_places["levels"], code="misplaced-key")
    reference = None
    if kind == "categorical":
        if levels_node is None:
            ctx.error(f"categorical variable `{name}` needs `levels`: every level it may hold",
                      node.place, code="missing-levels")
        reference_node = node.get("reference")
        reference = level_text(reference_node) if reference_node is not None else (
            levels[0] if levels else None)
        if reference_node is not None and levels and reference not in levels:
            ctx.error(f"reference `{reference}` is not a level of `{name}` "
                      f"({', '.join(levels)})", reference_node.place,
                      hint=did_you_mean(reference, levels), code="unknown-level")
            reference = levels[0]  # so that later messages name a real level
    elif node.get("reference") is not None:
        ctx.error(f"`reference` applies only to categorical variables; `{name}` is {kind}",
                  node.key_places["reference"], code="misplaced-key")
    low, high = value(node, "min"), value(node, "max")
    for key in ("min", "max"):
        if node.get(key) is not None and kind not in ("continuous", "count"):
            ctx.error(f"`{key}` applies only to continuous and count variables; `{name}` is {kind}",
                      node.key_places[key], code="misplaced-key")
    if low is not None and high is not None and low > high:
        ctx.error(f"min {_text(node.get('min'))} of `{name}` is larger than its max "
                  f"{_text(node.get('max'))}", node.get("max").place, code="min-above-max")
    if kind == "count" and low is not None and low < 0:
        ctx.error(f"a count is never negative; min of `{name}` is {_text(node.get('min'))}",
                  node.get("min").place, code="out-of-range")
    return Variable(name, kind, unit=value(node, "unit"), label=value(node, "label"),
                    min=None if low is None else float(low),
                    max=None if high is None else float(high),
                    max_missing=value(node, "max_missing"), levels=tuple(levels),
                    reference=reference, place=node.place)


def _data(ctx: Context, node: Mapping) -> DataSource:
    row_id = node.get("row_id")
    if row_id is not None:
        variable = ctx.variable(row_id, "data.row_id")
        if variable is not None and variable.kind != "identifier":
            ctx.error(f"row_id `{variable.name}` is declared {variable.kind}; a row id must be "
                      "kind identifier", row_id.place, code="kind-mismatch")
    expected = value(node, "expected_rows")
    too_many = None if expected is None else rehearsal_size.too_many(expected, len(ctx.variables))
    if too_many:
        ctx.error(f"expected_rows: {too_many}", node.get("expected_rows").place,
                  hint="rehearse with a smaller --rows; expected_rows is only the rehearsal's "
                       "default size, so lower it or leave it out",
                  code="too-many-rows")
    return DataSource(value(node, "path"), value(node, "format"), value(node, "row_id"),
                      tuple(value(node, "missing", ["", "NA"])), expected)


def _population(ctx: Context, name: str, node: Mapping) -> Population:
    conditions = []
    for item in node.get("where").items:
        condition = _condition(ctx, name, item)
        if condition is not None:
            conditions.append(condition)
    _check_bounds(ctx, name, conditions)
    return Population(name, tuple(conditions), node.place)


def _check_bounds(ctx: Context, population: str, conditions: list[Condition]) -> None:
    """Report the first ordered condition that leaves a variable no value, given the ones
    before it and the declared range (age ≥ 18 and then age ≤ 10): such a population holds
    no row, which the run would only find out after unblinding."""
    bounds: dict[str, tuple] = {}  # variable -> (low, low included, high, high included)
    for at, condition in enumerate(conditions):
        if condition.op not in _ORDERED:
            continue
        variable = ctx.variables[condition.variable]
        if variable.min is not None and variable.max is not None and variable.min > variable.max:
            continue  # reported already, as the dictionary's fault
        low, low_in, high, high_in = bounds.get(condition.variable, (
            -math.inf if variable.min is None else variable.min, True,
            math.inf if variable.max is None else variable.max, True))
        value, strict = float(condition.value), condition.op in ("above", "below")
        if condition.op in ("at_least", "above") and (value > low or value == low and strict):
            low, low_in = value, not strict
        elif condition.op in ("at_most", "below") and (value < high or value == high and strict):
            high, high_in = value, not strict
        bounds[condition.variable] = (low, low_in, high, high_in)
        if low > high or (low == high and not (low_in and high_in)):
            earlier = [c.describe() for c in conditions[:at]
                       if c.variable == condition.variable and c.op in _ORDERED]
            together = f" together with {', '.join(earlier)}" if earlier else ""
            ctx.error(f"population `{population}`: no value of `{variable.name}` can meet "
                      f"{condition.describe()}{together}{variable.declared_range()}",
                      condition.place,
                      hint="a population that holds no row leaves its analyses nothing to fit",
                      code="population-empty")
            return


def _condition(ctx: Context, population: str, node: Mapping) -> Condition | None:
    op = next(key for key in node.entries if key != "variable")
    operand = node.get(op)
    variable = ctx.variable(node.get("variable"), f"condition of population `{population}`")
    if variable is None:
        return None
    kind, name = variable.kind, variable.name
    if op == "is_missing":
        return Condition(name, op, operand.value, node.place)
    if op in _ORDERED and kind in ("categorical", "identifier"):
        ctx.error(f"`{op}` compares numbers, but `{name}` is {kind}", operand.place,
                  hint="use equals, not_equals, in or not_in" if kind == "categorical" else None,
                  code="kind-mismatch")
        return None
    items = operand.items if isinstance(operand, Sequence) else (operand,)
    values = [v for v in (_operand(ctx, variable, op, item) for item in items) if v is not None]
    if len(values) != len(items):
        return None
    return Condition(name, op, tuple(values) if isinstance(operand, Sequence) else values[0],
                     node.place)


def _operand(ctx: Context, variable: Variable, op: str, node: Scalar):
    """One compared value, as the binder will compare it: a level, a code or a number."""
    name, kind = variable.name, variable.kind
    if kind == "categorical":
        level = level_text(node)
        if level in variable.levels:
            return level
        folded = [lv for lv in variable.levels if lv.casefold() == level.casefold()]
        hint = (f"levels match exactly, letter case included: did you mean `{folded[0]}`?" if folded
                else did_you_mean(level, variable.levels)
                or f"levels: {', '.join(variable.levels)}")
        ctx.error(f"`{level}` is not a level of `{name}`", node.place, hint=hint,
                  code="unknown-level")
        return None
    if kind == "identifier":
        return level_text(node)
    if isinstance(node.value, str):
        ctx.error(f"`{name}` is {kind}; `{op}` needs a number here, not `{node.text}`",
                  node.place, code="kind-mismatch")
        return None
    if kind == "binary" and node.value not in (0, 1):
        ctx.error(f"`{name}` is binary (0/1); compare it with 0 or 1, not {node.text}",
                  node.place, code="kind-mismatch")
        return None
    return float(node.value)


# ---------------------------------------------------------------------------------------------


def _analyses(ctx: Context, node: Sequence,
              populations: tuple[Population, ...]) -> tuple[Analysis, ...]:
    seen: dict[str, Place] = {}
    analyses = []
    for item in node.items:
        analysis_id = value(item, "id")
        if analysis_id in seen:
            ctx.error(f"analysis id `{analysis_id}` is used twice (first at "
                      f"{first_at(seen[analysis_id], item.get('id').place)})",
                      item.get("id").place, code="duplicate-id")
        seen.setdefault(analysis_id, item.get("id").place)
        analyses.append(_analysis(ctx, item, populations))
    return tuple(analyses)


def _analysis(ctx: Context, node: Mapping, populations: tuple[Population, ...]) -> Analysis:
    analysis_id, family = value(node, "id"), value(node, "family")
    where = f"analysis `{analysis_id}`"
    outcome = ctx.variable(node.get("outcome"), f"outcome of {where}")
    exposure = ctx.variable(node.get("exposure"), f"exposure of {where}")
    if outcome is not None and outcome.kind not in _FAMILY_OUTCOMES[family]:
        wanted = " or ".join(_FAMILY_OUTCOMES[family])
        ctx.error(f"outcome `{outcome.name}` is {outcome.kind}, but a {family} analysis needs "
                  f"a {wanted} outcome", node.get("outcome").place, code="kind-mismatch")
    if exposure is not None:
        if exposure.kind == "identifier":
            ctx.error(f"exposure `{exposure.name}` is an identifier; identifiers are never "
                      "modelled", node.get("exposure").place, code="kind-mismatch")
        elif outcome is not None and exposure.name == outcome.name:
            ctx.error(f"`{exposure.name}` is both the outcome and the exposure",
                      node.get("exposure").place, code="exposure-is-outcome")
    population = _analysis_population(ctx, node, where, populations)
    offset = _offset(ctx, node, where, family, outcome, exposure)
    covariance = covariance_of(ctx, node.get("covariance"), where)
    tiers = _tiers(ctx, node, where, outcome, exposure)
    tier_names = [t.name for t in tiers]
    report_tier = value(node, "report_tier", tier_names[-1] if tier_names else "")
    if node.get("report_tier") is not None and report_tier not in tier_names:
        ctx.error(f"report_tier `{report_tier}` is not a tier of {where} "
                  f"({', '.join(tier_names)})", node.get("report_tier").place,
                  hint=did_you_mean(report_tier, tier_names), code="unknown-tier")
    minimum = node.get("minimum_information")
    if family == "gaussian" and minimum is not None and minimum.get("events_per_parameter"):
        ctx.error("events_per_parameter applies to binomial and poisson analyses, not gaussian",
                  minimum.key_places["events_per_parameter"], code="misplaced-key")
    return Analysis(
        analysis_id, value(node, "outcome"), family, value(node, "exposure"), tiers, report_tier,
        confidence=value(node, "confidence", 0.95), population=population,
        covariance=covariance, offset=None if offset is None else offset.name,
        minimum_information=MinimumInformation(
            **({} if minimum is None else minimum.to_python())),
        place=node.place)


def _analysis_population(ctx: Context, node: Mapping, where: str,
                         populations: tuple[Population, ...]) -> str | None:
    names = [p.name for p in populations]
    given = node.get("population")
    if given is not None:
        if given.value not in names and not ctx.broken.hides("populations", given.value):
            known = f" ({', '.join(names)})" if names else "; the plan declares none"
            ctx.error(f"unknown population `{given.value}`{known}", given.place,
                      hint=did_you_mean(given.value, names), code="unknown-population")
        return given.value
    if len(names) + ctx.broken.count("populations") > 1:
        ctx.error(f"{where} must name its `population`: the plan declares {len(names)} "
                  f"({', '.join(names)})", node.place, code="missing-population")
    return names[0] if names else None


def _offset(ctx: Context, node: Mapping, where: str, family: str, outcome, exposure):
    given = node.get("offset")
    if given is None:
        return None
    if family != "poisson":
        ctx.error(f"an offset belongs to a poisson analysis; {where} is {family}", given.place,
                  code="misplaced-key")
        return None
    offset = ctx.variable(given, f"offset of {where}")
    if offset is None:
        return None
    if offset.kind not in ("continuous", "count"):
        ctx.error(f"offset `{offset.name}` is {offset.kind}; an offset is a continuous or count "
                  "exposure time", given.place, code="kind-mismatch")
    elif offset.min is not None and offset.min <= 0:
        ctx.error(f"offset `{offset.name}` enters as its logarithm, so it must be positive; its "
                  f"declared min is {_number(offset.min)}", given.place, code="out-of-range")
    elif offset.name in {getattr(outcome, "name", None), getattr(exposure, "name", None)}:
        ctx.error(f"offset `{offset.name}` is also the outcome or the exposure", given.place,
                  code="kind-mismatch")
    return offset


def covariance_of(ctx: Context, node: Node | None, where: str) -> Covariance:
    if node is None:
        return Covariance()
    if isinstance(node, Scalar):
        return Covariance(node.value)
    cluster_node = node.get("cluster")
    cluster = ctx.variable(cluster_node, f"cluster of {where}")
    if cluster is not None and cluster.kind == "continuous":
        ctx.error(f"cluster variable `{cluster.name}` is continuous; clusters are named by an "
                  "identifier, categorical or count code", cluster_node.place,
                  hint="declare it `kind: identifier`", code="kind-mismatch")
    clusters = value(node, "clusters")
    if cluster is not None and cluster.kind == "categorical" and clusters is not None \
            and clusters > len(cluster.levels):
        ctx.error(f"clusters: {clusters}, but the cluster variable `{cluster.name}` has "
                  f"{len(cluster.levels)} levels", place_of(node, "clusters"),
                  code="out-of-range")
    return Covariance("cluster", cluster_node.value, value(node, "icc"), clusters,
                      value(node, "assigned"))


def _tiers(ctx: Context, node: Mapping, where: str, outcome, exposure) -> tuple[Tier, ...]:
    from .resolve_terms import term_of

    exposure_name = node.get("exposure").value
    so_far = [Term("variable", (exposure_name,), place=node.get("exposure").place)]
    added_in: dict[tuple, str] = {}  # term key -> the tier that first added it
    seen_names: dict[str, Place] = {}
    tiers = []
    for index, tier_node in enumerate(node.get("tiers").items):
        name_node = tier_node.get("name")
        name = name_node.value
        if name in seen_names:
            ctx.error(f"tier name `{name}` is used twice in {where} (first at "
                      f"{first_at(seen_names[name], name_node.place)})", name_node.place,
                      code="duplicate-tier")
        seen_names.setdefault(name, name_node.place)
        add = tier_node.get("add")
        if index == 0 and add is not None:
            ctx.error(f"the first tier (`{name}`) holds the exposure alone; move its `add` "
                      "terms to a later tier", tier_node.key_places["add"], code="first-tier-add")
        elif index > 0 and add is None:
            ctx.error(f"tier `{name}` adds no terms; every tier after the first adds at least one",
                      tier_node.place, code="empty-tier")
        added = []
        for item in (add.items if add is not None and index > 0 else ()):
            term = term_of(ctx, item, where, outcome, exposure)
            if term is None:
                continue
            key = _term_key(term)
            if key == ("variable", (exposure_name,)):
                ctx.error(f"`{exposure_name}` is the exposure of {where}; every tier already "
                          "holds it", item.place, code="term-is-exposure")
            elif key in added_in:
                ctx.error(f"term `{term.label}` is already added in tier `{added_in[key]}`",
                          item.place, code="duplicate-term")
            else:
                added_in[key] = name
                added.append(term)
        so_far.extend(added)
        tiers.append(Tier(name, tuple(added), tuple(so_far), tier_node.place))
    return tuple(tiers)


def _term_key(term: Term) -> tuple:
    variables = tuple(sorted(term.variables)) if term.form == "product" else term.variables
    return (term.form, variables) + ((term.degree,) if term.degree else ()) + (
        (term.knots,) if term.knots else ())


def _number(x: float) -> str:
    return str(int(x)) if float(x).is_integer() else repr(x)
