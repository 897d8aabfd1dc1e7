"""read: the data file meets the data dictionary.

Every column the dictionary declares is read, and no other; each with the type its kind
implies: identifiers and categoricals as text (so `007` stays `007`), continuous, count and
binary variables as float64 with NaN for missing. Text stays out of Python objects: an
identifier column is kept as arrow strings (``bound.TextColumn``), a categorical column as
int32 codes into its distinct values (``bound.CodedColumn``); numbers are copied into numpy a
parsed block at a time. A CSV is parsed by pyarrow's threads straight from its path while a
second thread takes the sha256 of the file's bytes; its identity (size, modification time,
inode) is compared before and after, so the digest is of the bytes parsed, and a file that
changed stops the run. A file that cannot be read stops the run (exit 3) with a problem
naming the file and, for a ragged row, the line; values that are not numbers in a numeric
column are kept for the data contract (``Table.unparsed``) so that bind reports them with
every other finding.

CSV/TSV and Parquet are read with pyarrow, SAS transport (xpt) and Stata (dta) with pandas.
"""

from __future__ import annotations

import contextlib
import csv
import hashlib
import io
import struct
import threading
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from . import read_faults
from .bound import EXAMPLES, CodedColumn, Table, Tally, TextColumn
from .plan import Plan
from .problems import Exit, Problem, Stop

FORMATS = {".csv": "csv", ".tsv": "tsv", ".tab": "tsv", ".parquet": "parquet", ".pq": "parquet",
           ".xpt": "xpt", ".dta": "dta"}
BLOCK = 4 << 20  # bytes pyarrow parses per block; also the hashing step
HEADER_LIMIT = 16 << 20  # bytes the header line may take
GROUP = 16  # parsed blocks converted to numpy at a time (see _released)
HINTS = {  # a library's message → what the user can do about it
    "invalid UTF8": "text columns must be UTF-8: save the file with UTF-8 encoding",
    "not an XPORT file": "only SAS transport version 5 files are read (names of up to 8 "
                         "characters); write the file as version 5",
}
# what pyarrow's float parser accepts, so that text found on the slow path matches the fast path
NUMBER = r"^[+-]?((\d+\.?\d*|\.\d+)([eE][+-]?\d+)?|(?i:inf|infinity|nan))$"


def read(plan: Plan, path: str | Path) -> Table:
    """The declared columns of the data file, typed, with the file's sha256 and size."""
    path = Path(path)
    if not path.is_file():
        what = ("a folder" if path.is_dir() else "not a regular file") if path.exists() else None
        raise _stop(f"data file {path} not found" if what is None else
                    f"data file {path} is {what}: give the path of the data file itself",
                    "data-file-missing")
    fmt = data_format(plan, path)
    read_faults.refuse_empty(path, path.stat().st_size, fmt)
    reader = {"csv": _read_delimited, "tsv": _read_delimited, "parquet": _read_parquet,
              "xpt": _read_pandas, "dta": _read_pandas}[fmt]
    with unreadable_as_stop(path, fmt):
        read_columns = reader(plan, path, fmt)
    with unreadable_as_stop(path, fmt, pa.ArrowException):  # a column arrow cannot cast
        return _converted(plan, path, fmt, *read_columns)


# What the readers raise when a file is not what its format says (struct.error: pandas'
# Stata reader on a file shorter than its header; arrow's exceptions include the casts a
# Parquet column of another type, a timestamp say, has not)
UNREADABLE = (OSError, ValueError, KeyError, EOFError, struct.error, NotImplementedError,
              UnicodeError, pa.ArrowException)


