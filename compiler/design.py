"""The design pass: from the bound sample to the design matrix of the largest tier.

Our own code builds every column from the resolved terms; no formula string is parsed and
nothing is evaluated. Columns come in tier order — intercept, the exposure (tier 0), then each
tier's added terms in the order written — so every tier's design is a prefix of the next.

Column forms and labels (design.md fixes the labels; compiler/columns.py makes them):
  variable    numeric as is (``age``); categorical in treatment coding against the declared
              reference, one indicator per other level in declared order
              (``district: hillside vs valley``)
  power       x**K (``age^2``)
  log         log x (``log(income)``); every value must be positive
  product     elementwise product of every combination of its factors' columns, first factor
              outermost (``district: hillside vs valley × age``,
              ``arm: walking vs usual × district: market vs valley``)
  spline      a natural (restricted) cubic spline with the declared knots t_1 < … < t_k, in the
              truncated-power basis (Devlin & Weeks 1986; Harrell, Regression Modeling
              Strategies, section 2.4.5): k − 1 columns,
                  spline(x) #1   = x
                  spline(x) #j+1 = [ (x − t_j)₊³
                                     − (x − t_{k−1})₊³ (t_k − t_j) / (t_k − t_{k−1})
                                     + (x − t_k)₊³ (t_{k−1} − t_j) / (t_k − t_{k−1}) ] / (t_k − t_1)²
                  for j = 1 … k − 2;
              linear beyond the boundary knots; the division by (t_k − t_1)² keeps the columns
              on the scale of x, which helps the conditioning of the QR.
"""

from __future__ import annotations

import numpy as np

from .bound import BoundData
from .columns import INTERCEPT, TIMES, term_labels, variable_labels
from .fitted import Design
from .plan import Analysis, Plan, Term, Variable
from .problems import Exit, Problem, Stop

_EXAMPLES = 5  # example rows named in a data problem


def design(plan: Plan, analysis: Analysis, bound: BoundData) -> Design:
    """The design of ``analysis`` on its sample; raises Stop (exit 3) on values a term cannot
    take (log of a non-positive value, a non-positive offset)."""
    sample = bound.sample(analysis.id)
    builder = _Builder(plan, bound.table.columns, sample.rows, sample.row_ids, analysis.id)
    added = tier_terms(analysis)
    width = 1 + sum(len(term_labels(plan, term)) for terms in added for term in terms)
    labels: list[str] = [INTERCEPT]
    column_term: list[str] = [INTERCEPT]
    widths: list[int] = []
    exposure_columns: tuple[int, ...] = ()
    for index, terms in enumerate(added):
        for term in terms:
            for label in term_labels(plan, term):
                labels.append(label)
                column_term.append(term.label)
        widths.append(len(labels))
        if index == 0:
            exposure_columns = tuple(range(1, len(labels)))

    if _rows_on_demand(analysis, added):
        # every row analysed: positions are the rows themselves, and a block is a slice
        # (views of the columns); otherwise the block's positions pick the rows
        every = len(sample.rows) == bound.table.rows_read

        def block(rows: slice) -> np.ndarray:
            part = _Builder(plan, bound.table.columns, rows if every else sample.rows[rows],
                            None, analysis.id)
            return _fill(part, added, width)

        x = DesignRows(block, len(sample.rows), width)
    else:
        x = _fill(builder, added, width)

    y = builder.outcome(plan.variable(analysis.outcome))
    offset = None
    if analysis.family == "poisson" and analysis.offset:
        offset = builder.positive(analysis.offset, "offset", builder.numeric(analysis.offset))
        offset = np.log(offset)
    cluster = None
    if analysis.covariance.kind == "cluster" and analysis.covariance.cluster:
        cluster = cluster_codes(builder.raw(analysis.covariance.cluster))
    builder.stop_if_problems()
    return Design(
        analysis=analysis.id, x=x, y=y, offset=offset, labels=tuple(labels),
        column_term=tuple(column_term), tier_names=tuple(t.name for t in analysis.tiers),
        tier_width=tuple(widths), exposure_columns=exposure_columns, cluster=cluster,
        row_ids=sample.row_ids,
    )


