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


@dataclass(frozen=True)
class Table:
    """The declared columns as read, with the digest of the file bytes.

    ``columns`` maps column name to a numpy array: float64 (NaN = missing) for continuous,
    count and binary variables; object arrays of str (None = missing) for categorical and
    identifier variables. Row order is file order.
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
    row_ids: np.ndarray  # object array: the row_id values, or 1-based data row numbers as str
    flow: SampleFlow


@dataclass(frozen=True)
class BoundData:
    table: Table
    samples: tuple[Sample, ...]
    findings: tuple[Problem, ...]  # contract warnings kept for the report (errors stop the run)

    def sample(self, analysis_id: str) -> Sample:
        return next(s for s in self.samples if s.analysis == analysis_id)