@contextlib.contextmanager
def unreadable_as_stop(path: Path, fmt: str, errors: tuple = UNREADABLE):
    """Turn a reading library's complaint into the one-line problem ``cannot read PATH as
    FORMAT: ...`` (exit 3), and pandas' warning that a SAS transport file "may be corrupted"
    (it is cut short: pandas reads the whole records it finds and says no more) into the same.
    ``errors`` are the exception types taken as the file's fault."""
    import warnings

    try:
        with warnings.catch_warnings():
            warnings.filterwarnings("error", message=".*may be corrupted", category=UserWarning)
            yield
    except Stop:
        raise
    except UserWarning as warning:
        raise _unreadable(path, fmt, "the file ends inside a record: it is cut short "
                          f"(pandas: {str(warning).rstrip('.')})") from None
    except errors as error:
        text = str(error).strip()
        raise _unreadable(path, fmt, text.splitlines()[0] if text else type(error).__name__) \
            from None


def _unreadable(path: Path, fmt: str, complaint: str) -> Stop:
    hint = next((h for cue, h in HINTS.items() if cue in complaint), None)
    return Stop([Problem(f"cannot read {path} as {fmt}: {complaint}", hint=hint,
                         code="data-unreadable")], Exit.DATA_CONTRACT)


def _converted(plan: Plan, path: Path, fmt: str, header: list[str], arrays: dict, rows: int,
               digest: str, size: int) -> Table:
    """The reader's arrow columns as the Table of the dictionary's kinds."""
    read_faults.refuse_booleans(plan, {n: a.type for n, a in arrays.items()}, path)
    declared = {v.name for v in plan.variables}
    columns: dict[str, np.ndarray] = {}
    unparsed: dict[str, Tally] = {}
    codes: dict[str, tuple[np.ndarray, tuple[str, ...]]] = {}
    missing = None if fmt in ("csv", "tsv") else plan.data.missing  # pyarrow applied it already
    for variable in plan.variables:
        if variable.name not in arrays:
            continue
        if variable.is_numeric:
            if arrays[variable.name].type == pa.float64():  # parsed as numbers: the usual case
                columns[variable.name], tally = _floats(arrays.pop(variable.name))
                _release_parse_memory()  # this column's blocks, before the next is copied
            else:
                columns[variable.name], tally = _released(arrays, variable.name, missing, numbers)
            if tally.count:
                unparsed[variable.name] = tally
        elif variable.kind == "categorical":
            data = arrays.pop(variable.name)
            codes[variable.name] = _dictionary_codes(data, missing) \
                if pa.types.is_dictionary(data.type) else coded(data, missing)
            del data
            columns[variable.name] = CodedColumn(*codes[variable.name])
        else:  # identifiers stay arrow strings: no Python object per row
            columns[variable.name] = TextColumn(identifiers(arrays.pop(variable.name), missing))
    _release_parse_memory()
    unused = tuple(name for name in header if name not in declared and name not in columns)
    return Table(path=str(path), format=fmt, sha256=digest, size_bytes=size, rows_read=rows,
                 columns=columns, unused_columns=unused, unparsed=unparsed, codes=codes)


def data_format(plan: Plan, path: Path) -> str:
    """data.format when given, else the format the file's extension names."""
    fmt = plan.data.format or FORMATS.get(path.suffix.lower())
    if fmt not in set(FORMATS.values()):
        known = ", ".join(sorted(set(FORMATS.values())))
        raise _stop(f"cannot tell the format of {path}: give data.format ({known}) or use "
                    f"one of the extensions {', '.join(FORMATS)}", "data-format")
    return fmt


# --- CSV and TSV -------------------------------------------------------------------------


