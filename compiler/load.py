"""The first pass: plan file bytes → a source tree that remembers where every value came from.

YAML is read with PyYAML's safe reader, parser and composer only; nothing is constructed,
so no tag can turn into a Python object. The composer's nodes are copied into our own small
tree (:class:`Mapping`, :class:`Sequence`, :class:`Scalar`) with a 1-based line:col
:class:`~compiler.problems.Place` on every key and every value.

Scalars are typed by our own rules, not YAML 1.1's: a plain scalar is an int, a float,
null, true or false only when it is spelt like one (JSON-style); everything else — including
``yes``, ``no``, ``on``, ``off``, ``NA``, ``.inf`` and ``0x10`` — stays a string, and a
quoted scalar is always a string. Level names such as ``no`` or ``off`` are thus safe.

Refused, each with its place: a file over :data:`MAX_BYTES`, invalid UTF-8, YAML syntax
errors, any explicit tag, merge keys, duplicate keys, a root that is not a mapping,
nesting deeper than :data:`MAX_DEPTH`, and aliases beyond :data:`MAX_ALIASES` or whose
expansion would add more than :data:`MAX_ALIAS_EXPANSION` nodes (the "billion laughs"
is caught on the composed graph, before anything is expanded).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterator, Union

import yaml
from yaml.composer import Composer
from yaml.events import AliasEvent, CollectionStartEvent, ScalarEvent
from yaml.nodes import MappingNode, ScalarNode, SequenceNode
from yaml.parser import Parser
from yaml.reader import Reader
from yaml.resolver import BaseResolver
from yaml.scanner import Scanner

from .files import Refused, read_regular
from .problems import Exit, Place, Problem, Stop

MAX_BYTES = 1024 * 1024
MAX_DEPTH = 64
MAX_ALIASES = 100
MAX_ALIAS_EXPANSION = 10_000
MAX_NUMBER_DIGITS = 300

_INT = re.compile(r"[-+]?[0-9]+\Z")
_FLOAT = re.compile(r"[-+]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][-+]?[0-9]+)?\Z")
_NULL = {"", "~", "null", "Null", "NULL"}
_BOOL = {"true": True, "True": True, "TRUE": True, "false": False, "False": False, "FALSE": False}


# ---------------------------------------------------------------------------------------------
# The source tree


@dataclass(eq=False)
class Scalar:
    value: object  # str, int, float, bool or None
    text: str  # the scalar as written (without quotes)
    place: Place
    quoted: bool = False

    def to_python(self) -> object:
        return self.value

    def walk(self) -> Iterator["Node"]:
        yield self


@dataclass(eq=False)
class Sequence:
    items: tuple["Node", ...]
    place: Place

    def to_python(self) -> list:
        return [item.to_python() for item in self.items]

    def walk(self) -> Iterator["Node"]:
        yield self
        for item in self.items:
            yield from item.walk()


@dataclass(eq=False)
class Mapping:
    """Keys are strings (the key as written); ``key_places`` holds where each key stands."""

    entries: dict[str, "Node"]
    key_places: dict[str, Place]
    place: Place

    def get(self, key: str) -> "Node | None":
        return self.entries.get(key)

    def to_python(self) -> dict:
        return {key: node.to_python() for key, node in self.entries.items()}

    def walk(self) -> Iterator["Node"]:
        yield self
        for node in self.entries.values():
            yield from node.walk()


Node = Union[Mapping, Sequence, Scalar]


@dataclass(eq=False)
class Tree:
    """A loaded plan: the root mapping and the path it was read from (as given)."""

    root: Mapping
    source: str
    text: str = field(repr=False, default="")

    def to_python(self) -> dict:
        return self.root.to_python()

    def find(self, path) -> tuple[Node, Place]:
        """The deepest node along ``path`` (keys and indices, as jsonschema gives them)."""
        node: Node = self.root
        for step in path:
            if isinstance(node, Mapping) and isinstance(step, str) and step in node.entries:
                node = node.entries[step]
            elif (isinstance(node, Sequence) and isinstance(step, int)
                  and 0 <= step < len(node.items)):
                node = node.items[step]
            else:
                break
        return node, node.place


# ---------------------------------------------------------------------------------------------
# Loading


class _Refused(Exception):
    """A problem that stops composing at once (too deep, too many aliases, recursive alias)."""

    def __init__(self, message: str, mark, hint: str | None = None, code: str = ""):
        self.message, self.mark, self.hint, self.code = message, mark, hint, code


class _Watch:
    """Watches tags, aliases and depth as PyYAML's composer builds each node."""

    def _start_watching(self) -> None:
        self.tags: list = []  # (tag, mark) of every explicit tag seen
        self.aliases = 0
        self.first_alias = None  # the mark of the first alias, where an alias bomb is reported
        self.depth = 0
        self.open_anchors: set[str] = set()

    def compose_node(self, parent, index):
        event = self.peek_event()
        if isinstance(event, AliasEvent):
            self.aliases += 1
            self.first_alias = self.first_alias or event.start_mark
            if event.anchor in self.open_anchors:
                raise _Refused(f"alias *{event.anchor} refers to the node that contains it",
                               event.start_mark, code="recursive-alias")
            if self.aliases > MAX_ALIASES:
                raise _Refused(f"more than {MAX_ALIASES} aliases", event.start_mark,
                               hint="write the values out instead of repeating them by alias",
                               code="too-many-aliases")
            return super().compose_node(parent, index)
        if isinstance(event, (ScalarEvent, CollectionStartEvent)) and event.tag is not None:
            self.tags.append((event.tag, event.start_mark))
        self.depth += 1
        if self.depth > MAX_DEPTH:
            raise _Refused(f"the plan is nested more than {MAX_DEPTH} levels deep",
                           event.start_mark, code="too-deep")
        if event.anchor is not None:
            self.open_anchors.add(event.anchor)
        try:
            return super().compose_node(parent, index)
        finally:
            self.depth -= 1
            if event.anchor is not None:
                self.open_anchors.discard(event.anchor)


