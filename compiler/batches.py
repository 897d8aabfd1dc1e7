"""Record batches of the declared columns, each as a small :class:`Table` of its rows.

CSV and TSV through pyarrow's streaming reader (``pyarrow.csv.open_csv``) with the same
column types, missing-value markers and file-hashing reader as compiler/read.py; Parquet
through ``ParquetFile.iter_batches``, hashed on a second thread. Each batch is converted by
read.py's own functions, so a batch's arrays are exactly what an in-memory read would hold
for those rows. Positions in a batch's tallies are offset to the whole file.
"""

from __future__ import annotations

import contextlib
import os
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Iterator

import pyarrow as pa

from . import read, read_faults
from .bound import Table, Tally
from .plan import Plan

BATCH_BYTES = 1 << 20  # CSV bytes pyarrow parses per block; PRESPEC_STREAM_BATCH_BYTES overrides
GATHER_ROWS = 65_536  # rows per batch handed on; PRESPEC_STREAM_BATCH_ROWS overrides
PARQUET_ROWS = 131_072


@dataclass
class FileFacts:
    """What a pass learns about the file itself: filled in as the pass goes."""

    path: str
    format: str
    header: list[str] = field(default_factory=list)
    present: list[str] = field(default_factory=list)
    sha256: str = ""
    size_bytes: int = 0
    rows: int = 0


class NumbersAsText(Exception):
    """A numeric column holds text: the pass must start again reading numbers as text."""


def batch_tables(plan: Plan, path: Path, fmt: str, facts: FileFacts, *,
                 numbers_as_text: bool = False, hashing: bool = True
                 ) -> Iterator[tuple[int, Table]]:
    """(offset, batch Table) for every batch, in file order; ``facts`` is complete once the
    iterator is exhausted. A file its reader cannot take stops the pass as read.read stops."""
    if fmt == "parquet":
        batches = _parquet(plan, path, facts, hashing)
    elif fmt in ("xpt", "dta"):
        batches = _transport_or_stata(plan, path, fmt, facts, hashing)
    else:
        batches = _delimited(plan, path, fmt, facts, numbers_as_text, hashing)
    while True:  # each step under the guard, not the caller's work between the steps
        with read.unreadable_as_stop(path, fmt):
            step = next(batches, None)
        if step is None:
            return
        yield step


def _delimited(plan, path, fmt, facts, numbers_as_text, hashing):
    import pyarrow.csv as pacsv

    delimiter = "\t" if fmt == "tsv" else ","
    with path.open("rb") as raw:
        source = read._HashingReader(raw, hashing=hashing)
        facts.header = read._header(source.peek_record(), delimiter, path)
        facts.present = read._present(plan, facts.header)
        try:
            reader = pacsv.open_csv(source, **read.csv_options(
                plan, facts.present, delimiter, _batch_bytes(), numbers_as_text))
            offset = 0
            for batch in _gathered(reader):
                yield offset, _table(plan, facts, batch, offset, fmt)
                offset += batch.num_rows
        except pa.ArrowInvalid as error:
            if "CSV parse error" in str(error) or "straddl" in str(error):
                raise read_faults.ragged(path, fmt, error, _batch_bytes()) from None
            if "conversion error" in str(error) and not numbers_as_text:
                raise NumbersAsText() from None
            raise
        facts.rows = offset
        if hashing:
            facts.sha256 = source.hexdigest()
            facts.size_bytes = source.size
        else:
            facts.size_bytes = path.stat().st_size


def _gathered(reader) -> Iterator[pa.RecordBatch]:
    """The reader's small blocks joined into batches of about GATHER_ROWS rows: pyarrow reads
    several blocks ahead, so its memory grows with the block size, while each batch we
    handle costs a fixed overhead — small blocks, gathered, keep both down."""
    held, rows, seen = [], 0, False
    for batch in reader:
        seen = True
        held.append(batch)
        rows += batch.num_rows
        if rows >= _gather_rows():
            yield _joined(held)
            held, rows = [], 0
    if held:
        yield _joined(held)
    elif not seen:  # a header and no rows: one empty batch, so that the pass sees the columns
        yield pa.RecordBatch.from_pylist([], schema=reader.schema)


def _joined(batches: list) -> pa.RecordBatch:
    return batches[0] if len(batches) == 1 else \
        pa.Table.from_batches(batches).combine_chunks().to_batches()[0]


