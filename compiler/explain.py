"""`check --explain`: the compiled plan in plain words, and the same as one JSON document.

For each analysis: the sample rule, every tier's full design columns (with the columns a
categorical expands into), each nested comparison and its test, and each decision with what
decides it. Decision, assumption and multiplicity wording comes from
:mod:`compiler.rules_text`, so the words before the data and the verdicts after agree.
"""

from __future__ import annotations

import textwrap

from .columns import design_labels, term_labels
from .words import METHOD_WORDS, method_of
from .plan import Analysis, Condition, Plan, Population
from .rules_text import (
    describe_assumption, describe_family, describe_minimum_information, describe_rule,
)

LINK = {"gaussian": "identity", "binomial": "logit", "poisson": "log"}
EFFECT = {"gaussian": "difference in mean", "binomial": "odds ratio for",
          "poisson": "rate ratio of"}
_WIDTH = 96


def explain(plan: Plan) -> str:
    doc = explain_json(plan)
    lines = [_study_line(plan), f"  plan language {plan.language}, read from {plan.source}", ""]
    lines += ["Data", *(_wrap(line, "  ", "    ") for line in _data_lines(plan)), ""]
    lines.append("Populations")
    if not plan.populations:
        lines.append("  none declared: every analysis uses all rows")
    lines += [f"  {p['name']}: {p['rule']}" for p in doc["populations"]]
    for analysis in doc["analyses"]:
        lines += ["", *_analysis_lines(analysis)]
    for title, key in (("Decisions", "decisions"), ("Assumption checks", "assumptions"),
                       ("Multiplicity", "multiplicity")):
        if doc[key]:
            lines += ["", title]
            lines += [_wrap(item["text"], "  ", "    ") for item in doc[key]]
    return "\n".join(lines)


def explain_json(plan: Plan) -> dict:
    return {
        "language": plan.language,
        "source": plan.source,
        "study": {"id": plan.study.id, "title": plan.study.title, "version": plan.study.version},
        "data": {"path": plan.data.path, "format": plan.data.format, "row_id": plan.data.row_id,
                 "missing": list(plan.data.missing), "expected_rows": plan.data.expected_rows},
        "populations": [{"name": p.name, "rule": population_rule(p),
                         "conditions": [_condition_json(c) for c in p.conditions]}
                        for p in plan.populations],
        "analyses": [_analysis_json(plan, a) for a in plan.analyses],
        "decisions": [{"id": d.id, "analysis": d.analysis, "test": d.test, "tier": d.tier,
                       "alpha": d.alpha, "direction": d.direction, "level": d.level,
                       "margin": d.margin,
                       "margins": list(d.margins) if d.margins else None,
                       "from_tier": d.from_tier, "threshold": d.threshold,
                       "text": describe_rule(plan, d)} for d in plan.decisions],
        "assumptions": [{"id": a.id, "analysis": a.analysis, "check": a.check,
                         "p_below": a.p_below, "above": a.above,
                         "fallback": a.fallback.label, "applies_to": list(a.applies_to),
                         "text": describe_assumption(plan, a)} for a in plan.assumptions],
        "multiplicity": [{"method": m.method, "alpha": m.alpha, "decisions": list(m.decisions),
                          "text": describe_family(plan, m)} for m in plan.multiplicity],
    }


def population_rule(population: Population) -> str:
    return "rows where " + " and ".join(condition_words(c) for c in population.conditions)


def condition_words(condition: Condition) -> str:
    signs = {"equals": "=", "not_equals": "≠", "at_least": "≥", "at_most": "≤",
             "above": ">", "below": "<"}
    name, op, value = condition.variable, condition.op, condition.value
    if op in signs:
        return f"{name} {signs[op]} {_value(value)}"
    if op in ("in", "not_in"):
        listed = ", ".join(_value(v) for v in value)  # type: ignore[union-attr]
        return f"{name} {'is one of' if op == 'in' else 'is none of'} {{{listed}}}"
    return f"{name} is {'missing' if value else 'present'}"


# ---------------------------------------------------------------------------------------------