class _PythonComposer(_Watch, Reader, Scanner, Parser, Composer, BaseResolver):
    reader_offsets_in_bytes = False

    def __init__(self, text: str):
        Reader.__init__(self, text)
        Scanner.__init__(self)
        Parser.__init__(self)
        Composer.__init__(self)
        BaseResolver.__init__(self)
        self._start_watching()


try:  # libyaml's event parser when present: ten times faster, the same events and marks
    from yaml._yaml import CParser
except ImportError:  # pragma: no cover - PyYAML built without libyaml
    _Composer = _PythonComposer
else:
    class _Composer(_Watch, CParser, Composer, BaseResolver):  # type: ignore[no-redef]
        reader_offsets_in_bytes = True  # libyaml reports a ReaderError's offset in UTF-8 bytes
        get_single_node = Composer.get_single_node  # compose in Python, so _Watch sees it all

        def __init__(self, text: str):
            CParser.__init__(self, text)
            Composer.__init__(self)
            BaseResolver.__init__(self)
            self._start_watching()


def load(path: str | Path) -> Tree:
    """Read the plan at ``path`` into a :class:`Tree`; raise Stop (exit 2) when it is unfit."""
    source = str(path)
    data = _read_bytes(source)
    text = _decode(data, source)
    graph = _compose(text, source)
    return Tree(_convert_root(graph, source), source, text)


def _stop(source: str, message: str, line: int = 1, col: int = 1, *, hint: str | None = None,
          code: str = "") -> Stop:
    return Stop([Problem(message, Place(source, line, col), hint=hint, code=code)],
                Exit.PLAN_INVALID)


def _place(source: str, mark) -> Place:
    return Place(source, mark.line + 1, mark.column + 1)


