"""A small valid plan and helpers for the resolve tests: each test changes one line of it (so
later line numbers stay put) or appends rules, and asserts each problem's message and place."""

from __future__ import annotations

import pytest

from compiler.pipeline import compile_plan
from compiler.problems import Exit, Stop

BASE = """\
prespec: 1
study: {id: trial}
data: {row_id: pid}
variables:
  pid: {kind: identifier}
  y: {kind: continuous, min: 0, max: 100}
  arm: {kind: categorical, levels: [control, low, high]}
  sex: {kind: categorical, levels: [f, m]}
  age: {kind: continuous, min: 18, max: 90}
  smoker: {kind: binary}
  visits: {kind: count}
  event: {kind: binary}
  dose: {kind: continuous, min: 1, max: 50}
  site: {kind: categorical, levels: [north, south]}
populations:
  adults:
    where:
      - {variable: age, at_least: 18}
analyses:
  - id: main
    outcome: y
    family: gaussian
    exposure: arm
    tiers:
      - name: crude
      - name: adjusted
        add: [age, sex]
decisions:
  - {id: H1, analysis: main, test: superiority, level: high}
"""


def write(tmp_path, text: str) -> str:
    path = tmp_path / "plan.yaml"
    path.write_text(text, encoding="utf-8")
    return str(path)


def problems(tmp_path, text: str) -> list[tuple[str, int, int]]:
    with pytest.raises(Stop) as caught:
        compile_plan(write(tmp_path, text))
    assert caught.value.exit_code == Exit.PLAN_INVALID
    return [(p.message, p.place.line, p.place.col) for p in caught.value.problems]


def hints(tmp_path, text: str) -> list[str | None]:
    with pytest.raises(Stop) as caught:
        compile_plan(write(tmp_path, text))
    return [p.hint for p in caught.value.problems]


def at(text: str, line: int, token: str) -> tuple[int, int]:
    """(line, column) of ``token``'s first occurrence on ``line`` of ``text``: where the
    problem must point."""
    return line, text.splitlines()[line - 1].index(token) + 1


def variant(old: str, new: str, text: str = BASE) -> str:
    assert old in text
    return text.replace(old, new, 1)


def with_rules(rules: str) -> str:
    """BASE with its decision list replaced by ``rules`` (lines from 29 on)."""
    return BASE.replace("  - {id: H1, analysis: main, test: superiority, level: high}\n", rules)
