"""When to stream: the memory budget, the estimate of what an in-memory run would hold, and
the progress line shown on a terminal during long reads and fits.

The budget is the environment variable ``PRESPEC_MEMORY_BUDGET`` (bytes, or a number with
a unit: ``512MB``, ``4GiB``, ``1.5G``), else a quarter of physical memory, at most 4 GiB.
``prespec run --stream`` streams whatever the estimate says.
"""

from __future__ import annotations

import os
import re
import sys
import time

from .plan import Plan

BUDGET_VARIABLE = "PRESPEC_MEMORY_BUDGET"
DEFAULT_CAP = 4 * 2**30
_UNITS = {"": 1, "b": 1, "k": 10**3, "kb": 10**3, "m": 10**6, "mb": 10**6, "g": 10**9,
          "gb": 10**9, "t": 10**12, "tb": 10**12, "kib": 2**10, "mib": 2**20, "gib": 2**30,
          "tib": 2**40}
# Bytes one value takes in the in-memory run: a float64, or a Python str (object pointer,
# header and a short text) for categorical and identifier columns.
NUMERIC_BYTES = 8
TEXT_BYTES = 64
SAMPLE_BYTES = 1 << 20  # the head of the file read to estimate the bytes per row


def parse_size(text: str) -> int:
    """``4GiB`` → 4294967296; raises ValueError naming the text when it is not a size."""
    found = re.fullmatch(r"\s*([0-9]*\.?[0-9]+(?:[eE][0-9]+)?)\s*([A-Za-z]*)\s*", text)
    if not found or found.group(2).lower() not in _UNITS:
        raise ValueError(f"{BUDGET_VARIABLE}={text!r} is not a size (e.g. 512MB, 4GiB)")
    return int(float(found.group(1)) * _UNITS[found.group(2).lower()])


def memory_budget() -> int:
    """The budget in bytes (see the module doc)."""
    setting = os.environ.get(BUDGET_VARIABLE)
    if setting:
        return parse_size(setting)
    try:
        physical = os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        return DEFAULT_CAP
    return min(DEFAULT_CAP, physical // 4)


def estimated_rows(path: str) -> int:
    """Rows of a text file, from its size and the mean length of the lines at its head."""
    size = os.path.getsize(path)
    with open(path, "rb") as handle:
        head = handle.read(SAMPLE_BYTES)
    lines = head.count(b"\n")
    if lines <= 1 or len(head) >= size:
        return max(lines, 1)
    return int(size / (len(head) / lines)) + 1


def in_memory_bytes(plan: Plan, rows: int) -> int:
    """What the in-memory run would hold at its peak, roughly: the used columns, and per
    analysis its design matrix, sample positions and row labels."""
    per_row = 0
    for name in plan.columns_used:
        per_row += NUMERIC_BYTES if plan.variable(name).is_numeric else TEXT_BYTES
    for analysis in plan.analyses:
        per_row += NUMERIC_BYTES * (_width(plan, analysis) + 2) + NUMERIC_BYTES + TEXT_BYTES
    return rows * per_row


def _width(plan: Plan, analysis) -> int:
    from .columns import design_labels

    return len(design_labels(plan, analysis)[-1])


def should_stream(plan: Plan, data_path: str, data_format: str, forced: bool) -> bool:
    """Stream when forced, or when the in-memory estimate exceeds the budget."""
    if forced:
        return True
    if data_format == "parquet":
        rows = _parquet_rows(data_path)
    elif data_format in ("xpt", "dta"):
        rows = _declared_rows(data_path, data_format)
    else:
        rows = estimated_rows(data_path)
    return in_memory_bytes(plan, rows) > memory_budget()


def _parquet_rows(data_path: str) -> int:
    """The row count in a Parquet file's footer; a file that is not Parquet counts as empty
    here, and read reports it."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    try:
        return pq.ParquetFile(data_path).metadata.num_rows
    except (OSError, pa.ArrowException):
        return 0


def _declared_rows(data_path: str, data_format: str) -> int:
    """The row count a SAS transport or Stata file's header gives (pandas reads the header
    only); a file pandas cannot open counts as empty here, and read reports it."""
    import warnings

    import pandas as pd

    try:
        with warnings.catch_warnings():  # "may be corrupted": read reports that too
            warnings.simplefilter("ignore", UserWarning)
            if data_format == "xpt":
                reader = pd.read_sas(data_path, format="xport", encoding="utf-8", iterator=True)
            else:
                reader = pd.read_stata(data_path, iterator=True)
            with reader:
                return int(reader.nobs)
    except Exception:  # noqa: BLE001 - read.read names the problem with the file
        return 0


class Progress:
    """One self-rewriting line on stderr; silent unless stderr is a terminal, CI is unset
    and the caller allows it (``--json`` does not)."""

    def __init__(self, enabled: bool = True, every: float = 0.25):
        self.enabled = enabled and sys.stderr.isatty() and not os.environ.get("CI")
        self.every = every
        self._last = 0.0
        self._shown = False

    def show(self, text: str, force: bool = False) -> None:
        if not self.enabled:
            return
        now = time.monotonic()
        if force or now - self._last >= self.every:
            self._last = now
            self._shown = True
            sys.stderr.write("\r\x1b[K" + text)
            sys.stderr.flush()

    def done(self) -> None:
        if self.enabled and self._shown:
            sys.stderr.write("\r\x1b[K")
            sys.stderr.flush()
            self._shown = False
