"""Property: however the demo plan is mangled, `check` ends in a Plan or in problems — never
in a traceback. (Hypothesis drives the mutations; examples are kept few so the suite is fast.)"""

from __future__ import annotations

import json
from pathlib import Path

import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from compiler.explain import explain, explain_json
from compiler.pipeline import compile_plan
from compiler.problems import Exit, Stop

DEMO = yaml.safe_load(Path("plans/dusk-sleep.yaml").read_text(encoding="utf-8"))
DEMO_TEXT = Path("plans/dusk-sleep.yaml").read_text(encoding="utf-8")

CODE_LIKE = st.sampled_from([
    "__import__('os').system('echo owned')", "age + os.system('x')", "{{7*7}}", "${HOME}",
    "exec('1')", "lambda: 0", "!!python/object:os.system", "*alias", "&anchor", "- item",
    "age*sex", "log(age)", "age^2", "", " ", "NA", "no", "off", "null", "true", "0x1F", ".nan",
    "größe", "âge", "年齢", "e\u0301", "\u202eevil", "x" * 500,
])
SCALARS = st.one_of(
    st.none(), st.booleans(), st.integers(), st.integers(min_value=10**15, max_value=10**400),
    st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=30), CODE_LIKE)


def deep(depth: int):
    value: object = "bottom"
    for level in range(depth):
        value = [value] if level % 2 else {"k": value}
    return value


JUNK = st.one_of(
    SCALARS,
    st.lists(SCALARS, max_size=4),
    st.dictionaries(st.text(max_size=8), SCALARS, max_size=3),
    st.integers(min_value=1, max_value=120).map(deep),
)


def paths(node, prefix=()):
    yield prefix
    if isinstance(node, dict):
        for key, value in node.items():
            yield from paths(value, prefix + (key,))
    elif isinstance(node, list):
        for index, value in enumerate(node):
            yield from paths(value, prefix + (index,))


def parent_and_key(doc, path):
    node = doc
    for step in path[:-1]:
        node = node[step]
    return node, path[-1]


@st.composite
def mutated_plans(draw):
    doc = json.loads(json.dumps(DEMO))  # a deep copy
    for _ in range(draw(st.integers(min_value=1, max_value=4))):
        candidates = [p for p in paths(doc) if p]
        if not candidates:
            break
        path = draw(st.sampled_from(candidates))
        parent, key = parent_and_key(doc, path)
        action = draw(st.sampled_from(["delete", "replace", "wrap", "rename", "duplicate"]))
        if action == "delete":
            del parent[key]
        elif action == "replace":
            parent[key] = draw(JUNK)
        elif action == "wrap":  # a swapped type: the value inside a list or a mapping
            parent[key] = draw(st.sampled_from([[parent[key]], {"value": parent[key]}]))
        elif action == "rename" and isinstance(parent, dict):
            parent[draw(CODE_LIKE | st.text(max_size=10))] = parent.pop(key)
        elif action == "duplicate" and isinstance(parent, list):
            parent.append(parent[key])
    dumper = getattr(yaml, "CSafeDumper", yaml.SafeDumper)
    return yaml.dump(doc, Dumper=dumper, allow_unicode=True, sort_keys=False)


@st.composite
def mangled_texts(draw):
    text = DEMO_TEXT
    for _ in range(draw(st.integers(min_value=1, max_value=3))):
        start = draw(st.integers(min_value=0, max_value=len(text)))
        end = draw(st.integers(min_value=start, max_value=min(len(text), start + 40)))
        insert = draw(st.text(alphabet=st.sampled_from(list(":-[]{}!&*#|>'\"\t\n ,?%@`\x07\ufeffé年")),
                              max_size=12) | CODE_LIKE)
        text = text[:start] + insert + text[end:]
    return text


def check_never_crashes(path: Path, text: str) -> None:
    path.write_text(text, encoding="utf-8")
    try:
        plan = compile_plan(str(path))
    except Stop as stop:
        assert stop.exit_code == Exit.PLAN_INVALID
        assert stop.problems
        for problem in stop.problems:
            problem.format()
            json.dumps(problem.as_json())
        return
    explain(plan)
    json.dumps(explain_json(plan), allow_nan=False)


def modest(examples: int):
    return settings(max_examples=examples, deadline=None,
                    suppress_health_check=[HealthCheck.function_scoped_fixture,
                                           HealthCheck.too_slow])


@modest(100)
@given(mutated_plans())
def test_mutated_plans_end_in_a_plan_or_in_problems(tmp_path, text):
    check_never_crashes(tmp_path / "plan.yaml", text)


@modest(50)
@given(mangled_texts())
def test_mangled_plan_text_ends_in_a_plan_or_in_problems(tmp_path, text):
    check_never_crashes(tmp_path / "plan.yaml", text)