class _HashingReader:
    """A binary file that hashes the bytes as they are read: one pass gives parse and digest.

    A streamed run's passes (compiler/batches.py) read through it: pyarrow pulls blocks
    through ``read`` on its I/O thread, and hashlib releases the GIL on large buffers, so
    hashing overlaps with parsing. The header peeked first is replayed. With ``hashing=False``
    it only replays the header (the in-memory read's header, a streamed run's later passes).
    """

    def __init__(self, raw, hashing: bool = True):
        self._raw = raw
        self._hash = hashlib.sha256() if hashing else None
        self._replay = b""
        self.size = 0
        self.closed = False

    def _pull(self, n: int) -> bytes:
        chunk = self._raw.read(n)
        if self._hash is not None:
            self._hash.update(chunk)
        self.size += len(chunk)
        return chunk

    def peek_record(self, limit: int = HEADER_LIMIT) -> bytes:
        """The start of the file up to at least one line end (or all of a short file)."""
        while b"\n" not in self._replay and len(self._replay) < limit:
            chunk = self._pull(1 << 16)
            if not chunk:
                break
            self._replay += chunk
        return self._replay

    def read(self, n: int = -1) -> bytes:
        if self._replay:
            head = self._replay if n < 0 else self._replay[:n]
            self._replay = self._replay[len(head):]
            return head
        return self._pull(n if n >= 0 else -1)

    def readable(self) -> bool:
        return True

    def seekable(self) -> bool:
        return False

    def close(self) -> None:
        self.closed = True

    def hexdigest(self) -> str:
        while self._pull(BLOCK):  # whatever the parser did not ask for still counts
            pass
        return self._hash.hexdigest()


def _read_delimited(plan: Plan, path: Path, fmt: str):
    try:
        return _parse_delimited(plan, path, fmt, numbers_as_text=False)
    except pa.ArrowInvalid as error:
        if "CSV parse error" in str(error) or "straddl" in str(error):
            raise read_faults.ragged(path, fmt, error, BLOCK) from None
        if "conversion error" not in str(error):
            raise
    # a numeric column holds text: read the numeric columns as text to name every such value
    return _parse_delimited(plan, path, fmt, numbers_as_text=True)


def _parse_delimited(plan: Plan, path: Path, fmt: str, *, numbers_as_text: bool):
    """Parse by path, so pyarrow's threads read the file without calling back into Python,
    while a second thread hashes the same file; the file's identity (size, modification time,
    inode) is checked around both, so the digest is of the bytes parsed."""
    import pyarrow.csv as pacsv

    delimiter = "\t" if fmt == "tsv" else ","
    before = _identity(path)
    with path.open("rb") as raw:
        prefix = _HashingReader(raw, hashing=False).peek_record()
    header = _header(prefix, delimiter, path)
    present = _present(plan, header)
    source = str(path)
    if len(prefix) == before[0] and not prefix.rstrip(b"\r\n").count(b"\n"):
        # the header alone, with or without its line end: no rows, said as plainly either way
        if not present:
            return header, {}, 0, hashlib.sha256(prefix).hexdigest(), before[0]
        source = pa.BufferReader(prefix.rstrip(b"\r\n") + b"\n")
    with _Digest(path) as digest:
        table = pacsv.read_csv(source, memory_pool=_parse_pool(),
                               **csv_options(plan, present, delimiter, BLOCK, numbers_as_text))
    if _identity(path) != before:
        raise read_faults.changed(path)
    arrays = {name: table.column(name) for name in present}
    return header, arrays, table.num_rows, digest.hexdigest, before[0]


_identity = read_faults.identity  # size, mtime, ctime, inode, device


class _Digest:
    """The sha256 of a file, taken on a thread while the caller parses it (file reads and
    hashlib's update release the GIL on large buffers). ``hexdigest`` is set on exit."""

    def __init__(self, path: Path):
        self._path = path
        self._error: BaseException | None = None
        self.hexdigest = ""
        self._thread = threading.Thread(target=self._run, name="prespec-sha256", daemon=True)

    def _run(self) -> None:
        try:
            digest = hashlib.sha256()
            with self._path.open("rb", buffering=0) as f:
                while block := f.read(BLOCK):
                    digest.update(block)
            self.hexdigest = digest.hexdigest()
        except BaseException as error:  # handed to the caller on exit
            self._error = error

    def __enter__(self) -> "_Digest":
        self._thread.start()
        return self

    def __exit__(self, *exc) -> None:
        self._thread.join()
        if self._error is not None and exc[0] is None:
            raise self._error


