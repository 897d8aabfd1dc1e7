"""Decision rules, assumption checks and multiplicity families: resolved and checked.

What each rule needs depends on its test and on the analysis it reads: a margin is a
difference for a gaussian analysis and a ratio (odds or rate ratio) for binomial and poisson;
a categorical exposure with several non-reference levels must say which level a directional
rule is about. Fields that mean nothing for a test are errors, not silently ignored.
"""

from __future__ import annotations

from dataclasses import replace

from .load import Mapping, Sequence
from .plan import Analysis, Assumption, Decision, Multiplicity
from .problems import Place, Problem
from .resolve import Context, article, covariance_of, first_at, level_text, place_of, value
from .suggest import did_you_mean

# the optional fields each test reads; any other is reported as meaningless for it
_FIELDS = {
    "superiority": {"tier", "alpha", "direction", "level"},
    "non-inferiority": {"tier", "alpha", "direction", "level", "margin"},
    "equivalence": {"tier", "alpha", "level", "margins"},
    "tier-selection": {"alpha"},
    "change-in-estimate": {"tier", "level", "from_tier", "threshold"},
}
_ESTIMATE_TESTS = ("superiority", "non-inferiority", "equivalence")
_REQUIRED = {"id", "analysis", "test"}


def resolve_rules(ctx: Context, root: Mapping, analyses: tuple[Analysis, ...]):
    """Decisions, assumptions and multiplicity families, in plan order."""
    by_id = {a.id: a for a in analyses}
    ids: dict[str, Place] = {}  # decisions and assumptions share one id space
    decisions = [_decision(ctx, node, by_id, ids) for node in _items(root, "decisions")]
    decisions_by_id = {d.id: d for d in decisions if d is not None}
    # a decision whose analysis is unknown was reported already; its members are not again
    ctx.unresolved = {value(n, "id") for n in _items(root, "decisions")} - set(decisions_by_id)
    assumptions = [_assumption(ctx, node, by_id, ids, decisions_by_id)
                   for node in _items(root, "assumptions")]
    _no_decision_checked_twice(ctx, root, assumptions)
    families = [_family(ctx, node, decisions_by_id) for node in _items(root, "multiplicity")]
    family_alpha = _family_membership(ctx, root, families, decisions_by_id)
    decisions = [replace(d, alpha=family_alpha.get(d.id, d.alpha)) for d in decisions if d]
    return tuple(decisions), tuple(a for a in assumptions if a), tuple(families)


def _items(root: Mapping, key: str) -> tuple:
    node = root.get(key)
    return node.items if isinstance(node, Sequence) else ()


def _unique_id(ctx: Context, node: Mapping, ids: dict[str, Place]) -> str:
    rule_id = value(node, "id")
    if rule_id in ids:
        ctx.error(f"id `{rule_id}` is used twice (first at "
                  f"{first_at(ids[rule_id], node.get('id').place)}); decisions and assumptions "
                  "share one set of ids", node.get("id").place,
                  code="duplicate-id")
    ids.setdefault(rule_id, node.get("id").place)
    return rule_id


def _analysis_of(ctx: Context, node: Mapping, by_id: dict[str, Analysis]) -> Analysis | None:
    given = value(node, "analysis")
    if given in by_id:
        return by_id[given]
    if ctx.broken.hides("analyses", given):
        return None  # its entry failed the schema check, and was reported there
    ctx.error(f"unknown analysis `{given}` ({', '.join(by_id)})", node.get("analysis").place,
              hint=did_you_mean(given, by_id), code="unknown-analysis")
    return None


def _tier(ctx: Context, node: Mapping, key: str, analysis: Analysis, default: str) -> str:
    names = [t.name for t in analysis.tiers]
    given = value(node, key)
    if given is None:
        return default
    if given not in names:
        ctx.error(f"`{given}` is not a tier of analysis `{analysis.id}` ({', '.join(names)})",
                  node.get(key).place, hint=did_you_mean(given, names), code="unknown-tier")
    return given


# ---------------------------------------------------------------------------------------------