def _analysis_json(plan: Plan, analysis: Analysis) -> dict:
    labels = design_labels(plan, analysis)
    population = plan.population(analysis.population)
    comparisons = []
    for (small, small_labels), (big, big_labels) in zip(
            zip(analysis.tiers, labels), list(zip(analysis.tiers, labels))[1:]):
        method = method_of(analysis.family, analysis.covariance.kind)
        comparisons.append({"from": small.name, "to": big.name,
                            "method": METHOD_WORDS[method],
                            "test": "F" if analysis.family == "gaussian" else "chi2",
                            "df_added": len(big_labels) - len(small_labels)})
    return {
        "id": analysis.id, "family": analysis.family, "link": LINK[analysis.family],
        "outcome": analysis.outcome, "exposure": analysis.exposure,
        "effect": f"{EFFECT[analysis.family]} {analysis.outcome}",
        "population": analysis.population,
        "sample": {"population_rule": population_rule(population) if population else "all rows",
                   "complete_cases": list(analysis.variables_used)},
        "covariance": analysis.covariance.label,
        "offset": analysis.offset,
        "confidence": analysis.confidence,
        "report_tier": analysis.report_tier,
        "tiers": [{"name": tier.name,
                   "added": [label for term in tier.added for label in term_labels(plan, term)],
                   "added_terms": [term.label for term in tier.added],
                   "columns": list(columns)}
                  for tier, columns in zip(analysis.tiers, labels)],
        "comparisons": comparisons,
        "minimum_information": describe_minimum_information(analysis),
    }


NBSP = "\u00a0"  # keeps a design column's label on one line when the list is wrapped


def _analysis_lines(a: dict) -> list[str]:
    where = (f"population {a['population']} ({a['sample']['population_rule']})"
             if a["population"] else "all rows")
    lines = [f"Analysis {a['id']}: {a['outcome']} by {a['exposure']}, {a['family']} family, "
             f"{a['link']} link",
             _wrap(f"sample: {where}; then complete cases over "
                   f"{', '.join(a['sample']['complete_cases'])}. Every tier is fitted to these "
                   "same rows, so the nested comparisons are valid.", "  ", "    "),
             f"  effect: {a['effect']}, with {a['confidence'] * 100:.4g}% confidence "
             f"intervals, reported from tier {a['report_tier']}",
             f"  covariance: {a['covariance']}"]
    if a["offset"]:
        lines.append(f"  offset: log({a['offset']}) enters every tier with coefficient 1")
    for number, tier in enumerate(a["tiers"], start=1):
        adds = (f" adds {', '.join(tier['added_terms'])}" if tier["added_terms"]
                else " holds the exposure alone")
        lines.append(f"  tier {number} {tier['name']}{adds} — {len(tier['columns'])} columns:")
        lines.append(_wrap("; ".join(c.replace(" ", NBSP) for c in tier["columns"]),
                           "      ", "      ").replace(NBSP, " "))
    if a["comparisons"]:
        lines.append("  nested comparisons:")
        for c in a["comparisons"]:
            lines.append(f"    {c['from']} → {c['to']}: {c['method']} test of the "
                         f"{c['df_added']} added column{'s' if c['df_added'] != 1 else ''}, "
                         f"referred to {'F' if c['test'] == 'F' else 'χ²'}")
    if a["minimum_information"]:
        lines.append(_wrap(a["minimum_information"], "  ", "    "))
    return lines


def _study_line(plan: Plan) -> str:
    study = plan.study
    version = f", version {study.version}" if study.version else ""
    title = f": {study.title}" if study.title else ""
    return f"Study {study.id}{version}{title}"


def _data_lines(plan: Plan) -> list[str]:
    data = plan.data
    if data.path:
        fmt = data.format or "taken from the file's extension"
        lines = [f"file {data.path} (relative to the plan; --data overrides it), format {fmt}"]
    else:
        lines = ["no file named: give it with --data" + (f", format {data.format}"
                                                          if data.format else "")]
    if data.row_id:
        lines.append(f"each row is named by {data.row_id}, which must be unique and complete")
    markers = " or ".join(f'"{m}"' for m in data.missing) or "nothing"
    lines.append(f"missing values are written as {markers}")
    if data.expected_rows:
        lines.append(f"expected rows: {data.expected_rows}")
    return lines


def _condition_json(condition: Condition) -> dict:
    value = condition.value
    return {"variable": condition.variable, "op": condition.op,
            "value": list(value) if isinstance(value, tuple) else value,
            "text": condition_words(condition)}


def _value(value) -> str:
    if isinstance(value, float) and value.is_integer() and abs(value) < 1e15:
        return str(int(value))
    return str(value)


def _wrap(text: str, first: str, rest: str) -> str:
    return "\n".join(textwrap.wrap(text, _WIDTH, initial_indent=first, subsequent_indent=rest,
                                   break_on_hyphens=False))
