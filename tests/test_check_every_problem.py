"""One schema error must not hide the rest: `check` reports the schema's problems, then the
resolver's on every part of the plan the schema found no fault with, each at file:line:col,
and never reports again as unknown what the schema already faulted."""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest
import yaml

from compiler.cli import main
from compiler.pipeline import compile_plan
from compiler.problems import Exit, Stop

DEMO = Path(__file__).resolve().parent.parent / "plans" / "dusk-sleep.yaml"

# Line numbers matter below: each problem is asserted at its line and column.
SEVERAL = """\
prespec: 1
study: {id: trial}
variables:
  y: {kind: continuous}
  cured: {kind: binomial}
  arm: {kind: categorical, levels: [a, b]}
  age: {kind: continuous, colour: red}
  site: {kind: categorical}
analyses:
  - id: main
    outcome: y
    family: gaussian
    exposure: arm
    tiers:
      - name: crude
      - name: adjusted
        add: [agee, {power: age, degree: 2}]
  - id: cure
    outcome: cured
    family: binomial
    exposure: arm
    tiers:
      - name: crude
      - name: adjusted
        add: [age, site]
  - id: broken
    outcome: y
    family: gausian
    exposure: arm
    tiers: [{name: crude}]
decisions:
  - {id: N1, analysis: main, test: non-inferiority, direction: higher, margin: 2}
  - {id: N2, analysis: cure, test: non-inferiority, direction: higher, margin: -0.5}
  - {id: T1, analysis: main, test: superiority, tier: ful}
  - {id: B1, analysis: broken, test: superiority}
  - {id: Q1, analysis: main, test: superiority, alpha: "0.05"}
multiplicity:
  - {method: holm, alpha: 0.05, decisions: [N1, Q1, T9]}
"""

EXPECTED = [  # (line, the culprit's text on it, words the message holds), schema problems first
    (5, "binomial", "`kind` must be one of"),
    (7, "colour", "unknown key `colour`"),
    (28, "gausian", "`family` must be one of"),
    (36, '"0.05"', "`alpha` must be a number"),
    (8, "{kind: categorical}", "categorical variable `site` needs `levels`"),
    (17, "agee", "unknown variable `agee`"),
    (32, "2}", "margin on the difference scale must be below 0, not 2"),
    (33, "-0.5", "a ratio margin must be positive, not -0.5"),
    (34, "ful}", "`ful` is not a tier of analysis `main`"),
    (38, "T9", "unknown decision `T9`"),
]
LINES = SEVERAL.splitlines()
PLACES = [(line, LINES[line - 1].index(culprit) + 1) for line, culprit, _ in EXPECTED]


@pytest.fixture
def several(tmp_path) -> Path:
    path = tmp_path / "plan.yaml"
    path.write_text(SEVERAL, encoding="utf-8")
    return path


def test_every_problem_is_printed_with_its_place_schema_first(several, capsys):
    assert main(["check", str(several)]) == Exit.PLAN_INVALID
    err = capsys.readouterr().err
    heads = [line for line in err.splitlines() if not line.startswith("  hint:")]
    places = [re.match(rf"{re.escape(str(several))}:(\d+):(\d+): error: (.*)", h) for h in heads]
    assert all(places), heads
    found = [(int(m[1]), int(m[2]), m[3]) for m in places]
    assert len(found) == len(EXPECTED), "\n".join(heads)
    for (_, _, words), place, (line, col, message) in zip(EXPECTED, PLACES, found):
        assert place == (line, col) and words in message, (place, line, col, message)


def test_the_kind_binomial_gets_the_family_hint(several, capsys):
    main(["check", str(several)])
    err = capsys.readouterr().err
    assert "hint: `binomial` is a family; the kind of a 0/1 variable is `binary`" in err


def test_what_the_schema_faulted_is_not_reported_again(several, capsys):
    main(["check", str(several)])
    err = capsys.readouterr().err
    assert "`cured`" not in err.replace("`kind` must be", "")  # the outcome of `cure`
    assert "unknown analysis `broken`" not in err  # B1 reads the faulted analysis
    messages = [line for line in err.splitlines() if not line.startswith("  hint:")]
    # `age` kept its entry (only the unknown key was left out): its power term resolved
    assert [m for m in messages if "`age`" in m] == [m for m in messages if "`colour`" in m]


def test_json_lists_every_problem_too(several, capsys):
    main(["--json", "check", str(several)])
    problems = json.loads(capsys.readouterr().out)["problems"]
    assert [(p["line"], p["col"]) for p in problems] == PLACES