def _decision(ctx: Context, node: Mapping, by_id: dict[str, Analysis],
              ids: dict[str, Place]) -> Decision | None:
    decision_id = _unique_id(ctx, node, ids)
    test = value(node, "test")
    for key in node.entries:
        if key not in _REQUIRED and key not in _FIELDS[test]:
            users = [t for t, fields in _FIELDS.items() if key in fields]
            ctx.error(f"`{key}` has no meaning for {article(test)} rule (decision `{decision_id}`)",
                      node.key_places[key], hint=f"`{key}` belongs to {' and '.join(users)} rules"
                      if users else None, code="misplaced-key")
    analysis = _analysis_of(ctx, node, by_id)
    if analysis is None:
        return None
    tier = (analysis.report_tier if test == "tier-selection"
            else _tier(ctx, node, "tier", analysis, analysis.report_tier))
    direction = value(node, "direction", "two-sided")
    level = _level(ctx, node, analysis, test, direction, decision_id)
    margin, margins, from_tier = None, None, None
    if test == "non-inferiority":
        margin = _non_inferiority(ctx, node, analysis, direction, decision_id)
    elif test == "equivalence":
        margins = _equivalence(ctx, node, analysis, decision_id)
    elif test == "change-in-estimate":
        from_tier = _tier(ctx, node, "from_tier", analysis, analysis.tiers[0].name)
        names = [t.name for t in analysis.tiers]
        if from_tier in names and tier in names and names.index(from_tier) >= names.index(tier):
            key = "from_tier" if node.get("from_tier") is not None else "tier"
            ctx.error(f"change-in-estimate `{decision_id}` measures the change from tier "
                      f"`{from_tier}` to tier `{tier}`, so `{from_tier}` must come first",
                      place_of(node, key), code="tier-order")
    return Decision(decision_id, analysis.id, test, tier, alpha=value(node, "alpha", 0.05),
                    direction=direction, level=level, margin=margin, margins=margins,
                    from_tier=from_tier, threshold=value(node, "threshold", 0.10),
                    place=node.place)


def _level(ctx: Context, node: Mapping, analysis: Analysis, test: str, direction: str,
           decision_id: str) -> str | None:
    exposure = ctx.variables.get(analysis.exposure)
    given = node.get("level")
    if exposure is None or test == "tier-selection":
        return None
    if exposure.kind != "categorical":
        if given is not None:
            ctx.error(f"`level` names a level of a categorical exposure, but `{exposure.name}` "
                      f"is {exposure.kind}", given.place, code="misplaced-key")
        return None
    compared = [lv for lv in exposure.levels if lv != exposure.reference]
    if given is not None:
        level = level_text(given)
        if level == exposure.reference:
            ctx.error(f"`{level}` is the reference level of `{exposure.name}`; name a level to "
                      f"compare with it ({', '.join(compared)})", given.place,
                      code="reference-level")
        elif level not in exposure.levels:
            ctx.error(f"`{level}` is not a level of `{exposure.name}` "
                      f"({', '.join(exposure.levels)})", given.place,
                      hint=did_you_mean(level, compared), code="unknown-level")
        return level
    if len(compared) == 1:
        return compared[0]
    if test != "superiority" or direction != "two-sided":
        why = f"a {direction} rule" if test == "superiority" else f"{article(test)} rule"
        ctx.error(f"decision `{decision_id}` must name `level`: {why} compares one level of "
                  f"`{exposure.name}` with `{exposure.reference}`, and there are "
                  f"{len(compared)} ({', '.join(compared)})", node.place, code="missing-level")
    return None  # a two-sided superiority rule over several levels is a joint test