def _parse_pool() -> pa.MemoryPool:
    """The pool the parse allocates from: jemalloc purging at once where the build has it.

    The parsed blocks are freed column by column as they become numpy arrays; arrow's default
    allocator keeps freed pages for reuse, which would hold the file's columns twice at the peak.
    """
    try:
        pool = pa.jemalloc_memory_pool()
        pa.jemalloc_set_decay_ms(0)
        return pool
    except NotImplementedError:
        return pa.default_memory_pool()


def _release_parse_memory() -> None:
    """Hand the parse's freed pages back to the system: even with decay 0, jemalloc kept
    about 120 MiB of the bench file's parse resident after every block was freed. Called
    after each column's copy, so the columns' numpy copies replace the parse instead of
    adding to it (peak of the bench's read 431 → 353 MiB)."""
    pool = _parse_pool()
    if hasattr(pool, "release_unused"):  # pyarrow ≥ 16
        pool.release_unused()


def _header(prefix: bytes, delimiter: str, path: Path) -> list[str]:
    """The column names of the first record. Line ends are read as pyarrow reads them (a
    lone CR ends a line too), so both see the same header."""
    if not prefix.strip():
        raise _stop(f"data file {path} is empty: there is no header row", "data-empty")
    read_faults.refuse_wide_encoding(prefix, path)
    if b"\n" not in prefix and b"\r" not in prefix and len(prefix) >= HEADER_LIMIT:
        raise read_faults.long_line(path, "delimited text", HEADER_LIMIT)
    text = prefix.decode("utf-8-sig", errors="replace")
    try:
        return next(csv.reader(io.StringIO(text, newline=""), delimiter=delimiter), [])
    except csv.Error as error:  # e.g. a first field over the csv module's size limit
        raise _stop(f"cannot read {path}: its header row is not delimited text ({error})",
                    "data-unreadable") from None


def csv_options(plan: Plan, present: list[str], delimiter: str, block_size: int,
                numbers_as_text: bool) -> dict:
    """pyarrow's options for reading the declared columns ``present`` in the header, typed
    by the dictionary (numeric columns as text when ``numbers_as_text``, to name every value
    that is not a number). With none present, the rows are counted from the first column by
    position: include_columns=[] would mean every column, and a name from a header that is
    not UTF-8 would not match pyarrow's own reading of it."""
    import pyarrow.csv as pacsv

    text = pa.string()
    types = {v.name: (text if numbers_as_text else pa.float64()) if v.is_numeric
             else pa.dictionary(pa.int32(), text) if v.kind == "categorical" else text
             for v in plan.variables if v.name in present}
    read_options = {"use_threads": True, "block_size": block_size}
    if not present:
        read_options.update(autogenerate_column_names=True, skip_rows=1)
        present, types = ["f0"], {"f0": text}
    return {"read_options": pacsv.ReadOptions(**read_options),
            "parse_options": pacsv.ParseOptions(delimiter=delimiter),
            "convert_options": pacsv.ConvertOptions(
                include_columns=list(present), column_types=types,
                null_values=list(plan.data.missing), strings_can_be_null=True)}


def _present(plan: Plan, header: list[str]) -> list[str]:
    declared = [v.name for v in plan.variables]
    repeated = sorted({n for n in header if n in declared and header.count(n) > 1})
    if repeated:
        raise Stop([Problem(f"the header names this column {header.count(n)} times, so "
                            "which one the plan means is unclear", column=n,
                            code="duplicate-column") for n in repeated], Exit.DATA_CONTRACT)
    return [n for n in declared if n in header]


# --- Parquet, xpt, dta -------------------------------------------------------------------


def _bytes_and_digest(path: Path) -> tuple[bytes, threading.Thread, list[str]]:
    """Read the file once; hash it on a second thread while the caller parses the bytes."""
    data = path.read_bytes()
    out: list[str] = []
    thread = threading.Thread(target=lambda: out.append(hashlib.sha256(data).hexdigest()))
    thread.start()
    return data, thread, out


