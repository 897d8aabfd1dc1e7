"""What `read` and `bind` hand on: the typed table, the data contract, the samples."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .problems import Problem


EXAMPLES = 5  # example rows a data-contract finding names


@dataclass(frozen=True)
class Tally:
    """Rows that broke one rule: how many, and the first few positions and values.

    A check over one batch of rows gives a Tally with positions offset to the whole file;
    ``merge`` combines the tallies of consecutive batches, so checks can run per batch.
    """

    count: int = 0
    rows: tuple[int, ...] = ()  # 0-based positions into the Table, at most EXAMPLES
    values: tuple = ()  # the offending values at those rows, as read

    def merge(self, later: Tally) -> Tally:
        return Tally(self.count + later.count, (self.rows + later.rows)[:EXAMPLES],
                     (self.values + later.values)[:EXAMPLES])


class TextColumn:
    """A text column kept as arrow strings (None = missing), read like a 1-d object array.

    ``column[i]`` is a str or None; an index array, a boolean mask or a slice gives a
    TextColumn of those rows; iteration and ``np.asarray`` give Python values (the whole
    column as Python objects: only for small columns). Checks over millions of rows use
    ``missing`` and ``data`` (pyarrow.compute) instead.
    """

    dtype = np.dtype(object)
    ndim = 1

    def __init__(self, data):
        import pyarrow as pa

        self.data = data if isinstance(data, pa.ChunkedArray) else pa.chunked_array([data])

    def __len__(self) -> int:
        return len(self.data)

    @property
    def shape(self) -> tuple[int]:
        return (len(self.data),)

    @property
    def nbytes(self) -> int:
        return self.data.nbytes

    def __getitem__(self, key):
        if isinstance(key, (int, np.integer)):
            return self.data[int(key)].as_py()
        import pyarrow as pa

        if isinstance(key, slice):
            key = np.arange(len(self.data))[key]
        key = np.asarray(key)
        if key.dtype == bool:
            return TextColumn(self.data.filter(pa.array(key)))
        return TextColumn(self.data.take(pa.array(key.astype(np.int64, copy=False))))

    def __iter__(self):
        return iter(self.data.to_pylist())

    def __array__(self, dtype=None, copy=None):
        return np.asarray(self.data.to_numpy(zero_copy_only=False), dtype=dtype or object)

    def __repr__(self) -> str:
        return f"TextColumn({len(self)} rows)"

    def missing(self) -> np.ndarray:
        """A boolean mask of the rows with no value."""
        return np.asarray(self.data.is_null().to_numpy(zero_copy_only=False), dtype=bool)

    def categories(self) -> tuple[np.ndarray, tuple[str, ...]]:
        """(int32 codes, distinct values), code -1 for missing."""
        import pyarrow as pa
        import pyarrow.compute as pc

        encoded = pc.dictionary_encode(self.data).unify_dictionaries()
        if not encoded.num_chunks:
            return np.empty(0, np.int32), ()
        distinct = tuple(encoded.chunk(0).dictionary.to_pylist())
        indices = pa.chunked_array([c.indices for c in encoded.chunks], pa.int32())
        return pc.fill_null(indices, -1).to_numpy().astype(np.int32), distinct


class CodedColumn:
    """A categorical column as int32 codes into its distinct values (-1 = missing), read like
    a 1-d object array of str (None = missing).

    ``column == value`` and ``column != value`` give boolean arrays from the codes;
    ``column[i]`` is a str or None; an index array, mask or slice gives a CodedColumn of those
    rows; iteration and ``np.asarray`` give Python values (the whole column as Python objects:
    only for small columns).
    """

    dtype = np.dtype(object)
    ndim = 1
    __hash__ = None  # compares elementwise, like an array

    def __init__(self, codes: np.ndarray, distinct: tuple[str, ...]):
        self.codes, self.distinct = codes, tuple(distinct)

    def __len__(self) -> int:
        return len(self.codes)

    @property
    def shape(self) -> tuple[int]:
        return (len(self.codes),)

    @property
    def nbytes(self) -> int:
        return self.codes.nbytes

    def __eq__(self, value) -> np.ndarray:
        if value is None:
            return self.codes < 0
        hits = [k for k, v in enumerate(self.distinct) if v == value]
        return np.isin(self.codes, hits) if len(hits) != 1 else self.codes == hits[0]

    def __ne__(self, value) -> np.ndarray:
        return ~(self == value)

    def __getitem__(self, key):
        if isinstance(key, (int, np.integer)):
            code = int(self.codes[key])
            return self.distinct[code] if code >= 0 else None
        return CodedColumn(self.codes[key], self.distinct)

    def __iter__(self):
        return iter(self.__array__().tolist())

    def __array__(self, dtype=None, copy=None):
        table = np.empty(len(self.distinct) + 1, dtype=object)
        table[:len(self.distinct)] = self.distinct
        table[-1] = None  # code -1 picks the last slot
        out = table[self.codes]
        return out if dtype is None else out.astype(dtype)

    def __repr__(self) -> str:
        return f"CodedColumn({len(self)} rows, {len(self.distinct)} values)"


class RowLabels:
    """The labels of a sample's rows, made only for the rows a report names.

    ``labels[i]`` is the row_id value of the sample's i-th row (``ids`` given), or its 1-based
    data row number as str; an index array, mask or slice gives the RowLabels of those rows;
    iteration and ``np.asarray`` give every label (small samples only).
    """

    def __init__(self, rows: np.ndarray, ids=None):
        self.rows = rows  # positions into the Table
        self.ids = ids  # the whole row_id column, or None for row numbers

    def __len__(self) -> int:
        return len(self.rows)

    def __getitem__(self, key):
        if isinstance(key, (int, np.integer)):
            row = int(self.rows[key])
            return self.ids[row] if self.ids is not None else str(row + 1)
        return RowLabels(self.rows[key], self.ids)

    def __iter__(self):
        return (self[i] for i in range(len(self.rows)))

    def __array__(self, dtype=None, copy=None):
        out = np.empty(len(self.rows), dtype=object)
        out[:] = list(self)
        return out if dtype is None else out.astype(dtype)

    def __repr__(self) -> str:
        return f"RowLabels({len(self)} rows)"


@dataclass(frozen=True)
class Table:
    """The declared columns as read, with the digest of the file bytes.

    ``columns`` maps column name to a numpy array of float64 (NaN = missing) for continuous,
    count and binary variables. Categorical and identifier columns hold text (None = missing):
    as read from a file, a :class:`CodedColumn` (categorical) or a :class:`TextColumn`
    (identifier), so that millions of rows cost no Python objects; in a table built in code
    (synthetic data, a streamed batch) they may be object arrays of str. All of them index,
    compare (``==``, ``!=``), iterate and convert with ``np.asarray`` alike. Row order is file
    order.
    """

    path: str
    format: str
    sha256: str
    size_bytes: int
    rows_read: int
    columns: dict[str, np.ndarray]
    unused_columns: tuple[str, ...] = ()  # columns in the file the dictionary does not name
    # numeric columns holding values that are not numbers (read as NaN), for the contract
    unparsed: dict[str, Tally] = field(default_factory=dict)
    # categorical columns as read: (int32 codes, distinct values), code -1 = missing; a cache
    # that spares bind from hashing millions of strings (see ``categories``)
    codes: dict[str, tuple[np.ndarray, tuple[str, ...]]] = field(default_factory=dict)

    def categories(self, name: str) -> tuple[np.ndarray, tuple[str, ...]]:
        """A text column as (codes, distinct values), code -1 for missing."""
        if name in self.codes:
            return self.codes[name]
        if isinstance(self.columns[name], CodedColumn):
            return self.columns[name].codes, self.columns[name].distinct
        if isinstance(self.columns[name], TextColumn):
            return self.columns[name].categories()
        import pandas as pd

        codes, uniques = pd.factorize(self.columns[name], use_na_sentinel=True)
        return codes.astype(np.int32), tuple(uniques)


@dataclass(frozen=True)
class FlowStep:
    """One step of the sample flow: ``excluded`` rows dropped for ``reason``."""

    reason: str  # e.g. "age ≥ 18" or "missing sbp_w12"
    variable: str
    excluded: int


@dataclass(frozen=True)
class SampleFlow:
    rows_read: int
    population: str | None
    by_condition: tuple[FlowStep, ...]  # sequential: each step counts rows still in
    rows_in_population: int
    by_missing: tuple[FlowStep, ...]  # sequential, in the analysis' variable order
    n: int


@dataclass(frozen=True)
class Sample:
    """The rows one analysis uses: the same rows feed every tier."""

    analysis: str
    rows: np.ndarray  # int64 positions into the Table, ascending
    # the rows' labels by position in the sample: their row_id values, or 1-based data row
    # numbers as str; a RowLabels (made only for the rows asked for) or an array
    row_ids: RowLabels | np.ndarray
    flow: SampleFlow


@dataclass(frozen=True)
class BoundData:
    table: Table
    samples: tuple[Sample, ...]
    findings: tuple[Problem, ...]  # contract warnings kept for the report (errors stop the run)

    def sample(self, analysis_id: str) -> Sample:
        return next(s for s in self.samples if s.analysis == analysis_id)
