"""The loader: a placed source tree, and every unsafe or broken file refused with its place."""

from __future__ import annotations

import tracemalloc

import pytest

from compiler import load
from compiler.load import Mapping, Scalar, Sequence
from compiler.problems import Exit, Stop


def write(tmp_path, text: str | bytes, name: str = "plan.yaml") -> str:
    path = tmp_path / name
    if isinstance(text, bytes):
        path.write_bytes(text)
    else:
        path.write_text(text, encoding="utf-8")
    return str(path)


def refusal(path: str) -> list[tuple[str, int, int]]:
    with pytest.raises(Stop) as caught:
        load.load(path)
    assert caught.value.exit_code == Exit.PLAN_INVALID
    return [(p.message, p.place.line if p.place else 0, p.place.col if p.place else 0)
            for p in caught.value.problems]


# ---- the tree ---------------------------------------------------------------------------------


def test_every_key_and_value_keeps_its_line_and_column(tmp_path):
    tree = load.load(write(tmp_path, "prespec: 1\nstudy:\n  id: walk-bp\n  tags: [a, b]\n"))
    study = tree.root.get("study")
    assert isinstance(study, Mapping)
    assert (study.key_places["id"].line, study.key_places["id"].col) == (3, 3)
    assert (study.get("id").place.line, study.get("id").place.col) == (3, 7)
    second = study.get("tags").items[1]
    assert isinstance(second, Scalar) and (second.place.line, second.place.col) == (4, 13)


def test_places_name_the_file_as_given(tmp_path):
    path = write(tmp_path, "a: 1\n")
    assert load.load(path).root.get("a").place.file == path


def test_to_python_gives_plain_values(tmp_path):
    tree = load.load(write(tmp_path, "a: [1, 2.5, x]\nb: {c: null}\n"))
    assert tree.to_python() == {"a": [1, 2.5, "x"], "b": {"c": None}}


def test_yes_no_on_off_and_NA_stay_text(tmp_path):
    # YAML 1.1 would read yes/no/on/off as booleans; level names such as `no` must survive
    tree = load.load(write(tmp_path, "levels: [yes, no, on, off, NA, y, n]\n"))
    assert tree.to_python() == {"levels": ["yes", "no", "on", "off", "NA", "y", "n"]}


def test_true_false_and_null_are_typed(tmp_path):
    tree = load.load(write(tmp_path, "a: true\nb: False\nc: ~\nd:\n"))
    assert tree.to_python() == {"a": True, "b": False, "c": None, "d": None}


def test_quoted_scalars_are_always_text(tmp_path):
    tree = load.load(write(tmp_path, "a: \"1\"\nb: 'true'\nc: \"null\"\n"))
    assert tree.to_python() == {"a": "1", "b": "true", "c": "null"}


def test_numbers_keep_the_text_they_were_written_as(tmp_path):
    tree = load.load(write(tmp_path, "a: 01\nb: 1.50\nc: 1e3\n"))
    a, b, c = (tree.root.get(k) for k in "abc")
    assert (a.value, a.text) == (1, "01")
    assert (b.value, b.text) == (1.5, "1.50")
    assert c.value == 1000.0


def test_special_floats_and_hex_stay_text(tmp_path):
    # .inf/.nan would let a non-finite number into the plan; hex and octal are not JSON numbers
    tree = load.load(write(tmp_path, "a: .inf\nb: .nan\nc: 0x10\nd: 0o7\n"))
    assert tree.to_python() == {"a": ".inf", "b": ".nan", "c": "0x10", "d": "0o7"}


def test_a_few_aliases_are_expanded(tmp_path):
    tree = load.load(write(tmp_path, "a: &x [1, 2]\nb: *x\n"))
    assert tree.to_python() == {"a": [1, 2], "b": [1, 2]}


def test_a_byte_order_mark_is_accepted(tmp_path):
    assert load.load(write(tmp_path, b"\xef\xbb\xbfa: 1\n")).to_python() == {"a": 1}


def test_non_ascii_keys_load(tmp_path):
    tree = load.load(write(tmp_path, "größe: 1\nâge: 2\n"))
    assert tree.to_python() == {"größe": 1, "âge": 2}


# ---- refusals ---------------------------------------------------------------------------------