def _read_parquet(plan: Plan, path: Path, fmt: str):
    import pyarrow.parquet as pq

    data, hashing, digest = _bytes_and_digest(path)
    try:
        parquet = pq.ParquetFile(pa.BufferReader(data))
        header = parquet.schema_arrow.names
        present = _present(plan, header)
        table = parquet.read(columns=present, use_threads=True)
        rows = parquet.metadata.num_rows
    finally:
        hashing.join()
    return header, {n: table.column(n) for n in present}, rows, digest[0], len(data)


def _read_pandas(plan: Plan, path: Path, fmt: str):
    import pandas as pd

    data, hashing, digest = _bytes_and_digest(path)
    try:
        if fmt == "xpt":
            frame = pd.read_sas(io.BytesIO(data), format="xport", encoding="utf-8")
        else:
            frame = pd.read_stata(io.BytesIO(data), preserve_dtypes=False)
    finally:
        hashing.join()
    frame, header = frame_header(plan, frame, fmt)
    present = _present(plan, header)
    return header, {n: _arrow_of(frame[n]) for n in present}, len(frame), digest[0], len(data)


def frame_header(plan: Plan, frame, fmt: str):
    """(frame, header) of a SAS transport or Stata frame (or a batch of one) as the plan
    names its columns."""
    header = [str(c) for c in frame.columns]
    if fmt == "xpt":
        # pandas reads some IBM-format zeros as 16**-65 (pandas-dev/pandas#50670): a zero mantissa
        # is zero whatever the exponent, and no study value is that tiny
        for name in frame.columns[frame.dtypes == np.float64]:
            frame[name] = frame[name].mask(frame[name].abs() == 16.0 ** -65, 0.0)
        # SAS names are case-insensitive and stored upper-case by many writers
        by_upper = {n.upper(): n for n in header}
        rename = {by_upper[v.name.upper()]: v.name for v in plan.variables
                  if v.name not in header and v.name.upper() in by_upper}
        frame = frame.rename(columns=rename)
        header = [rename.get(n, n) for n in header]
    return frame, header


def _arrow_of(series) -> pa.ChunkedArray:
    import pandas as pd

    if isinstance(series.dtype, pd.CategoricalDtype):
        series = series.astype(object)
    if pd.api.types.is_numeric_dtype(series.dtype) or pd.api.types.is_bool_dtype(series.dtype):
        return pa.chunked_array([pa.array(series.to_numpy(), from_pandas=True)])
    values = [None if v is None or (isinstance(v, float) and v != v) else
              v.decode("utf-8", "replace") if isinstance(v, bytes) else str(v)
              for v in series.tolist()]
    return pa.chunked_array([pa.array(values, pa.string())])


# --- arrow columns to the Table's numpy arrays ---------------------------------------------


def _released(arrays: dict, name: str, missing, convert) -> tuple[np.ndarray, Tally]:
    """``convert`` over a column a group of chunks at a time, each group's arrow memory freed
    once converted: the column is held twice only a group at a time, not whole."""
    column = arrays.pop(name)
    kind, rows, chunks = column.type, len(column), column.chunks[::-1]
    del column  # the chunks list now holds the only references
    out: np.ndarray | None = None
    found, at = Tally(), 0
    while chunks or out is None:
        group = pa.chunked_array([chunks.pop() for _ in range(min(GROUP, len(chunks)))], kind)
        values, tally = convert(group, missing)
        del group
        if out is None:
            out = values if len(values) == rows else np.empty(rows, values.dtype)
        if out is not values:
            out[at:at + len(values)] = values
        found = found.merge(Tally(tally.count, tuple(r + at for r in tally.rows), tally.values))
        at += len(values)
    return out, found


