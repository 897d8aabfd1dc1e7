"""The second pass: the source tree must have the shape `schemas/plan.schema.json` describes.

jsonschema finds every shape error; this module turns each into a :class:`Problem` at the
offending value's own line:col, in words that name the value and, where it helps, the
nearest known name. A oneOf (a term, a covariance) reports the branch the value was
evidently meant for, not the whole union. Subschemas may carry ``x-message``: a wording
for one rule, with ``{value}`` standing for the offending value.
"""

from __future__ import annotations

import json
from typing import Iterator

from .load import Mapping, Scalar, Tree, reads_as_text
from .problems import Exit, Place, Problem, sorted_problems, stop_if_errors
from .resources import schema_path
from .suggest import did_you_mean
from .wellformed import Fault

_validator = None


def _plan_validator():
    global _validator
    if _validator is None:
        from jsonschema import Draft202012Validator  # lazily: `check` pays for it only here

        with open(schema_path("plan.schema.json"), encoding="utf-8") as handle:
            published = json.load(handle)
        _validator = Draft202012Validator(_inline_refs(published, published["$defs"]))
    return _validator


def _inline_refs(node, defs: dict):
    """The schema with every local ``$ref`` replaced by its target (our schema has no cycles);
    jsonschema then needs no reference lookups, which halves the time a plan takes."""
    if isinstance(node, dict):
        if "$ref" in node and node["$ref"].startswith("#/$defs/"):
            target = _inline_refs(defs[node["$ref"][len("#/$defs/"):]], defs)
            return {**target, **{k: _inline_refs(v, defs) for k, v in node.items() if k != "$ref"}}
        return {k: _inline_refs(v, defs) for k, v in node.items() if k != "$defs"}
    if isinstance(node, list):
        return [_inline_refs(item, defs) for item in node]
    return node


def validate(tree: Tree) -> None:
    """Raise one Stop (exit 2) holding every schema error, each at its place."""
    stop_if_errors(check(tree)[0], Exit.PLAN_INVALID)


def check(tree: Tree) -> tuple[tuple[Problem, ...], list[Fault]]:
    """Every schema error as a problem at its place (in file order), and where each fault
    lies, for compiler.wellformed to leave out before the resolver checks the rest."""
    validator = _plan_validator()
    problems: dict[tuple, Problem] = {}
    found: list[Fault] = []
    for error in validator.iter_errors(tree.to_python()):
        found += _faults(error)
        for problem in _problems(error, tree, validator.schema):
            problems.setdefault((problem.place, problem.message), problem)
    return sorted_problems(problems.values()), found


def faults(tree: Tree) -> list[Fault]:
    """Where the schema finds fault with ``tree``, without the wording."""
    return [f for error in _plan_validator().iter_errors(tree.to_python())
            for f in _faults(error)]


def _faults(error) -> list[Fault]:
    path = tuple(error.absolute_path)
    if "propertyNames" in error.absolute_schema_path:
        return [Fault(path + (error.instance,))]  # the entry whose name is not usable
    if error.validator == "additionalProperties" and isinstance(error.instance, dict):
        known = error.schema.get("properties", {})
        return [Fault(path + (key,), exact=True) for key in error.instance if key not in known]
    return [Fault(path)]


# ---------------------------------------------------------------------------------------------
# From a jsonschema error to problems


