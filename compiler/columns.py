"""Design-column labels, from the plan alone (no data, no numpy), as design.md fixes them.

``intercept``; a continuous, count or binary variable by its name; a categorical variable
as one ``VAR: LEVEL vs REFERENCE`` column per non-reference level, in declared order
(treatment coding; the label names the reference, which an auditor asks for); ``VAR^K``;
``log(VAR)``; ``spline(VAR) #1`` … ``spline(VAR) #k-1`` for a natural cubic spline with k
knots; a product as every combination of its factors' columns joined by `` × `` (U+00D7
with a space each side), the first factor outermost (``district: hillside vs valley ×
age``). `check --explain`, the results, the report and `verify --data` print these, and
the design pass labels its columns the same way.
"""

from __future__ import annotations

from .plan import Analysis, Plan, Term, Variable

INTERCEPT = "intercept"
TIMES = " × "  # a product's sides


def level_label(name: str, level: str, reference: str) -> str:
    """The column of one non-reference level of a categorical variable."""
    return f"{name}: {level} vs {reference}"


def variable_labels(variable: Variable) -> tuple[str, ...]:
    if variable.kind == "categorical":
        reference = variable.reference if variable.reference is not None else variable.levels[0]
        return tuple(level_label(variable.name, level, reference)
                     for level in variable.levels if level != reference)
    return (variable.name,)


def term_labels(plan: Plan, term: Term) -> tuple[str, ...]:
    """The design columns one term expands into, in order."""
    name = term.variables[0]
    if term.form == "variable":
        return variable_labels(plan.variable(name))
    if term.form == "power":
        return (f"{name}^{term.degree}",)
    if term.form == "log":
        return (f"log({name})",)
    if term.form == "spline":
        return tuple(f"spline({name}) #{j}" for j in range(1, len(term.knots)))
    combined = [""]
    for factor in term.variables:
        sides = variable_labels(plan.variable(factor))
        combined = [f"{left}{TIMES}{right}" if left else right
                    for left in combined for right in sides]
    return tuple(combined)


def design_labels(plan: Plan, analysis: Analysis) -> tuple[tuple[str, ...], ...]:
    """Each tier's full design columns, in order: the intercept, the exposure's columns, then
    every term the tiers add, in the order written. Each tier's tuple is a prefix of the next."""
    return tuple((INTERCEPT,) + tuple(label for term in tier.terms
                                      for label in term_labels(plan, term))
                 for tier in analysis.tiers)


def column_terms(plan: Plan, analysis: Analysis) -> tuple[str, ...]:
    """For each column of the largest tier, the label of the plan term it belongs to."""
    return (INTERCEPT,) + tuple(term.label for term in analysis.tiers[-1].terms
                                for _ in term_labels(plan, term))