# Each entry of the demo plan broken in its shape alone: the schema's one problem must be the
# only one, however much of the plan refers to the entry (the demo resolves cleanly).
def _entries():
    demo = yaml.safe_load(DEMO.read_text(encoding="utf-8"))
    spoil = {"variables": ("kind", "binomial"), "populations": ("where", "age"),
             "analyses": ("family", "binary"), "decisions": ("test", "superior"),
             "assumptions": ("check", "variance"), "multiplicity": ("method", "holmes")}
    for section, (key, bad) in spoil.items():
        names = list(demo[section]) if isinstance(demo[section], dict) else range(
            len(demo[section]))
        for name in names:
            yield section, name, key, bad


@pytest.mark.parametrize("section, name, key, bad", list(_entries()))
def test_an_entry_broken_in_shape_gives_one_problem_only(tmp_path, section, name, key, bad):
    document = yaml.safe_load(DEMO.read_text(encoding="utf-8"))
    document[section][name][key] = bad
    path = tmp_path / "plan.yaml"
    path.write_text(yaml.safe_dump(document, sort_keys=False), encoding="utf-8")
    with pytest.raises(Stop) as caught:
        compile_plan(path)
    problems = [p.format() for p in caught.value.problems]
    assert len(problems) == 1, problems


@pytest.mark.parametrize("section", ["variables", "analyses", "populations", "decisions"])
def test_a_whole_section_of_the_wrong_shape_hides_what_refers_to_it(tmp_path, section):
    document = yaml.safe_load(DEMO.read_text(encoding="utf-8"))
    document[section] = "see the appendix"
    path = tmp_path / "plan.yaml"
    path.write_text(yaml.safe_dump(document, sort_keys=False), encoding="utf-8")
    with pytest.raises(Stop) as caught:
        compile_plan(path)
    assert len(caught.value.problems) == 1, [p.format() for p in caught.value.problems]


def test_a_missing_section_is_reported_once(tmp_path):
    document = yaml.safe_load(DEMO.read_text(encoding="utf-8"))
    del document["variables"]
    path = tmp_path / "plan.yaml"
    path.write_text(yaml.safe_dump(document, sort_keys=False), encoding="utf-8")
    with pytest.raises(Stop) as caught:
        compile_plan(path)
    assert [p.code for p in caught.value.problems] == ["missing-key"]


def test_the_resolver_still_checks_a_mapping_whose_unknown_key_was_left_out(tmp_path):
    document = yaml.safe_load(DEMO.read_text(encoding="utf-8"))
    document["analyses"][0]["colour"] = "red"  # an unknown key: only it is left out
    document["analyses"][0]["report_tier"] = "fulll"  # a resolver problem in the same entry
    path = tmp_path / "plan.yaml"
    path.write_text(yaml.safe_dump(document, sort_keys=False), encoding="utf-8")
    with pytest.raises(Stop) as caught:
        compile_plan(path)
    assert [p.code for p in caught.value.problems] == ["unknown-key", "unknown-tier"]


def test_a_malformed_term_leaves_the_rest_of_its_analysis_checked(tmp_path):
    document = yaml.safe_load(DEMO.read_text(encoding="utf-8"))
    full = document["analyses"][0]["tiers"][2]["add"]
    full[2] = {"power": "age", "degre": 2}  # a misspelt key in one term...
    full[3] = "screen_hour"  # ...and an unknown variable in the next
    document["decisions"][0]["level"] = "coachd"  # a decision on the same analysis
    path = tmp_path / "plan.yaml"
    path.write_text(yaml.safe_dump(document, sort_keys=False), encoding="utf-8")
    with pytest.raises(Stop) as caught:
        compile_plan(path)
    codes = [p.code for p in caught.value.problems]
    assert set(codes[:2]) == {"unknown-key", "missing-key"}  # the term's, from the schema
    assert codes[2:] == ["unknown-variable", "unknown-level"]  # the resolver's, after


def test_a_malformed_condition_leaves_its_population_to_be_referred_to(tmp_path):
    document = yaml.safe_load(DEMO.read_text(encoding="utf-8"))
    document["populations"]["per-protocol"]["where"][1] = {"variable": "sessions_attended",
                                                          "at_lest": 2}
    document["populations"]["per-protocol"]["where"].append({"variable": "agee", "below": 90})
    path = tmp_path / "plan.yaml"
    path.write_text(yaml.safe_dump(document, sort_keys=False), encoding="utf-8")
    with pytest.raises(Stop) as caught:
        compile_plan(path)
    codes = [p.code for p in caught.value.problems]
    assert codes[-1] == "unknown-variable" and "unknown-population" not in codes, codes