def _floats(column: pa.ChunkedArray) -> tuple[np.ndarray, Tally]:
    """A float64 column as ``numbers`` gives it, converted a parsed block at a time straight
    into the result (one copy; each block checked for nan/inf text while in cache) and each
    block's arrow memory freed once copied."""
    out = np.empty(len(column), np.float64)
    chunks = column.chunks
    del column  # the list now holds the only references
    found, at = Tally(), 0
    for k in range(len(chunks)):
        chunk, chunks[k] = chunks[k], None
        part = out[at:at + len(chunk)]
        valid = _float_block(chunk, part)
        odd = ~np.isfinite(part)
        if np.count_nonzero(odd) > chunk.null_count:  # nan or inf written in the file: text
            rows = np.flatnonzero(odd if valid is None else odd & valid)
            found = found.merge(Tally(len(rows), tuple(int(r) + at for r in rows[:EXAMPLES]),
                                      tuple(str(part[r]) for r in rows[:EXAMPLES])))
            part[rows] = np.nan
        at += len(chunk)
        del chunk
    return out, found


def _float_block(chunk: pa.Array, out: np.ndarray) -> np.ndarray | None:
    """Copy a float64 block into ``out``, nulls as NaN; returns its validity (None: no nulls).

    Read from the block's buffers: pyarrow's own to_numpy would import pandas (about 50 MiB
    and 0.3 s) for a conversion that is a copy and a bitmap.
    """
    bitmap, data = chunk.buffers()
    out[:] = np.frombuffer(data, np.float64, count=len(chunk), offset=chunk.offset * 8)
    if not chunk.null_count:
        return None
    bits = np.unpackbits(np.frombuffer(bitmap, np.uint8), count=chunk.offset + len(chunk),
                         bitorder="little")
    valid = bits[chunk.offset:].view(bool)
    out[~valid] = np.nan
    return valid


def _dictionary_codes(column: pa.ChunkedArray, missing: tuple[str, ...] | None = None
                      ) -> tuple[np.ndarray, tuple[str, ...]]:
    """``coded`` for a dictionary column, a parsed block at a time: each block's own small
    dictionary is mapped onto the distinct values met so far, in the order first met."""
    out = np.empty(len(column), np.int32)
    distinct: dict[str, int] = {}
    dropped = set(missing or ())
    at = 0
    for chunk in column.iterchunks():
        values = _as_text(pa.chunked_array([chunk.dictionary])).to_pylist()
        remap = np.array([-1 if v is None or v in dropped else
                          distinct.setdefault(v, len(distinct)) for v in values] + [-1], np.int32)
        indices = pc.fill_null(chunk.indices, len(values)).to_numpy()
        out[at:at + len(chunk)] = remap[indices]
        at += len(chunk)
    return out, tuple(distinct)


def numbers(data: pa.ChunkedArray, missing: tuple[str, ...] | None = None
            ) -> tuple[np.ndarray, Tally]:
    """float64 with NaN for missing, and a Tally of values that are not (finite) numbers."""
    if pa.types.is_dictionary(data.type):
        data = data.cast(data.type.value_type)
    if pa.types.is_string(data.type) or pa.types.is_large_string(data.type):
        data, text = _parse_numbers(_without_missing(data, missing))
    else:
        data = data.cast(pa.float64())
        text = Tally()
    values = data.to_numpy()
    # pyarrow parses nan and inf: in a data file they are text, not values
    if np.count_nonzero(~np.isfinite(values)) > data.null_count:
        rows = np.flatnonzero(~np.isfinite(values) & data.is_valid().to_numpy())
        text = text.merge(Tally(len(rows), tuple(int(r) for r in rows[:EXAMPLES]),
                                tuple(str(values[r]) for r in rows[:EXAMPLES])))
        values = values.copy()
        values[rows] = np.nan
    if not values.flags.writeable or not values.flags.c_contiguous:
        values = np.ascontiguousarray(values).copy()
    return values, text