def _rows_on_demand(analysis: Analysis, added: list[tuple[Term, ...]]) -> bool:
    """Designs whose terms cannot fail are never held whole: every pass over them (the QR,
    each IRLS iteration, the fitted values, the leverages, a sandwich) takes row blocks,
    each built from the bound columns when asked. A log term must see every value before
    the fit (it stops the run on a non-positive one)."""
    return not any(term.form == "log" for terms in added for term in terms)


def _fill(builder: "_Builder", added: list[tuple[Term, ...]], width: int) -> np.ndarray:
    """The design's rows from ``builder``, every column, in F order: each column is filled
    in one contiguous pass, and a block of rows is still one run per column."""
    x = np.empty((builder.count, width), dtype=np.float64, order="F")
    x[:, 0] = 1.0
    j = 1
    for terms in added:
        for term in terms:
            for _label, values in builder.term_columns(term):
                x[:, j] = values
                j += 1
    return x


class DesignRows:
    """A design matrix that is never held: ``block(rows)`` builds the rows of a slice.

    Stands in for the n × p array where the fit reads it: ``shape``, a block of rows
    (``x[a:b]``, ``x[a:b, :w]``), the leading columns (``x[:, :w]``, still on demand),
    ``x[:, :w] @ beta`` (a block at a time) and ``np.asarray(x)`` (the whole matrix, for a
    caller that needs it, such as an error message's least squares). A block is built the same
    way whichever rows it holds, so every pass sees the same numbers.
    """

    dtype = np.dtype(np.float64)
    ndim = 2

    def __init__(self, block, n: int, p: int, columns: int | None = None):
        self._block = block
        self._p = p
        self.shape = (n, p if columns is None else columns)

    def __len__(self) -> int:
        return self.shape[0]

    def __getitem__(self, key):
        rows, columns = key if isinstance(key, tuple) else (key, slice(None))
        whole = isinstance(rows, slice) and rows == slice(None)
        prefix = isinstance(columns, slice) and columns.start in (None, 0) \
            and columns.step in (None, 1)
        if whole and prefix:  # the leading columns, still on demand
            width = min(self.shape[1], columns.stop if columns.stop is not None else self._p)
            return DesignRows(self._block, self.shape[0], self._p, width)
        if isinstance(rows, slice) and rows.step in (None, 1) and not whole:
            start, stop, _ = rows.indices(self.shape[0])
            return self._block(slice(start, stop))[:, :self.shape[1]][:, columns]
        return np.asarray(self)[key]

    def __matmul__(self, beta: np.ndarray) -> np.ndarray:
        from .qr import row_chunks

        beta = np.asarray(beta, dtype=np.float64)
        out = np.empty((self.shape[0], *beta.shape[1:]))
        for rows in row_chunks(self.shape[0]):
            out[rows] = self[rows] @ beta
        return out

    def __array__(self, dtype=None, copy=None):
        from .qr import row_chunks

        out = np.empty(self.shape, dtype=np.float64, order="F")
        for rows in row_chunks(self.shape[0]):
            out[rows] = self[rows]
        return out if dtype is None else out.astype(dtype, copy=False)


def tier_terms(analysis: Analysis) -> list[tuple[Term, ...]]:
    """The terms each tier adds to the one before, the exposure making up tier 0 (resolve
    builds the first tier's ``terms`` as the exposure alone)."""
    first, *later = analysis.tiers
    return [first.terms, *(tier.added for tier in later)]


def _other_levels(variable: Variable) -> list[str]:
    reference = variable.reference if variable.reference is not None else variable.levels[0]
    return [level for level in variable.levels if level != reference]


def natural_spline_columns(x: np.ndarray, knots: tuple[float, ...]) -> list[np.ndarray]:
    """The k − 1 truncated-power columns of a natural cubic spline (formula in the module doc)."""
    t = np.asarray(sorted(knots), dtype=np.float64)
    k = len(t)
    scale = (t[-1] - t[0]) ** 2

    def cube(a: np.ndarray) -> np.ndarray:
        return np.maximum(a, 0.0) ** 3

    tail = cube(x - t[-2])
    last = cube(x - t[-1])
    span = t[-1] - t[-2]
    columns = [x.astype(np.float64, copy=True)]
    for j in range(k - 2):
        columns.append((cube(x - t[j]) - tail * (t[-1] - t[j]) / span
                        + last * (t[-2] - t[j]) / span) / scale)
    return columns


