"""The well-formed parts of a plan the schema found fault with, for the resolver to check.

One schema error must not hide the rest: a variable with an unknown kind should not keep
the checker from naming an unknown term three analyses later. So when the schema finds
fault, the faulty parts are left out and the resolver checks what remains. The part left
out for a fault is the smallest one the resolver can do without:

- an unknown key: that key alone (the mapping holding it is otherwise checked);
- a fault in one term of a tier, or in one condition of a population: that term or
  condition (the analysis or population stays, to be checked and referred to);
- any other fault inside a variable, a population, an analysis, a decision, an assumption
  or a multiplicity family: that entry, whole;
- a fault in ``study``, ``data`` or ``prespec``, or in the shape of a whole section: the
  section.

The resolver is written for schema-valid plans, so the tree left is validated again and
whatever still fails is left out too (removing the last analysis leaves ``analyses``
empty, say). Absent sections are read as empty. :class:`Broken` records the names of what
was left out, so that a reference to a variable whose kind was misspelt is not reported a
second time as an unknown variable.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

from .load import Mapping, Node, Scalar, Sequence, Tree

# the sections whose entries are left out one by one, and the id space each entry names
ENTRY_SECTIONS = {"variables": "variables", "populations": "populations",
                  "analyses": "analyses", "decisions": "rules", "assumptions": "rules",
                  "multiplicity": None}
_NAMED_BY_KEY = ("variables", "populations")
_ROUNDS = 4  # re-validations before giving up on the resolver (one or two suffice)


@dataclass(frozen=True)
class Fault:
    """Where the schema found fault: ``path`` as jsonschema gives it; ``exact`` when
    leaving out that very key mends it (an unknown key), else the part holding it goes."""

    path: tuple
    exact: bool = False


@dataclass
class Broken:
    """What was left out, by id space: ``variables``, ``populations``, ``analyses`` and
    ``rules`` (decisions and assumptions share one). ``whole`` holds the spaces left out
    entirely, or holding an entry whose name could not be read: any name may be meant."""

    names: dict[str, set] = field(default_factory=dict)
    whole: set = field(default_factory=set)

    def hides(self, space: str, name) -> bool:
        """Whether ``name`` may be one of the parts left out, so that a reference to it is
        not to be reported as unknown."""
        return space in self.whole or name in self.names.get(space, ())

    def count(self, space: str) -> int:
        return len(self.names.get(space, ()))


NOTHING_BROKEN = Broken()


def well_formed(tree: Tree, faults: list[Fault],
                recheck: Callable[[Tree], list[Fault]]) -> tuple[Tree | None, Broken]:
    """The tree without its faulty parts, and what was left out. ``recheck`` gives the
    faults of a tree (validate.faults). None when no schema-valid part remains to check."""
    broken = Broken()
    for _ in range(_ROUNDS):
        tree = _without(tree, faults, broken)
        faults = [f for f in recheck(tree) if not _absent_section(f, tree)]
        if not faults:
            for section, space in (("variables", "variables"), ("analyses", "analyses")):
                if tree.root.get(section) is None:
                    broken.whole.add(space)  # absent: every reference would read as unknown
            return tree, broken
    return None, broken


def _absent_section(fault: Fault, tree: Tree) -> bool:
    """A required top-level section that is absent: the resolver reads it as empty."""
    return fault.path == () and not fault.exact


def _without(tree: Tree, faults: list[Fault], broken: Broken) -> Tree:
    cut: set[tuple] = set()
    for fault in faults:
        part = fault.path if fault.exact else _part(fault.path)
        if not part:
            continue  # the root itself: only a missing section, read as empty
        cut.add(part)
        if not fault.exact:
            _record(tree, part, broken)
    return Tree(_pruned(tree.root, (), cut), tree.source, tree.text)


def _part(path: tuple) -> tuple:
    if _under(path, ("analyses", int, "tiers", int, "add", int)):
        return path[:6]  # one term of a tier: nothing refers to it by name
    if _under(path, ("populations", str, "where", int)):
        return path[:4]  # one condition of a population, which stays to be referred to
    if path and path[0] in ENTRY_SECTIONS and len(path) >= 2:
        return path[:2]
    return path[:1]


def _under(path: tuple, pattern: tuple) -> bool:
    """Whether ``path`` begins as ``pattern`` does: a key equal, an index or name of its type."""
    if len(path) < len(pattern):
        return False
    for step, want in zip(path, pattern):
        if isinstance(want, type):
            if not isinstance(step, want) or isinstance(step, bool):
                return False
        elif step != want:
            return False
    return True


def _record(tree: Tree, part: tuple, broken: Broken) -> None:
    section = part[0]
    space = ENTRY_SECTIONS.get(section)
    if space is None or len(part) > 2:
        return  # study, data, prespec, families, a term, a condition: none is referred to
    if len(part) == 1:
        broken.whole.add(space)
        return
    if section in _NAMED_BY_KEY:
        broken.names.setdefault(space, set()).add(part[1])
        return
    node, _ = tree.find(part)
    name = node.get("id") if isinstance(node, Mapping) else None
    if isinstance(name, Scalar) and isinstance(name.value, str):
        broken.names.setdefault(space, set()).add(name.value)
    else:
        broken.whole.add(space)


def _pruned(node: Node, at: tuple, cut: set[tuple]) -> Node:
    if not any(len(c) > len(at) and c[:len(at)] == at for c in cut):
        return node  # nothing to leave out below here
    if isinstance(node, Mapping):
        kept = {k: _pruned(v, at + (k,), cut) for k, v in node.entries.items()
                if at + (k,) not in cut}
        return Mapping(kept, {k: p for k, p in node.key_places.items() if k in kept},
                       node.place)
    if isinstance(node, Sequence):
        return Sequence(tuple(_pruned(item, at + (i,), cut) for i, item in enumerate(node.items)
                              if at + (i,) not in cut), node.place)
    return node