def _problems(error, tree: Tree, root: dict) -> Iterator[Problem]:
    path = list(error.absolute_path)
    node, place = tree.find(path)
    rule = error.validator
    custom = error.schema.get("x-message", {}) if isinstance(error.schema, dict) else {}
    what = _what(path)
    value = _show(error.instance)
    if isinstance(node, Scalar) and node.value == error.instance:
        value = _show(node.text)  # as written: `1.0`, not `1`
        if node.quoted and not reads_as_text(node.text):
            value = _show(f'"{node.text}"')  # text that looks like a number: `"1"`, not `1`

    if "propertyNames" in error.absolute_schema_path:
        key = error.instance
        key_place = node.key_places.get(key, place) if isinstance(node, Mapping) else place
        message = custom.get(rule, "{value} is not a usable name").format(value=value)
        yield Problem(message, key_place, code="bad-name")
        return
    if rule in ("oneOf", "anyOf"):
        chosen = _chosen_branch(error, root)
        if chosen:
            for sub in chosen:
                yield from _problems(sub, tree, root)
            return
        yield _union_problem(error, place, value, root)
        return
    if rule == "additionalProperties":
        known = list(error.schema.get("properties", {}))
        for key in error.instance:
            if key in known:
                continue
            hint = did_you_mean(key, known) or (
                f"allowed here: {', '.join(known)}" if known else None)
            key_place = node.key_places.get(key, place) if isinstance(node, Mapping) else place
            yield Problem(f"unknown key `{key}`{_under(path)}", key_place, hint=hint,
                          code="unknown-key")
        return
    if rule == "required":
        for key in error.validator_value:
            if key not in error.instance:
                yield Problem(f"missing required key `{key}`{_under(path)}", place,
                              code="missing-key")
        return
    if rule in custom:
        yield Problem(custom[rule].format(value=value), place, code=rule)
        return
    yield _generic(error, place, what, value, node)


def _generic(error, place: Place, what: str, value: str, node) -> Problem:
    rule, limit, instance = error.validator, error.validator_value, error.instance
    hint = None
    if rule == "type":
        expected = limit if isinstance(limit, list) else [limit]
        wanted = " or ".join(_TYPE_WORDS[t] for t in expected)
        message = f"{what} must be {wanted}, not {_kind_of(instance)} {value}"
        if "string" in expected and instance is not None and not isinstance(instance, (dict, list)):
            text = node.text if isinstance(node, Scalar) else _plain(instance)
            hint = f'put it in quotes to make it text: "{text}"'
        elif instance is None:
            message = f"{what} must be {wanted}; it is empty"
        elif expected == ["boolean"]:
            hint = "write true or false"
    elif rule == "enum":
        message = f"{what} must be one of {', '.join(map(str, limit))}; not {value}"
        crossed = _CROSSED.get((what, instance)) if isinstance(instance, str) else None
        hint = crossed or did_you_mean(instance, [str(v) for v in limit])
    elif rule == "const":
        message = f"{what} must be {_show(limit)}, not {value}"
    elif rule in _BOUND_WORDS:
        message = f"{what} must be {_BOUND_WORDS[rule]} {_plain(limit)}, not {value}"
    elif rule == "minItems":
        message = f"{what} needs at least {limit} item{'s' if limit != 1 else ''}"
    elif rule == "maxItems":
        message = f"{what} takes at most {limit} items, not {len(instance)}"
    elif rule == "uniqueItems":
        message = f"{what} lists the same value twice"
    elif rule == "minLength":
        message = f"{what} must not be empty"
    elif rule == "pattern":
        message = f"{what} {value} does not have the required form"
    else:
        message = f"{what}: {error.message}"
    return Problem(message, place, hint=hint, code=rule)


# a family written as a variable's kind, or a kind as an analysis' family
_CROSSED = {
    ("`kind`", "binomial"): "`binomial` is a family; the kind of a 0/1 variable is `binary`",
    ("`kind`", "gaussian"): "`gaussian` is a family; the kind of a measured variable is "
                            "`continuous`",
    ("`kind`", "poisson"): "`poisson` is a family; the kind of a variable that counts is `count`",
    ("`family`", "binary"): "`binary` is a kind of variable; the family of an analysis of a "
                            "0/1 outcome is `binomial`",
    ("`family`", "continuous"): "`continuous` is a kind of variable; the family of an analysis "
                                "of a continuous outcome is `gaussian`",
    ("`family`", "count"): "`count` is a kind of variable; the family of an analysis of a "
                           "count outcome is `poisson`",
}
_TYPE_WORDS = {"string": "text", "number": "a number", "integer": "a whole number",
               "boolean": "true or false", "object": "a mapping", "array": "a list",
               "null": "empty"}
_BOUND_WORDS = {"minimum": "at least", "maximum": "at most",
                "exclusiveMinimum": "greater than", "exclusiveMaximum": "less than"}