def plan_bytes(path: str | Path, missing_ok: bool = False) -> bytes:
    """The plan file's bytes, read as the loader reads them (a regular file of at most
    MAX_BYTES); with ``missing_ok``, b"" for a file the loader will refuse with its reason."""
    try:
        return _read_bytes(str(path))
    except Stop:
        if missing_ok:
            return b""
        raise


def _read_bytes(source: str) -> bytes:
    try:
        data = read_regular(source, MAX_BYTES)
    except Refused as exc:
        if "larger than" in exc.strerror:
            raise _stop(source, f"the plan file is larger than {MAX_BYTES // 1024} KiB; "
                                "a plan is a short text file", code="too-large") from None
        raise Stop([Problem(f"{source}: cannot read the plan: {exc.strerror}",
                            hint="give the path of the plan file itself", code="unreadable")],
                   Exit.PLAN_INVALID) from None
    except OSError as exc:
        reason = exc.strerror or type(exc).__name__
        raise Stop([Problem(f"{source}: cannot read the plan: {reason}", code="unreadable")],
                   Exit.PLAN_INVALID) from None
    return data


def _decode(data: bytes, source: str) -> str:
    if data.startswith(b"\xef\xbb\xbf"):
        data = data[3:]
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        before = data[:exc.start]
        line = before.count(b"\n") + 1
        col = len(before[before.rfind(b"\n") + 1:].decode("utf-8", "replace")) + 1
        raise _stop(source, f"the plan is not valid UTF-8: byte 0x{data[exc.start]:02x} "
                            f"at byte offset {exc.start}",
                    line, col, hint="save the plan as UTF-8", code="not-utf8") from None


def _compose(text: str, source: str):
    composer = None
    try:
        composer = _Composer(text)
        graph = composer.get_single_node()
    except _Refused as refused:
        raise _stop(source, refused.message, refused.mark.line + 1, refused.mark.column + 1,
                    hint=refused.hint, code=refused.code) from None
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        message = " ".join(part for part in (exc.context, exc.problem) if part) or "unreadable"
        line, col = (mark.line + 1, mark.column + 1) if mark else (1, 1)
        raise _stop(source, f"YAML syntax error: {message}", line, col,
                    code="yaml-syntax") from None
    except yaml.reader.ReaderError as exc:
        position = exc.position
        if _Composer.reader_offsets_in_bytes:
            position = len(text.encode("utf-8")[:position].decode("utf-8", "ignore"))
        before = text[:position]
        line, col = before.count("\n") + 1, position - (before.rfind("\n") + 1) + 1
        raise _stop(source, f"the plan holds the control character U+{exc.character:04X}, "
                            "which YAML does not allow", line, col, code="yaml-syntax") from None
    except yaml.YAMLError as exc:
        raise _stop(source, f"YAML syntax error: {exc}", code="yaml-syntax") from None
    finally:
        if composer is not None:
            composer.dispose()
    if composer.tags:
        raise Stop([Problem(f"YAML tag `{tag.replace('tag:yaml.org,2002:', '!!')}` is not allowed",
                            _place(source, mark),
                            hint="plans are plain data: remove the tag", code="yaml-tag")
                    for tag, mark in composer.tags], Exit.PLAN_INVALID)
    if graph is not None and composer.aliases:
        _check_alias_expansion(graph, _place(source, composer.first_alias))
    return graph


def _check_alias_expansion(graph, first_alias: Place) -> None:
    """Count the nodes the tree would have with aliases expanded, without expanding them."""
    sizes: dict[int, int] = {}
    stack = [(graph, False)]
    while stack:  # iterative post-order over the composed graph, each node once
        node, done = stack.pop()
        if id(node) in sizes:
            continue
        children = _children(node)
        if done:
            sizes[id(node)] = 1 + sum(sizes[id(child)] for child in children)
            continue
        stack.append((node, True))
        stack.extend((child, False) for child in children if id(child) not in sizes)
    expanded, unique = sizes[id(graph)], len(sizes)
    if expanded - unique > MAX_ALIAS_EXPANSION:
        raise _stop(first_alias.file, f"aliases would expand the plan to {expanded} values "
                    f"(more than {MAX_ALIAS_EXPANSION} beyond the {unique} written)",
                    first_alias.line, first_alias.col,
                    hint="write the values out instead of nesting aliases", code="alias-bomb")