def _parse_numbers(data: pa.ChunkedArray) -> tuple[pa.ChunkedArray, Tally]:
    trimmed = pc.utf8_trim_whitespace(data)
    text = pc.and_(pc.is_valid(trimmed),
                   pc.invert(pc.fill_null(pc.match_substring_regex(trimmed, NUMBER), True)))
    rows = np.flatnonzero(text.to_numpy(zero_copy_only=False))
    tally = Tally(len(rows), tuple(int(r) for r in rows[:EXAMPLES]),
                  tuple(data.take(pa.array(rows[:EXAMPLES])).to_pylist()))
    kept = pc.if_else(text, pa.scalar(None, pa.string()), trimmed)
    try:
        return kept.cast(pa.float64()), tally
    except pa.ArrowInvalid:  # a form the pattern admits and arrow does not: parse one by one
        parsed = [None if s is None else float(s) for s in kept.to_pylist()]
        return pa.chunked_array([pa.array(parsed, pa.float64())]), tally


def coded(data: pa.ChunkedArray, missing: tuple[str, ...] | None = None
          ) -> tuple[np.ndarray, tuple[str, ...]]:
    """A text column as int32 codes into its distinct values (-1 = missing)."""
    data = _as_text(data)
    if not pa.types.is_dictionary(data.type):
        data = pc.dictionary_encode(data)
    data = data.unify_dictionaries()
    dictionary = data.chunk(0).dictionary.to_pylist() if data.num_chunks else []
    dropped = set(missing or ())
    remap = np.array([-1 if v in dropped else k for k, v in enumerate(dictionary)] + [-1],
                     dtype=np.int32)
    indices = pa.chunked_array([c.indices for c in data.chunks], pa.int32()) if data.num_chunks \
        else pa.chunked_array([], pa.int32())
    codes = remap[pc.fill_null(indices, len(dictionary)).to_numpy()] if len(data) else \
        np.empty(0, np.int32)
    return codes, tuple(dictionary)


def texts(data: pa.ChunkedArray, missing: tuple[str, ...] | None = None) -> np.ndarray:
    """A text column as an object array of str, None for missing."""
    data = _without_missing(_as_text(data), missing)
    if pa.types.is_dictionary(data.type):
        return _lookup(*coded(data, missing))
    return np.asarray(data.to_numpy(zero_copy_only=False), dtype=object)


def identifiers(data: pa.ChunkedArray, missing: tuple[str, ...] | None = None
                ) -> pa.ChunkedArray:
    """A text column as arrow strings, null for missing."""
    data = _as_text(data)
    if pa.types.is_dictionary(data.type):
        data = data.cast(data.type.value_type)
    return _without_missing(data, missing)


def _lookup(codes: np.ndarray, values: tuple[str, ...]) -> np.ndarray:
    table = np.empty(len(values) + 1, dtype=object)
    table[:len(values)] = values
    table[-1] = None  # code -1 picks the last slot
    return table[codes]


def _as_text(data: pa.ChunkedArray) -> pa.ChunkedArray:
    """Text stays text; numbers stored in a text variable become their shortest form (7, not 7.0)."""
    kind = data.type.value_type if pa.types.is_dictionary(data.type) else data.type
    if pa.types.is_string(kind) or pa.types.is_large_string(kind) or pa.types.is_null(kind):
        return data if not pa.types.is_null(kind) else data.cast(pa.string())
    if pa.types.is_floating(kind):
        data = pc.if_else(pc.is_finite(data), data, pa.scalar(None, kind))  # NaN is missing
        values = data.to_numpy()
        whole = values[np.isfinite(values)]
        if np.all(whole == np.round(whole)) and np.all(np.abs(whole) < 2**53):
            data = data.cast(pa.int64(), safe=False)  # every value is whole: nothing is lost
    return data.cast(pa.string())


def _without_missing(data: pa.ChunkedArray, missing: tuple[str, ...] | None) -> pa.ChunkedArray:
    if not missing or pa.types.is_dictionary(data.type):
        return data
    hit = pc.is_in(data, value_set=pa.array(list(missing), pa.string()))
    return pc.if_else(hit, pa.scalar(None, data.type), data)


def _stop(message: str, code: str) -> Stop:
    return Stop([Problem(message, code=code)], Exit.DATA_CONTRACT)