def _gather_rows() -> int:
    return int(os.environ.get("PRESPEC_STREAM_BATCH_ROWS") or GATHER_ROWS)


def _batch_bytes() -> int:
    return int(os.environ.get("PRESPEC_STREAM_BATCH_BYTES") or BATCH_BYTES)


def _parquet(plan, path, facts, hashing):
    import pyarrow.parquet as pq

    with _hashed(path, facts, hashing):
        parquet = pq.ParquetFile(path)
        facts.header = parquet.schema_arrow.names
        facts.present = read._present(plan, facts.header)
        offset = 0
        for batch in parquet.iter_batches(batch_size=PARQUET_ROWS, columns=facts.present,
                                          use_threads=True):
            yield offset, _table(plan, facts, batch, offset, "parquet")
            offset += batch.num_rows
        facts.rows = offset


@contextlib.contextmanager
def _hashed(path: Path, facts: FileFacts, hashing: bool):
    """The file's sha256 taken on a thread while the pass reads it (read._Digest), and its
    size, both into ``facts`` once the pass is done."""
    digest = read._Digest(path) if hashing else contextlib.nullcontext()
    with digest:
        yield
    facts.size_bytes = path.stat().st_size
    if hashing:
        facts.sha256 = digest.hexdigest


def _transport_or_stata(plan, path, fmt, facts, hashing):
    """SAS transport (xpt) and Stata (dta) files through pandas' chunked readers, a batch of
    rows at a time, each converted as read.read converts the whole file; hashed on a thread
    as Parquet is. A file without rows is read whole (it is small) for its header."""
    with _hashed(path, facts, hashing):
        offset, seen = 0, False
        for frame in _frames(path, fmt):
            frame, header = read.frame_header(plan, frame, fmt)
            if not seen:
                facts.header = header
                facts.present = read._present(plan, header)
                seen = True
            yield offset, _table(plan, facts, _batch_of(frame, facts.present), offset, fmt)
            offset += len(frame)
        if not seen:
            header, arrays, _rows, _digest, _size = read._read_pandas(plan, path, fmt)
            facts.header, facts.present = header, read._present(plan, header)
            batch = pa.record_batch([a.combine_chunks() for a in arrays.values()],
                                    names=list(arrays))
            yield 0, _table(plan, facts, batch, 0, fmt)
        facts.rows = offset


def _frames(path: Path, fmt: str):
    import pandas as pd

    rows = _gather_rows()
    if fmt == "xpt":
        reader = pd.read_sas(str(path), format="xport", encoding="utf-8", chunksize=rows)
    else:
        reader = pd.read_stata(str(path), preserve_dtypes=False, chunksize=rows)
    with reader:
        yield from reader


def _batch_of(frame, names: list[str]) -> pa.RecordBatch:
    return pa.record_batch([read._arrow_of(frame[n]).combine_chunks() for n in names],
                           names=list(names))


def _table(plan: Plan, facts: FileFacts, batch: pa.RecordBatch, offset: int,
           fmt: str) -> Table:
    """One batch as a Table, converted exactly as read.read converts whole columns."""
    missing = None if fmt in ("csv", "tsv") else plan.data.missing
    columns, unparsed, codes = {}, {}, {}
    read_faults.refuse_booleans(plan, {n: batch.schema.field(n).type for n in facts.present},
                                Path(facts.path))
    for variable in plan.variables:
        if variable.name not in facts.present:
            continue
        data = pa.chunked_array([batch.column(variable.name)])
        if variable.is_numeric:
            columns[variable.name], tally = read.numbers(data, missing)
            if tally.count:
                unparsed[variable.name] = shifted(tally, offset)
        elif variable.kind == "categorical":
            codes[variable.name] = read.coded(data, missing)
            columns[variable.name] = read._lookup(*codes[variable.name])
        else:
            columns[variable.name] = read.texts(data, missing)
    return Table(path=facts.path, format=fmt, sha256="", size_bytes=0,
                 rows_read=batch.num_rows, columns=columns, unparsed=unparsed, codes=codes)


def shifted(tally: Tally, offset: int) -> Tally:
    """A batch's tally with its row positions made positions in the whole file."""
    return replace(tally, rows=tuple(r + offset for r in tally.rows))