def _non_inferiority(ctx: Context, node: Mapping, analysis: Analysis, direction: str,
                     decision_id: str) -> float | None:
    if direction == "two-sided" and node.get("direction") is not None:
        ctx.error(f"non-inferiority `{decision_id}` cannot be two-sided: it asks whether the "
                  "effect is no worse than the margin on the one side that matters, so it is "
                  "one-sided by nature; a two-sided question about a margin is an equivalence "
                  "rule", place_of(node, "direction"),
                  hint="say `direction: higher` (larger values are better) or `direction: "
                       "lower` (smaller values are better), or use `test: equivalence` with "
                       "`margins: [low, high]`", code="two-sided-non-inferiority")
    elif direction == "two-sided":
        ctx.error(f"non-inferiority `{decision_id}` needs `direction`: higher (larger values are "
                  "better) or lower (smaller values are better)", place_of(node, "direction"),
                  code="missing-direction")
    margin_node = node.get("margin")
    if margin_node is None:
        ctx.error(f"non-inferiority `{decision_id}` needs `margin`: the largest loss still "
                  "accepted", node.place, code="missing-margin")
        return None
    margin = float(margin_node.value)
    ratio = analysis.family != "gaussian"
    scale = "ratio" if ratio else "difference"
    null = 1.0 if ratio else 0.0
    if ratio and margin <= 0:
        ctx.error(f"a ratio margin must be positive, not {margin_node.text}", margin_node.place,
                  code="margin-sign")
    elif direction == "higher" and margin >= null:
        ctx.error(f"with direction higher (larger is better) the non-inferiority margin on the "
                  f"{scale} scale must be below {null:g}, not {margin_node.text}",
                  margin_node.place, code="margin-sign")
    elif direction == "lower" and margin <= null:
        ctx.error(f"with direction lower (smaller is better) the non-inferiority margin on the "
                  f"{scale} scale must be above {null:g}, not {margin_node.text}",
                  margin_node.place, code="margin-sign")
    return margin


def plan_cautions(plan) -> tuple[Problem, ...]:
    """Warnings on a resolved plan that change nothing it means: a one-sided rule held to
    an α above 0.025 (rules_text.one_sided_caution). `check` prints them; exit stays 0."""
    from .rules_text import ONE_SIDED_ALPHA, one_sided_caution

    found = []
    for decision in plan.decisions:
        text = one_sided_caution(plan, decision)
        if text:
            found.append(Problem(text, decision.place, severity="warning",
                                 code="one-sided-alpha",
                                 hint=f"hold the rule at alpha {ONE_SIDED_ALPHA} (a frozen plan "
                                      "keeps its own α: prespec changes no default)"))
    return tuple(found)


def _equivalence(ctx: Context, node: Mapping, analysis: Analysis,
                 decision_id: str) -> tuple[float, float] | None:
    margins_node = node.get("margins")
    if margins_node is None:
        ctx.error(f"equivalence `{decision_id}` needs `margins: [low, high]`", node.place,
                  code="missing-margin")
        return None
    low, high = (float(item.value) for item in margins_node.items)
    if analysis.family == "gaussian":
        fine, wanted = low < 0 < high, "low < 0 < high on the difference scale"
    else:
        fine, wanted = 0 < low < 1 < high, "0 < low < 1 < high on the ratio scale"
    if not fine:
        shown = ", ".join(item.text for item in margins_node.items)
        ctx.error(f"equivalence margins [{shown}] must satisfy {wanted}", margins_node.place,
                  code="margin-sign")
    return (low, high)


# ---------------------------------------------------------------------------------------------


def _assumption(ctx: Context, node: Mapping, by_id: dict[str, Analysis], ids: dict[str, Place],
                decisions: dict[str, Decision]) -> Assumption | None:
    assumption_id = _unique_id(ctx, node, ids)
    check = value(node, "check")
    analysis = _analysis_of(ctx, node, by_id)
    wrong_key = "above" if check == "constant-variance" else "p_below"
    if node.get(wrong_key) is not None:
        ctx.error(f"`{wrong_key}` has no meaning for a {check} check", node.key_places[wrong_key],
                  hint="constant-variance takes p_below; dispersion takes above",
                  code="misplaced-key")
    if check == "dispersion" and node.get("above") is None:
        ctx.error(f"dispersion check `{assumption_id}` needs `above`: the largest acceptable "
                  "Pearson dispersion", node.place, code="missing-threshold")
    where = f"assumption `{assumption_id}`"
    fallback = covariance_of(ctx, node.get("fallback").get("covariance"), where)
    if analysis is None:
        return None
    families = ("gaussian",) if check == "constant-variance" else ("binomial", "poisson")
    if analysis.family not in families:
        ctx.error(f"a {check} check applies to {' and '.join(families)} analyses; "
                  f"`{analysis.id}` is {analysis.family}", node.get("check").place,
                  code="check-family")
    if fallback == analysis.covariance:
        ctx.error(f"the fallback {fallback.label} is the covariance `{analysis.id}` already uses",
                  node.get("fallback").place, code="same-fallback")
    applies_to = []
    for item in node.get("applies_to").items:
        decision = decisions.get(item.value)
        if decision is None:
            _unknown_decision(ctx, item, decisions)
        elif decision.analysis != analysis.id:
            ctx.error(f"decision `{decision.id}` reads analysis `{decision.analysis}`, not "
                      f"`{analysis.id}`", item.place, code="other-analysis")
        elif decision.test == "change-in-estimate":
            ctx.error(f"decision `{decision.id}` compares point estimates, which no covariance "
                      "changes", item.place, code="no-fallback-needed")
        elif decision.id in applies_to:
            ctx.error(f"decision `{decision.id}` is listed twice", item.place,
                      code="duplicate-member")
        else:
            applies_to.append(decision.id)
    return Assumption(assumption_id, analysis.id, check, fallback, tuple(applies_to),
                      p_below=value(node, "p_below",
                                    0.05 if check == "constant-variance" else None),
                      above=value(node, "above"), place=node.place)