def _children(node) -> list:
    if isinstance(node, SequenceNode):
        return list(node.value)
    if isinstance(node, MappingNode):
        return [part for pair in node.value for part in pair]
    return []


class _Problems(list):
    def add(self, message: str, place: Place, hint: str | None = None, code: str = "") -> None:
        self.append(Problem(message, place, hint=hint, code=code))


def _convert_root(graph, source: str) -> Mapping:
    if graph is None:
        raise _stop(source, "the plan is empty; expected a mapping such as `prespec: 1`",
                    code="not-a-mapping")
    if not isinstance(graph, MappingNode):
        what = "a list" if isinstance(graph, SequenceNode) else "a single value"
        raise _stop(source, f"the plan must be a mapping of keys (prespec, study, ...), not {what}",
                    *_line_col(graph), code="not-a-mapping")
    problems = _Problems()
    root = _convert(graph, source, problems)
    if problems:
        raise Stop(problems, Exit.PLAN_INVALID)
    assert isinstance(root, Mapping)
    return root


def _line_col(node) -> tuple[int, int]:
    return node.start_mark.line + 1, node.start_mark.column + 1


def _convert(node, source: str, problems: _Problems) -> Node:
    place = _place(source, node.start_mark)
    if isinstance(node, ScalarNode):
        return _scalar(node, place, problems)
    if isinstance(node, SequenceNode):
        return Sequence(tuple(_convert(item, source, problems) for item in node.value), place)
    entries: dict[str, Node] = {}
    key_places: dict[str, Place] = {}
    for key_node, value_node in node.value:
        key_place = _place(source, key_node.start_mark)
        if not isinstance(key_node, ScalarNode):
            problems.add("a key must be a plain name, not a list or mapping", key_place,
                         code="complex-key")
            continue
        key = key_node.value
        if key in _NULL and not key_node.style:
            problems.add(f"the key `{key}` is null in YAML, not a name" if key else
                         "a key is missing before the colon", key_place,
                         hint=f'quote it ("{key}") if it is a name' if key else None,
                         code="null-key")
            continue
        if key == "<<" and not key_node.style:
            problems.add("merge keys (`<<`) are not supported", key_place,
                         hint="write the keys out in full", code="merge-key")
            continue
        if key in entries:
            first = key_places[key]
            problems.add(f"duplicate key `{key}` (first given at line {first.line})", key_place,
                         code="duplicate-key")
            continue
        key_places[key] = key_place
        entries[key] = _convert(value_node, source, problems)
    return Mapping(entries, key_places, place)


def reads_as_text(text: str) -> bool:
    """Whether ``text`` written without quotes would be a string (not null, a boolean or a
    number): a quoted scalar for which this is false is shown with its quotes in messages."""
    return text not in _NULL and text not in _BOOL and not _FLOAT.match(text)


def _scalar(node: ScalarNode, place: Place, problems: _Problems) -> Scalar:
    text = node.value
    if node.style:  # quoted or block scalars are always strings
        return Scalar(text, text, place, quoted=True)
    if text in _NULL:
        return Scalar(None, text, place)
    if text in _BOOL:
        return Scalar(_BOOL[text], text, place)
    if _FLOAT.match(text):
        digits = sum(ch.isdigit() for ch in text)
        if digits > MAX_NUMBER_DIGITS:
            problems.add(f"the number {text[:20]}… has more than {MAX_NUMBER_DIGITS} digits",
                         place, code="number-out-of-range")
            return Scalar(text, text, place)
        value: float | int = int(text) if _INT.match(text) else float(text)
        if not math.isfinite(float(value)):
            problems.add(f"the number {text} is out of range", place, code="number-out-of-range")
            return Scalar(text, text, place)
        return Scalar(value, text, place)
    return Scalar(text, text, place)
