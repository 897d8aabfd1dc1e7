"""What is wrong with a data file that the reading libraries describe in their own terms:
said so that the user can act on it (exit 3, the file named, and the line where there is one).

- an empty file, of any format (pandas' Stata reader says "unpack requires a buffer");
- a text file in UTF-16 or UTF-32 (with a byte-order mark, or NUL bytes in its header);
- a ragged row (a record whose field count differs from the header's), by its line;
- a line longer than the parser's block (pyarrow: "straddling object straddles two block
  boundaries"): the first such line, by number and length;
- a file whose identity changed while it was read (size, modification time, inode, device,
  and the status-change time that no `touch` can set back).
"""

from __future__ import annotations

import csv
import os
from pathlib import Path

from .files import size_words
from .problems import Exit, Problem, Stop

_MARKS = ((b"\xff\xfe\x00\x00", "UTF-32"), (b"\x00\x00\xfe\xff", "UTF-32"),
          (b"\xff\xfe", "UTF-16"), (b"\xfe\xff", "UTF-16"))


def _stop(message: str, code: str, hint: str | None = None, **details) -> Stop:
    return Stop([Problem(message, hint=hint, code=code, details=details)], Exit.DATA_CONTRACT)


def refuse_empty(path: Path, size: int, fmt: str) -> None:
    if size == 0:
        raise _stop(f"cannot read {path} as {fmt}: the file is empty (0 bytes)",
                    "data-empty", hint="check that the file was written completely")


def refuse_wide_encoding(prefix: bytes, path: Path) -> None:
    """Stop when the start of a delimited file is UTF-16 or UTF-32 rather than UTF-8."""
    if b"\x00" not in prefix[:4096]:  # text in UTF-16 or 32 has NULs: its line ends do
        return
    named = next((name for mark, name in _MARKS if prefix.startswith(mark)),
                 "UTF-16 or UTF-32 (its header holds NUL bytes)")
    if named:
        raise _stop(f"data file {path} is encoded as {named}, not UTF-8", "data-encoding",
                    hint="save it as UTF-8 (in most programs: Save as, CSV UTF-8)")


def refuse_booleans(plan, types: dict, path: Path) -> None:
    """Stop when a continuous or count variable is a true/false column (Parquet's boolean,
    pandas' bool): its values would pass as 0 and 1 measurements. ``types``: name → arrow
    type of the columns read."""
    import pyarrow as pa

    problems = [Problem(f"a true/false (boolean) column in {path}, but the dictionary declares "
                        f"`{v.name}` {v.kind}", column=v.name, code="boolean-column",
                        hint="declare it kind binary, or store the measurements as numbers")
                for v in plan.variables if v.kind in ("continuous", "count")
                and v.name in types and pa.types.is_boolean(types[v.name])]
    if problems:
        raise Stop(problems, Exit.DATA_CONTRACT)


def identity(path: Path) -> tuple[int, ...]:
    """What changes when a file is written: setting the modification time back after an
    in-place rewrite still moves the status-change time (st_ctime_ns)."""
    info = os.stat(path)
    return info.st_size, info.st_mtime_ns, info.st_ctime_ns, info.st_ino, info.st_dev


def changed(path: Path) -> Stop:
    return _stop(f"data file {path} changed while it was being read; read it again once "
                 "nothing is writing to it", "data-changed")


def long_line(path: Path, fmt: str, block: int) -> Stop:
    """The problem naming the first line longer than ``block`` bytes, with its length
    (found by reading the file a block at a time, never a line whole)."""
    number, length, found = 1, 0, None
    with open(path, "rb") as handle:
        while chunk := handle.read(1 << 20):
            start = 0
            while True:
                end = chunk.find(b"\n", start)
                length += (len(chunk) if end < 0 else end) - start
                if end < 0:
                    break
                if length > block:
                    found = number
                    break
                number, length, start = number + 1, 0, end + 1
            if found is not None:
                break
    if found is not None or length > block:  # the long line, or a last line without its end
        return _stop(f"cannot read {path} as {fmt}: line {number} is {size_words(length)} "
                     f"long, longer than the {size_words(block)} a line may be",
                     "line-too-long", line=number,
                     hint="a line this long is seldom data: check the file (a missing line "
                          "end, an unclosed quote); keep long text out of the data file")
    return _stop(f"cannot read {path} as {fmt}: a record spans more than "
                 f"{size_words(block)} (a quoted field holding line breaks, or an unclosed "
                 "quote)", "line-too-long", hint="check the file's quotes")


def ragged(path: Path, fmt: str, error: Exception, block: int) -> Stop:
    """Name the line of the first record whose field count differs from the header's.

    pyarrow's threaded reader does not know row numbers, and a serial one counts records, not
    lines (blank lines and quoted line breaks shift them), so the line is found by Python's csv
    module, which tracks physical lines.
    """
    if "straddl" in str(error):  # pyarrow: a line (or record) longer than its block
        return long_line(path, fmt, block)
    delimiter = "\t" if fmt == "tsv" else ","
    try:
        found = _ragged_line(path, delimiter)
    except csv.Error as reason:  # a record Python's csv module cannot take: say why
        return _stop(f"cannot read {path} as {fmt}: {reason}", "data-unreadable")
    first = str(error).strip().splitlines()[0]
    return found or _stop(f"cannot read {path} as {fmt}: {first}", "data-unreadable")


def _ragged_line(path: Path, delimiter: str) -> Stop | None:
    """The problem naming the first record whose field count differs from the header's."""
    with path.open(encoding="utf-8-sig", errors="replace", newline="") as f:
        records = csv.reader(f, delimiter=delimiter)
        header = next(records, [])
        line = records.line_num + 1
        for fields in records:
            if fields and len(fields) != len(header):
                excerpt = delimiter.join(fields)
                excerpt = excerpt if len(excerpt) <= 60 else excerpt[:57] + "..."
                return Stop([Problem(
                    f"{path}: line {line} has {len(fields)} fields where the header has "
                    f"{len(header)}: {excerpt!r}",
                    hint="a field holding the delimiter must be quoted", code="ragged-row",
                    details={"line": line, "fields": len(fields), "expected": len(header)})],
                    Exit.DATA_CONTRACT)
            line = records.line_num + 1
    return None