def _unknown_decision(ctx: Context, item, decisions: dict[str, Decision]) -> None:
    if item.value not in ctx.unresolved and not ctx.broken.hides("rules", item.value):
        ctx.error(f"unknown decision `{item.value}`", item.place,
                  hint=did_you_mean(item.value, decisions), code="unknown-decision")


def _no_decision_checked_twice(ctx: Context, root: Mapping, assumptions: list) -> None:
    covered: dict[str, str] = {}
    for node, assumption in zip(_items(root, "assumptions"), assumptions):
        if assumption is None:
            continue
        for item in node.get("applies_to").items:
            if item.value in assumption.applies_to:
                if covered.get(item.value, assumption.id) != assumption.id:
                    ctx.error(f"decision `{item.value}` already falls back under assumption "
                              f"`{covered[item.value]}`; one fallback per decision",
                              item.place, code="two-fallbacks")
                covered.setdefault(item.value, assumption.id)


# ---------------------------------------------------------------------------------------------


def _family(ctx: Context, node: Mapping, decisions: dict[str, Decision]) -> Multiplicity:
    members: list[str] = []
    for item in node.get("decisions").items:
        decision = decisions.get(item.value)
        if decision is None:
            _unknown_decision(ctx, item, decisions)
        elif decision.test not in _ESTIMATE_TESTS:
            ctx.error(f"decision `{decision.id}` is a {decision.test} rule; a multiplicity family "
                      "holds superiority, non-inferiority and equivalence rules", item.place,
                      code="not-a-test")
        elif decision.id in members:
            ctx.error(f"decision `{decision.id}` is listed twice in the family", item.place,
                      code="duplicate-member")
        else:
            members.append(decision.id)
    return Multiplicity(value(node, "method"), value(node, "alpha"), tuple(members), node.place)


def _family_membership(ctx: Context, root: Mapping, families: list[Multiplicity],
                       decisions: dict[str, Decision]) -> dict[str, float]:
    """Each decision in at most one family; members take the family's alpha."""
    member_of: dict[str, Multiplicity] = {}
    decision_nodes = {value(n, "id"): n for n in _items(root, "decisions")}
    for node, family in zip(_items(root, "multiplicity"), families):
        for item in node.get("decisions").items:
            if item.value not in family.decisions:
                continue
            if item.value in member_of and member_of[item.value] is not family:
                first = member_of[item.value]
                ctx.error(f"decision `{item.value}` already belongs to the {first.method} "
                          f"family at line {first.place.line}", item.place,
                          code="two-families")
                continue
            member_of[item.value] = family
            own = decision_nodes[item.value].get("alpha")
            if own is not None and own.value != family.alpha:
                ctx.error(f"decision `{item.value}` states alpha {own.text}, but it belongs to a "
                          f"{family.method} family held to alpha {family.alpha:g}; members take "
                          "the family's alpha", own.place,
                          hint=f"remove `alpha` from `{item.value}`", code="member-alpha")
    return {decision_id: family.alpha for decision_id, family in member_of.items()}