def _rows_read(columns: dict) -> int:
    return len(next(iter(columns.values()))) if columns else 0


def cluster_codes(values: np.ndarray) -> np.ndarray:
    """Integer codes 0 … G − 1 of the cluster values, in sorted order of the values."""
    if values.dtype == object:
        values = np.asarray([str(v) for v in values], dtype=object)
    _, codes = np.unique(values, return_inverse=True)
    return codes.astype(np.int64).reshape(-1)


class _Builder:
    """Reads the sample's values of each variable and turns terms into columns."""

    def __init__(self, plan: Plan, columns: dict, rows: np.ndarray, row_ids,
                 analysis_id: str):
        self.plan = plan
        self.columns = columns
        self.rows = rows  # positions into the table's columns, or a slice of them
        self.count = len(range(*rows.indices(_rows_read(columns)))) if isinstance(rows, slice) \
            else len(rows)
        self.row_ids = row_ids
        self.analysis_id = analysis_id
        self.problems: list[Problem] = []
        self._cache: dict[str, np.ndarray] = {}

    def raw(self, name: str) -> np.ndarray:
        if name not in self._cache:
            column = self.columns[name]
            # rows are ascending, distinct positions: as many as the column has means all of
            # them, and the column itself serves without a copy
            whole = not isinstance(self.rows, slice) and len(self.rows) == len(column)
            self._cache[name] = column if whole else column[self.rows]
        return self._cache[name]

    def numeric(self, name: str) -> np.ndarray:
        return np.asarray(self.raw(name), dtype=np.float64)

    def variable_columns(self, variable: Variable) -> list[tuple[str, np.ndarray]]:
        if variable.kind == "categorical":
            values = self.raw(variable.name)
            return [(label, (values == level).astype(np.float64))
                    for label, level in zip(variable_labels(variable), _other_levels(variable))]
        return [(variable.name, self.numeric(variable.name))]

    def term_columns(self, term: Term) -> list[tuple[str, np.ndarray]]:
        name = term.variables[0]
        if term.form == "variable":
            return self.variable_columns(self.plan.variable(name))
        labels = term_labels(self.plan, term)  # columns.py: the labels check --explain prints
        if term.form == "power":
            return [(labels[0], self.numeric(name) ** int(term.degree or 1))]
        if term.form == "log":
            return [(labels[0], np.log(self.positive(name, labels[0], self.numeric(name))))]
        if term.form == "spline":
            return list(zip(labels, natural_spline_columns(self.numeric(name), term.knots)))
        combined: list[tuple[str, np.ndarray]] = [("", np.ones(self.count))]
        for factor in term.variables:
            sides = self.variable_columns(self.plan.variable(factor))
            combined = [(f"{a}{TIMES}{b}" if a else b, va * vb)
                        for a, va in combined for b, vb in sides]
        return combined

    def positive(self, name: str, use: str, values: np.ndarray) -> np.ndarray:
        """The values, with a problem recorded for each analysed row that is not positive."""
        bad = np.flatnonzero(~(values > 0))
        if len(bad):
            examples = ", ".join(f"row {self.row_ids[i]} ({values[i]:g})"
                                 for i in bad[:_EXAMPLES])
            self.problems.append(Problem(
                f"analysis {self.analysis_id}: {use} needs positive values, but {len(bad)} of "
                f"{len(values)} analysed rows are zero or negative: {examples}",
                column=name, code="not-positive",
                hint="declare min above 0 for the variable, or use the variable without log"))
            return np.where(values > 0, values, 1.0)  # placeholder; the pass stops anyway
        return values

    def outcome(self, variable: Variable) -> np.ndarray:
        if variable.kind == "categorical":
            reference = variable.reference if variable.reference is not None else variable.levels[0]
            return (self.raw(variable.name) != reference).astype(np.float64)
        return np.array(self.numeric(variable.name), dtype=np.float64)

    def stop_if_problems(self) -> None:
        if self.problems:
            raise Stop(self.problems, Exit.DATA_CONTRACT)