def test_a_list_at_the_root_is_refused(tmp_path):
    assert refusal(write(tmp_path, "- a\n- b\n")) == [
        ("the plan must be a mapping of keys (prespec, study, ...), not a list", 1, 1)]


def test_a_single_value_at_the_root_is_refused(tmp_path):
    assert refusal(write(tmp_path, "\n  hello\n")) == [
        ("the plan must be a mapping of keys (prespec, study, ...), not a single value", 2, 3)]


def test_an_empty_file_is_refused(tmp_path):
    assert refusal(write(tmp_path, "")) == [
        ("the plan is empty; expected a mapping such as `prespec: 1`", 1, 1)]


def test_a_duplicate_key_points_at_the_second_and_names_the_first(tmp_path, composer):
    text = "study:\n  id: a\n  title: t\n  id: b\n"
    assert refusal(write(tmp_path, text)) == [("duplicate key `id` (first given at line 2)", 4, 3)]


def test_every_duplicate_key_is_reported(tmp_path):
    text = "a: 1\na: 2\nb: {x: 1, x: 2}\n"
    assert refusal(write(tmp_path, text)) == [
        ("duplicate key `a` (first given at line 1)", 2, 1),
        ("duplicate key `x` (first given at line 3)", 3, 11)]


def test_an_explicit_local_tag_is_refused(tmp_path, composer):
    assert refusal(write(tmp_path, "a: 1\nb: !secret value\n")) == [
        ("YAML tag `!secret` is not allowed", 2, 4)]


def test_a_python_object_tag_is_refused(tmp_path, composer):
    text = "a: !!python/object/apply:os.system ['echo hi']\n"
    assert refusal(write(tmp_path, text)) == [
        ("YAML tag `!!python/object/apply:os.system` is not allowed", 1, 4)]


def test_a_standard_tag_is_refused_too(tmp_path):
    assert refusal(write(tmp_path, "a: !!str 1\n")) == [("YAML tag `!!str` is not allowed", 1, 4)]


def test_a_merge_key_is_refused(tmp_path):
    text = "base: &b {x: 1}\nother:\n  <<: *b\n"
    assert refusal(write(tmp_path, text)) == [("merge keys (`<<`) are not supported", 3, 3)]


def test_a_list_as_a_key_is_refused(tmp_path):
    assert refusal(write(tmp_path, "? [a, b]\n: 1\n")) == [
        ("a key must be a plain name, not a list or mapping", 1, 3)]


BILLION_LAUGHS = "".join(
    [f'a0: &a0 ["lol", "lol", "lol", "lol", "lol", "lol", "lol", "lol", "lol"]\n']
    + [f"a{i}: &a{i} [{', '.join([f'*a{i - 1}'] * 9)}]\n" for i in range(1, 10)])


def test_an_alias_bomb_is_refused_at_its_first_alias(tmp_path, composer):
    path = write(tmp_path, BILLION_LAUGHS)
    problems = refusal(path)
    assert len(problems) == 1
    message, line, col = problems[0]
    # a0 holds 1 + 9 nodes, a_i holds 1 + 9 × a_(i-1); with the root and its 10 keys that is
    # 11 + (10 + 91 + 820 + … + 3922632451) = 4412961516 nodes
    assert message.startswith("aliases would expand the plan to 4412961516 values")
    assert (line, col) == (2, 10)


def test_an_alias_bomb_is_refused_without_expanding_it(tmp_path):
    path = write(tmp_path, BILLION_LAUGHS)
    tracemalloc.start()
    try:
        with pytest.raises(Stop):
            load.load(path)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < 5 * 1024 * 1024  # the expanded plan would need tens of gigabytes


def test_too_many_aliases_are_refused(tmp_path, composer):
    text = "a: &x 1\nb: [" + ", ".join(["*x"] * (load.MAX_ALIASES + 1)) + "]\n"
    problems = refusal(write(tmp_path, text))
    assert problems == [(f"more than {load.MAX_ALIASES} aliases", 2, 5 + 4 * load.MAX_ALIASES)]


def test_a_recursive_alias_is_refused(tmp_path, composer):
    assert refusal(write(tmp_path, "a: &x [1, *x]\n")) == [
        ("alias *x refers to the node that contains it", 1, 11)]