def _chosen_branch(error, root: dict) -> list | None:
    """The sub-errors of the branch the value evidently meant: the one whose leading required
    key it has, else the only branch of its JSON type."""
    branches = [_deref(b, root) for b in error.validator_value]
    by_branch: dict[int, list] = {}
    for sub in error.context:
        by_branch.setdefault(sub.relative_schema_path[0], []).append(sub)
    instance = error.instance
    if isinstance(instance, dict):
        for index, branch in enumerate(branches):
            lead = branch.get("required", [None])[0]
            if lead in instance:
                return by_branch.get(index)
    fitting = [i for i, branch in enumerate(branches) if _type_fits(instance, branch)]
    if len(fitting) == 1:
        return by_branch.get(fitting[0])
    return None


def _union_problem(error, place: Place, value: str, root: dict) -> Problem:
    branches = [_deref(b, root) for b in error.validator_value]
    forms = [b.get("title", "?") for b in branches]
    hint = None
    if isinstance(error.instance, dict):
        leads = [b["required"][0] for b in branches if b.get("required")]
        for key in error.instance:
            hint = hint or did_you_mean(key, leads)
    listed = ", ".join(forms[:-1]) + f" or {forms[-1]}" if len(forms) > 1 else forms[0]
    return Problem(f"{value} is not {listed}", place, hint=hint, code="bad-form")


def _deref(schema: dict, root: dict) -> dict:
    while isinstance(schema, dict) and "$ref" in schema and schema["$ref"].startswith("#/$defs/"):
        schema = {**root["$defs"][schema["$ref"][len("#/$defs/"):]],
                  **{k: v for k, v in schema.items() if k != "$ref"}}
    return schema


def _type_fits(instance, schema: dict) -> bool:
    if "enum" in schema:
        return any(type(instance) is type(v) for v in schema["enum"])
    types = schema.get("type")
    types = types if isinstance(types, list) else [types]
    checks = {"string": lambda v: isinstance(v, str), "object": lambda v: isinstance(v, dict),
              "array": lambda v: isinstance(v, list),
              "number": lambda v: isinstance(v, (int, float)) and not isinstance(v, bool),
              "integer": lambda v: isinstance(v, int) and not isinstance(v, bool),
              "boolean": lambda v: isinstance(v, bool)}
    return any(t in checks and checks[t](instance) for t in types)


# ---------------------------------------------------------------------------------------------
# Words


def _what(path: list) -> str:
    """How to name the value at ``path``: its key, or "item N of KEY"."""
    if not path:
        return "the plan"
    last = path[-1]
    if isinstance(last, int):
        above = next((p for p in reversed(path[:-1]) if isinstance(p, str)), "the list")
        return f"item {last + 1} of `{above}`"
    return f"`{last}`"


def _under(path: list) -> str:
    """" in `study`" / " in item 2 of `analyses`" — where a key is missing or unknown."""
    if not path:
        return ""
    if len(path) == 2 and path[0] in ("variables", "populations"):
        return f" in {path[0][:-1]} `{path[1]}`"
    return f" in {_what(path)}"


def _kind_of(value) -> str:
    if isinstance(value, bool):
        return "the value"
    if isinstance(value, (int, float)):
        return "the number"
    if isinstance(value, str):
        return "the text"
    if isinstance(value, dict):
        return "the mapping"
    if isinstance(value, list):
        return "the list"
    return "the value"


def _plain(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if value is None:
        return "null"
    if isinstance(value, float) and value.is_integer() and abs(value) < 1e15:
        return str(int(value))
    return str(value)


def _show(value, depth: int = 0) -> str:
    """A short, YAML-like rendering of a value, in backticks at the top level."""
    if depth > 2:
        return "…"
    if isinstance(value, dict):
        items = list(value.items())
        body = ", ".join(f"{k}: {_show(v, depth + 1)}" for k, v in items[:4])
        text = "{" + body + (", …" if len(items) > 4 else "") + "}"
    elif isinstance(value, list):
        body = ", ".join(_show(v, depth + 1) for v in value[:6])
        text = "[" + body + (", …" if len(value) > 6 else "") + "]"
    else:
        text = _plain(value)
    if len(text) > 60:
        text = text[:57] + "…"
    return f"`{text}`" if depth == 0 else text
