"""Reading a user's file: a regular file of bounded size, checked before it is read.

A plan, a lock, a key, a manifest or a signature that is a FIFO would block the read for
ever, and one that is a device (``/dev/zero``) or a huge file would fill the memory. Every
small file prespec reads goes through :func:`read_regular`, which refuses anything but a
regular file, and a regular file larger than the limit its caller gives, before a byte is
read. The refusal is a :class:`Refused`, an ``OSError`` whose ``strerror`` says why, so a
caller that already reports ``OSError`` as "cannot read X: why" reports it the same way.
Data files are checked as regular by ``read.read`` and streamed, never read whole here.
"""

from __future__ import annotations

import json
import os
import stat
from pathlib import Path

KIB, MIB = 1024, 1024 * 1024
MAX_JSON_DEPTH = 64  # a results document nests about 8 deep; deeper cannot be ours

_KINDS = ((stat.S_ISDIR, "a folder"), (stat.S_ISFIFO, "a FIFO (named pipe)"),
          (stat.S_ISCHR, "a character device"), (stat.S_ISBLK, "a block device"),
          (stat.S_ISSOCK, "a socket"))


class Refused(OSError):
    """A path that is not a regular file, or one larger than the limit."""

    def __init__(self, path, why: str):
        super().__init__(why)
        self.strerror = why
        self.filename = str(path)

    def __str__(self) -> str:
        return self.strerror


def kind_of(mode: int) -> str:
    """What a file of this ``st_mode`` is, in words."""
    return next((words for test, words in _KINDS if test(mode)), "not a regular file")


def size_words(size: int) -> str:
    return f"{size / MIB:.3g} MiB" if size >= MIB else f"{size / KIB:.3g} KiB" \
        if size >= KIB else f"{size} bytes"


def read_regular(path: str | Path, limit: int) -> bytes:
    """The bytes of the regular file ``path`` (links followed), at most ``limit`` of them;
    raise :class:`Refused` for anything else, or ``OSError`` when it cannot be opened."""
    info = os.stat(path)  # before the open: opening a FIFO for reading waits for a writer
    if not stat.S_ISREG(info.st_mode):
        raise Refused(path, f"it is {kind_of(info.st_mode)}, not a regular file")
    _within(path, info.st_size, limit)
    descriptor = os.open(path, os.O_RDONLY | os.O_NONBLOCK | getattr(os, "O_NOCTTY", 0))
    try:
        info = os.fstat(descriptor)  # what was opened, should the path have been swapped
        if not stat.S_ISREG(info.st_mode):
            raise Refused(path, f"it is {kind_of(info.st_mode)}, not a regular file")
        _within(path, info.st_size, limit)
        with os.fdopen(descriptor, "rb", closefd=True) as handle:
            descriptor = -1
            data = handle.read(limit + 1)
    finally:
        if descriptor >= 0:
            os.close(descriptor)
    _within(path, len(data), limit)  # it grew while being read
    return data


def _within(path, size: int, limit: int) -> None:
    if size > limit:
        raise Refused(path, f"it is larger than the {size_words(limit)} such a file may be")


def regular_size(path: str | Path) -> int:
    """The size of the regular file ``path``, links not followed; :class:`Refused` for a
    link or anything that is not a regular file."""
    info = os.lstat(path)
    if stat.S_ISLNK(info.st_mode):
        raise Refused(path, "it is a symbolic link")
    if not stat.S_ISREG(info.st_mode):
        raise Refused(path, f"it is {kind_of(info.st_mode)}, not a regular file")
    return info.st_size


def parse_json(raw: bytes) -> tuple[object, str | None]:
    """(document, None) for bytes that are UTF-8 JSON with only finite numbers, else
    (None, why): a bundle's JSON is canonical, so NaN, nesting past the parser's depth or
    anything else is a bundle not intact, never a crash."""
    try:
        document = json.loads(raw.decode("utf-8"), parse_constant=_no_constant)
    except UnicodeDecodeError as exc:
        return None, f"it is not UTF-8 ({exc.reason} at byte {exc.start})"
    except RecursionError:
        return None, "it is nested too deeply to be a prespec file"
    except ValueError as exc:  # JSONDecodeError, NaN, a number too long to convert
        return None, f"it is not valid JSON ({exc})"
    if _depth(document) > MAX_JSON_DEPTH:
        return None, f"it is nested more than {MAX_JSON_DEPTH} levels deep"
    return document, None


def _depth(document) -> int:
    """How deeply lists and objects nest in ``document`` (without recursion)."""
    deepest, stack = 0, [(document, 1)]
    while stack:
        value, depth = stack.pop()
        if isinstance(value, (dict, list)):
            deepest = max(deepest, depth)
            stack += [(v, depth + 1) for v in (value.values() if isinstance(value, dict)
                                               else value)]
    return deepest


def _no_constant(name: str):
    raise ValueError(f"{name} is not a JSON number")
