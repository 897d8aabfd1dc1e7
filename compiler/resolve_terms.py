"""Model terms: one entry of a tier's ``add`` list → a :class:`~compiler.plan.Term`, checked.

A term is a declared variable name, or a mapping naming its form: ``{power: VAR, degree: K}``,
``{log: VAR}``, ``{product: [A, B, ...]}``, ``{spline: VAR, knots: [...]}``. Each form says
which kinds of variable it accepts; nothing in a term is ever evaluated.
"""

from __future__ import annotations

from .load import Mapping, Node, Scalar
from .plan import Term, Variable
from .resolve import Context

_NUMERIC_SCALE = ("continuous", "count")


def term_of(ctx: Context, node: Node, where: str, outcome: Variable | None,
            exposure: Variable | None) -> Term | None:
    """The Term ``node`` spells, or None after reporting why it cannot be one."""
    if isinstance(node, Scalar):
        variable = ctx.variable(node, f"term of {where}")
        if variable is None or not _modelable(ctx, variable, node, outcome):
            return None
        return Term("variable", (variable.name,), place=node.place)
    assert isinstance(node, Mapping)
    form = next(key for key in ("power", "log", "product", "spline") if key in node.entries)
    if form == "product":
        return _product(ctx, node, where, outcome)
    var_node = node.get(form)
    variable = ctx.variable(var_node, f"{form} term of {where}")
    if variable is None or not _modelable(ctx, variable, var_node, outcome):
        return None
    if variable.kind not in _NUMERIC_SCALE:
        ctx.error(f"a {form} term needs a continuous or count variable; `{variable.name}` is "
                  f"{variable.kind}", var_node.place, code="kind-mismatch")
        return None
    if form == "power":
        degree = int(node.get("degree").value)  # 2.0 passes the schema as an integer
        return Term("power", (variable.name,), degree=degree, place=node.place)
    if form == "log":
        if variable.min is not None and variable.min <= 0:
            ctx.error(f"log({variable.name}) needs positive values, but `{variable.name}` may be "
                      f"as small as {_number(variable.min)} (its declared min)", var_node.place,
                      hint="log a variable whose declared min is above 0", code="out-of-range")
            return None
        return Term("log", (variable.name,), place=node.place)
    return _spline(ctx, node, variable)


def _modelable(ctx: Context, variable: Variable, node: Node, outcome: Variable | None) -> bool:
    if variable.kind == "identifier":
        ctx.error(f"`{variable.name}` is an identifier; identifiers are never model terms",
                  node.place, code="kind-mismatch")
        return False
    if outcome is not None and variable.name == outcome.name:
        ctx.error(f"`{variable.name}` is the outcome; it cannot also be a term", node.place,
                  code="term-is-outcome")
        return False
    return True


def _product(ctx: Context, node: Mapping, where: str, outcome: Variable | None) -> Term | None:
    names: list[str] = []
    fine = True
    for item in node.get("product").items:
        variable = ctx.variable(item, f"product term of {where}")
        if variable is None or not _modelable(ctx, variable, item, outcome):
            fine = False
        elif variable.name in names:
            ctx.error(f"`{variable.name}` appears twice in the product; a product multiplies "
                      "distinct variables", item.place,
                      hint=f"for a square write {{power: {variable.name}, degree: 2}}",
                      code="duplicate-factor")
            fine = False
        else:
            names.append(variable.name)
    return Term("product", tuple(names), place=node.place) if fine else None


def _spline(ctx: Context, node: Mapping, variable: Variable) -> Term | None:
    knots_node = node.get("knots")
    knots = [float(k.value) for k in knots_node.items]
    fine = True
    for previous, knot, item in zip(knots, knots[1:], knots_node.items[1:]):
        if knot <= previous:
            ctx.error(f"spline knots must increase strictly; {item.text} follows "
                      f"{_number(previous)}", item.place, code="knots-not-increasing")
            fine = False
    for knot, item in zip(knots, knots_node.items):
        low, high = variable.min, variable.max
        if (low is not None and knot < low) or (high is not None and knot > high):
            ctx.error(f"knot {item.text} lies outside the declared range of `{variable.name}` "
                      f"({_number(low) if low is not None else '…'} to "
                      f"{_number(high) if high is not None else '…'})", item.place,
                      code="out-of-range")
            fine = False
    return Term("spline", (variable.name,), knots=tuple(knots), place=node.place) if fine else None


def _number(x: float) -> str:
    return str(int(x)) if float(x).is_integer() else repr(x)
