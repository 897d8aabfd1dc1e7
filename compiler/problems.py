"""Problems as values: every pass reports what it found, each finding with its place.

A plan problem prints in the GNU form ``PATH:LINE:COL: error: message``; a data-contract
finding prints as ``data: COLUMN: message``. Passes collect problems and raise them together
as one :class:`Stop`, so the user sees every problem in one go.
"""

from __future__ import annotations

import unicodedata
from dataclasses import dataclass, field
from enum import IntEnum
from typing import Iterable, Literal

Severity = Literal["error", "warning"]
LISTED = 10  # names a message or the report shows of a longer list (results.json has all)


class Exit(IntEnum):
    """Exit codes of the command line (binding: see DEVELOPERS.md)."""

    OK = 0
    INTERNAL = 1
    PLAN_INVALID = 2
    DATA_CONTRACT = 3
    LOCK = 4
    NOT_INTACT = 5
    # a rehearsal whose plan would not decide: a tier that cannot be fitted or a rule left
    # undetermined on the rehearsal data (the bundle is still written: it is the evidence)
    WOULD_NOT_DECIDE = 6
    # `prespec qualify`: a reference check missed its tolerance (the bundle is still written)
    QUALIFICATION_MISSED = 7


@dataclass(frozen=True)
class Place:
    """Where in a plan file a value came from (1-based line and column)."""

    file: str
    line: int
    col: int

    def __str__(self) -> str:
        return f"{self.file}:{self.line}:{self.col}"


@dataclass(frozen=True)
class Problem:
    """One finding. ``place`` points into the plan; ``column`` names a data column instead."""

    message: str
    place: Place | None = None
    column: str | None = None
    hint: str | None = None
    severity: Severity = "error"
    code: str = ""  # a short stable identifier for CI, e.g. "unknown-key", "out-of-range"
    details: dict = field(default_factory=dict, compare=False, hash=False)

    @property
    def is_error(self) -> bool:
        return self.severity == "error"

    def format(self) -> str:
        """The problem as printed, with a hint line when there is a hint."""
        message = _printable(self.message)
        if self.place is not None:
            head = f"{self.place}: {self.severity}: {message}"
        elif self.column is not None:
            column = _printable(self.column, lines=False)
            head = f"data: {column}: {message}" if self.is_error else (
                f"data: {column}: {self.severity}: {message}")
        else:
            head = f"{self.severity}: {message}"
        return head if not self.hint else f"{head}\n  hint: {_printable(self.hint)}"

    def as_json(self) -> dict:
        out: dict = {"severity": self.severity, "message": self.message, "code": self.code}
        if self.place is not None:
            out.update(file=self.place.file, line=self.place.line, col=self.place.col)
        if self.column is not None:
            out["column"] = self.column
        if self.hint:
            out["hint"] = self.hint
        if self.details:
            out["details"] = self.details
        return out


def _printable(text: str, lines: bool = True) -> str:
    """``text`` with its control characters escaped (``\\r``, ``\\x1b``, ``\\u2028``)
    but for the line breaks of a message that lists things: a message may quote a data
    file's bytes, and printed it must keep its lines and leave the terminal alone. JSON
    output escapes them itself. A column name (``lines=False``) keeps no line break.
    Characters that print as nothing or as a plain space are escaped too (a zero-width space
    ``\\u200b``, a no-break space ``\\xa0``, a byte-order mark, the bidirectional
    overrides that reorder what follows): in a name they are the difference the reader
    must see."""
    return "".join(c.encode("unicode_escape").decode("ascii")
                   if _is_control(c) and not (lines and c == "\n") else c for c in text)


def _is_control(c: str) -> bool:
    if c < " " or "\x7f" <= c <= "\x9f":
        return True
    return c > "\x9f" and (unicodedata.category(c) in _INVISIBLE)


_INVISIBLE = {"Cf", "Zl", "Zp", "Zs"}  # format characters, line and paragraph separators,
#                                        spaces other than U+0020


class Stop(Exception):
    """Raised by a pass that cannot go on; carries every problem found and the exit code."""

    def __init__(self, problems: Iterable[Problem], exit_code: Exit):
        self.problems = tuple(problems)
        self.exit_code = exit_code
        super().__init__("\n".join(p.format() for p in self.problems))


def sorted_problems(problems: Iterable[Problem]) -> tuple[Problem, ...]:
    """Plan problems in file order, then data problems by column, warnings after errors."""

    def key(p: Problem):
        place = p.place or Place("", 0, 0)
        return (not p.is_error, place.file, place.line, place.col, p.column or "", p.message)

    return tuple(sorted(problems, key=key))


def listed(names: Iterable[str], *, number=str, limit: int = LISTED) -> str:
    """Names for a message or the report: all of a list of up to ``limit``, else the first
    ``limit``, how many more and how many in all (``number`` writes the counts). The
    whole list belongs in the results document beside the message."""
    names = list(names)
    if len(names) <= limit:
        return ", ".join(names)
    return (f"{', '.join(names[:limit])} and {number(len(names) - limit)} more "
            f"({number(len(names))} in all)")


def stop_if_errors(problems: Iterable[Problem], exit_code: Exit) -> tuple[Problem, ...]:
    """Raise :class:`Stop` when any problem is an error; otherwise return the warnings."""
    problems = sorted_problems(problems)
    if any(p.is_error for p in problems):
        raise Stop(problems, exit_code)
    return problems