def test_deep_nesting_is_refused(tmp_path, composer):
    depth = load.MAX_DEPTH + 10
    problems = refusal(write(tmp_path, "a: " + "[" * depth + "]" * depth + "\n"))
    assert problems == [(f"the plan is nested more than {load.MAX_DEPTH} levels deep", 1,
                         3 + load.MAX_DEPTH)]


def test_an_oversize_file_is_refused_before_parsing(tmp_path):
    text = "a: [" + "1, " * (load.MAX_BYTES // 3) + "1]\n"
    problems = refusal(write(tmp_path, text))
    assert problems == [("the plan file is larger than 1024 KiB; a plan is a short text file", 1, 1)]


def test_invalid_utf8_names_the_byte_and_its_place(tmp_path):
    path = write(tmp_path, b"a: 1\nb: caf\xe9\n")
    assert refusal(path) == [("the plan is not valid UTF-8: byte 0xe9 at byte offset 11", 2, 7)]


def test_invalid_utf8_column_counts_characters_not_bytes(tmp_path):
    path = write(tmp_path, "b: ü".encode() + b"\xff\n")
    assert refusal(path) == [("the plan is not valid UTF-8: byte 0xff at byte offset 5", 1, 5)]


@pytest.fixture(params=["libyaml", "python"])
def composer(request, monkeypatch):
    """Run a test with libyaml's event parser (when built) and with PyYAML's own."""
    if request.param == "python":
        monkeypatch.setattr(load, "_Composer", load._PythonComposer)
    return request.param


def test_both_parsers_give_the_same_tree_and_places(monkeypatch):
    def shape(node):
        if isinstance(node, Mapping):
            return (node.place, [(k, node.key_places[k], shape(v)) for k, v in node.entries.items()])
        if isinstance(node, Sequence):
            return (node.place, [shape(item) for item in node.items])
        return (node.place, node.value, node.text)

    fast = shape(load.load("plans/dusk-sleep.yaml").root)
    monkeypatch.setattr(load, "_Composer", load._PythonComposer)
    assert shape(load.load("plans/dusk-sleep.yaml").root) == fast


def test_a_syntax_error_is_reported_at_its_mark(tmp_path, composer):
    ((message, line, col),) = refusal(write(tmp_path, "a: [1, 2\nb: 3\n"))
    # the wording after "while parsing a flow sequence" is the parser's own
    assert message.startswith("YAML syntax error: while parsing a flow sequence")
    assert (line, col) == (2, 2)


def test_a_tab_indent_is_a_syntax_error(tmp_path):
    problems = refusal(write(tmp_path, "a:\n\tb: 1\n"))
    assert len(problems) == 1 and problems[0][0].startswith("YAML syntax error")
    assert problems[0][1:] == (2, 1)


def test_a_control_character_is_refused_at_its_place(tmp_path, composer):
    assert refusal(write(tmp_path, "a: 1\nb: é\x07y\n")) == [
        ("the plan holds the control character U+0007, which YAML does not allow", 2, 5)]


def test_a_number_too_large_for_a_float_is_refused(tmp_path):
    assert refusal(write(tmp_path, "a: 1\nb: 1e999\n")) == [("the number 1e999 is out of range", 2, 4)]


def test_a_number_with_too_many_digits_is_refused(tmp_path):
    digits = "9" * (load.MAX_NUMBER_DIGITS + 1)
    problems = refusal(write(tmp_path, f"a: {digits}\n"))
    assert problems == [(f"the number {digits[:20]}… has more than {load.MAX_NUMBER_DIGITS} digits",
                         1, 4)]


def test_a_missing_file_is_refused_with_its_path(tmp_path):
    path = str(tmp_path / "nowhere.yaml")
    with pytest.raises(Stop) as caught:
        load.load(path)
    (problem,) = caught.value.problems
    assert problem.message == f"{path}: cannot read the plan: No such file or directory"


def test_several_documents_are_refused(tmp_path, composer):
    problems = refusal(write(tmp_path, "a: 1\n---\nb: 2\n"))
    assert problems == [("YAML syntax error: expected a single document in the stream but "
                         "found another document", 2, 1)]
