"""The data contract: the data dictionary's promises, checked against the table.

Each check is a function over arrays that returns a :class:`~compiler.bound.Tally` (how many
rows broke the rule, and the first few with their values); a check over one batch of rows takes
the batch's ``offset`` and tallies of consecutive batches combine with ``Tally.merge``, so the
same checks serve a streaming reader. Only ``identifier_faults`` needs the whole
column at once.
`findings` turns the tallies into problems that name the column, the number of rows, up to five
example rows (by the plan's row_id, else by 1-based data row number) and the offending values.

Non-positive values under a `log` term are counted over every row where the value is present,
not only the analysed rows: the dictionary's promise is about the column, and the strict reading
does not change with the population.
"""

from __future__ import annotations

import re

import numpy as np

from .bound import EXAMPLES, CodedColumn, Sample, Table, Tally, TextColumn
from .plan import Analysis, Plan, Variable
from .problems import Problem, listed
from .suggest import level_hints, nearest, shown

# --- checks over arrays -------------------------------------------------------------------


def tally(bad: np.ndarray, values: np.ndarray, offset: int = 0) -> Tally:
    """The rows where ``bad`` holds: their count and the first EXAMPLES with their values."""
    count = int(np.count_nonzero(bad))
    if not count:
        return Tally()
    first: list[int] = []
    step = 1 << 16  # scan forward in slices: the examples are near the start or few
    for start in range(0, len(bad), step):
        first.extend(int(r) + start for r in np.flatnonzero(bad[start:start + step]))
        if len(first) >= EXAMPLES:
            break
    first = first[:EXAMPLES]
    return Tally(count, tuple(r + offset for r in first), tuple(_plain(values[r]) for r in first))


def outside_range(values: np.ndarray, low: float | None, high: float | None,
                  offset: int = 0) -> Tally:
    if _within(values, low, high):  # the usual case, in two passes with no mask
        return Tally()
    bad = np.zeros(len(values), bool)
    if low is not None:
        bad |= values < low
    if high is not None:
        bad |= values > high
    return tally(bad, values, offset)


def not_binary(values: np.ndarray, offset: int = 0) -> Tally:
    return tally((values != 0) & (values != 1) & ~np.isnan(values), values, offset)


def not_count(values: np.ndarray, offset: int = 0) -> Tally:
    with np.errstate(invalid="ignore"):
        return tally((values < 0) | ((values != np.floor(values)) & ~np.isnan(values)),
                     values, offset)


def not_positive(values: np.ndarray, offset: int = 0) -> Tally:
    if len(values) and np.fmin.reduce(values) > 0:
        return Tally()
    return tally(values <= 0, values, offset)


def _within(values: np.ndarray, low: float | None, high: float | None) -> bool:
    """Every present value lies in [low, high]; NaN (missing) breaks neither bound."""
    if not len(values):
        return True
    least, most = np.fmin.reduce(values), np.fmax.reduce(values)  # fmin/fmax skip NaN
    return (low is None or not least < low) and (high is None or not most > high)


def missing(values: np.ndarray, offset: int = 0) -> Tally:
    """Missing values: NaN in a numeric array, code -1 in codes or a CodedColumn, None in an
    object array or a TextColumn."""
    if isinstance(values, TextColumn):
        return tally(values.missing(), values, offset)
    if isinstance(values, CodedColumn):
        return tally(values.codes < 0, values, offset)
    if values.dtype == object:
        return tally(np.equal(values, None), values, offset)
    if np.issubdtype(values.dtype, np.integer):
        return tally(values < 0, values, offset)
    return tally(np.isnan(values), values, offset)


def level_counts(codes: np.ndarray, distinct: tuple[str, ...]) -> dict[str, int]:
    """How many rows hold each distinct value (merge batches by adding the dicts)."""
    if len(distinct) <= 32:  # a comparison per value: bincount would first widen every code
        counts = [np.count_nonzero(codes == k) for k in range(len(distinct))]
    else:
        counts = np.bincount(codes + 1, minlength=len(distinct) + 1)[1:]  # slot 0: missing
    return {value: int(n) for value, n in zip(distinct, counts) if n}


def outside_levels(codes: np.ndarray, distinct: tuple[str, ...], levels: tuple[str, ...],
                   offset: int = 0) -> Tally:
    foreign = [k for k, value in enumerate(distinct) if value not in levels]
    if not foreign:
        return Tally()
    values = np.array(list(distinct) + [None], dtype=object)
    return tally(np.isin(codes, foreign), values[codes], offset)


def identifier_faults(ids: np.ndarray | TextColumn) -> tuple[Tally, Tally]:
    """Rows whose identifier another row also holds, and rows with no identifier.

    A TextColumn is checked on its arrow strings (see ``_text_identifier_faults``); an object
    array as follows.

    Python's cached string hashes, sorted, find repeat candidates in one pass over the column;
    candidates are then compared exactly, so a hash collision never reports a false repeat.
    Needs the whole column: a streaming reader must keep the hashes of earlier batches.
    """
    if isinstance(ids, TextColumn):
        return _text_identifier_faults(ids)
    hashes = np.fromiter(map(hash, ids), dtype=np.int64, count=len(ids))
    maybe_none = np.flatnonzero(hashes == hash(None))
    absent = np.array([r for r in maybe_none if ids[r] is None], dtype=np.int64)
    missing_ids = Tally()
    if len(absent):
        where = np.zeros(len(ids), bool)
        where[absent] = True
        missing_ids = tally(where, ids)
    present = np.delete(hashes, absent) if len(absent) else hashes
    ordered = np.sort(present)
    twins = ordered[1:] == ordered[:-1]
    if not np.any(twins):
        return Tally(), missing_ids
    rows_of: dict[object, list[int]] = {}
    for row in np.flatnonzero(np.isin(hashes, np.unique(ordered[1:][twins]))):
        if ids[row] is not None:
            rows_of.setdefault(ids[row], []).append(int(row))
    shared = sorted(r for rows in rows_of.values() if len(rows) > 1 for r in rows)
    return Tally(len(shared), tuple(shared[:EXAMPLES]),
                 tuple(ids[r] for r in shared[:EXAMPLES])), missing_ids


def _text_identifier_faults(ids: TextColumn) -> tuple[Tally, Tally]:
    """identifier_faults over arrow strings, with no Python object per row.

    Identifiers in strictly ascending order (files are often sorted by id) are unique after
    one vectorised comparison of neighbours. Otherwise a 64-bit hash of each id's bytes is
    sorted to find repeat candidates, which are then compared exactly.
    """
    import pyarrow as pa
    import pyarrow.compute as pc

    missing_ids = tally(ids.missing(), ids) if ids.data.null_count else Tally()
    present = ids.data.drop_null() if ids.data.null_count else ids.data
    if len(present) < 2 or pc.all(pc.less(present[:-1], present[1:])).as_py():
        return Tally(), missing_ids
    absent = ids.missing()
    whole = ids.data.combine_chunks() if ids.data.num_chunks else pa.array([], pa.string())
    hashes = _hashes(whole)
    del whole
    hashes[absent] = 0  # never compared: missing rows are dropped from candidates below
    ordered = np.sort(hashes[~absent])
    collided = np.unique(ordered[1:][ordered[1:] == ordered[:-1]])
    del ordered
    if not len(collided):
        return Tally(), missing_ids
    candidates = np.flatnonzero(np.isin(hashes, collided) & ~absent)
    rows_of: dict[str, list[int]] = {}
    for row, value in zip(candidates.tolist(), ids[candidates]):
        rows_of.setdefault(value, []).append(row)
    shared = sorted(r for rows in rows_of.values() if len(rows) > 1 for r in rows)
    return Tally(len(shared), tuple(shared[:EXAMPLES]),
                 tuple(ids[r] for r in shared[:EXAMPLES])), missing_ids


def _hashes(text) -> np.ndarray:
    """FNV-1a over each string's UTF-8 bytes, one vectorised step per byte position."""
    import pyarrow as pa

    if not pa.types.is_string(text.type):
        text = text.cast(pa.large_string())
    width = np.int32 if pa.types.is_string(text.type) else np.int64
    _, offsets, data = text.buffers()
    offsets = np.frombuffer(offsets, width, len(text) + 1, text.offset * np.dtype(width).itemsize)
    raw = np.frombuffer(data, np.uint8) if data is not None else np.zeros(1, np.uint8)
    start, length = offsets[:-1].astype(np.int64), np.diff(offsets)
    hashes = np.full(len(text), 0xCBF29CE484222325, np.uint64)
    prime = np.uint64(0x100000001B3)
    same = len(length) and length.min() == length.max()
    for k in range(int(length.max()) if len(length) else 0):
        live = slice(None) if same else np.flatnonzero(length > k)
        at = start[live] + k
        hashes[live] = (hashes[live] ^ raw[at]) * prime
    return (hashes ^ length.astype(np.uint64)).view(np.int64)


def _plain(value):
    """A value as shown: whole numbers without ".0", but only while they have few digits
    (2.44e+200 stays a float rather than printing 201 digits)."""
    if isinstance(value, (np.floating, float)):
        return int(value) if _short_whole(value) else float(value)
    return value


def _short_whole(value) -> bool:
    return float(value).is_integer() and abs(float(value)) < 1e15


# --- findings -----------------------------------------------------------------------------


def findings(plan: Plan, table: Table) -> list[Problem]:
    """Every column-level finding of the contract: errors and warnings together."""
    problems: list[Problem] = []
    if table.rows_read == 0:
        problems.append(Problem(f"the data file {table.path} has no rows, only a header",
                                code="no-rows"))
    logged = logged_variables(plan)
    for variable in plan.variables:
        if variable.name not in table.columns:
            problems.append(_absent(variable, table))
            continue
        if table.rows_read:
            problems.extend(_column_findings(plan, table, variable, variable.name in logged))
    if table.unused_columns:
        problems.append(Problem(f"columns the data dictionary does not declare, not read: "
                                f"{listed(table.unused_columns)}", severity="warning",
                                code="unused-columns",
                                details={"columns": list(table.unused_columns)}))
    return problems


def logged_variables(plan: Plan) -> set[str]:
    """Variables that enter a model as a log: `log` terms and the poisson offset."""
    logged = {a.offset for a in plan.analyses if a.offset}
    for analysis in plan.analyses:
        for term in analysis.tiers[-1].terms:
            if term.form == "log":
                logged.update(term.variables)
    return logged


_NON_FINITE = re.compile(r"[+-]?(nan|inf|infinity)\Z", re.IGNORECASE)


def unparsed_wording(plan: Plan, tally: Tally) -> tuple[str, str, str]:
    """(message, code, hint) for the values of a numeric column that are not numbers: NaN
    and infinity (a Parquet float, or the words in a CSV) when the examples are all such,
    else text."""
    if tally.values and all(_NON_FINITE.match(str(v)) for v in tally.values):
        return ("values that are not finite numbers (NaN or infinity)", "non-finite",
                f"write a missing value as a declared marker ({_markers(plan)}); NaN is not one")
    return ("text in a numeric column", "text-in-numeric",
            f"only numbers, or a missing-value marker ({_markers(plan)}), may appear")


def _column_findings(plan: Plan, table: Table, variable: Variable, logged: bool) -> list[Problem]:
    name, values = variable.name, table.columns[variable.name]
    problems: list[Problem] = []
    found: list[tuple[Tally, str, str, str | None]] = []  # tally, message, code, hint
    if name in table.unparsed:
        found.append((table.unparsed[name], *unparsed_wording(plan, table.unparsed[name])))
    if variable.is_numeric:
        if variable.min is not None or variable.max is not None:
            found.append((outside_range(values, variable.min, variable.max),
                          f"values outside {span(variable)}", "out-of-range", None))
        if variable.kind == "binary":
            found.append((not_binary(values), "values other than 0 and 1 in a binary column",
                          "not-binary", None))
        if variable.kind == "count":
            found.append((not_count(values), "negative or non-integer values in a count column",
                          "not-count", None))
        if logged:
            found.append((not_positive(values), "values ≤ 0 in a variable that enters as a log",
                          "not-positive", "a log is defined only for positive values"))
    elif variable.kind == "categorical":
        codes, distinct = table.categories(name)
        problems += level_findings(plan, table, variable,
                                   outside_levels(codes, distinct, variable.levels),
                                   level_counts(codes, distinct))
    if name == plan.data.row_id:
        repeats, absent = identifier_faults(values)
        found.append((repeats, "identifier values repeated (row_id must be unique)",
                      "duplicate-id", None))
        found.append((absent, "identifier missing (row_id must be complete)", "missing-id",
                      None))
        problems += _unicode_forms(name, values)
    problems += [_problem(plan, table, name, t, message, code, hint)
                 for t, message, code, hint in found if t.count]
    if variable.max_missing is not None:
        absent = missing(table.codes[name][0] if name in table.codes else values)
        share = absent.count / table.rows_read
        if share > variable.max_missing:
            problems.append(_problem(
                plan, table, name, absent,
                f"missing in {share:.1%} of rows, above the declared max_missing "
                f"{variable.max_missing:.1%}", "too-many-missing", None))
    return problems


def level_findings(plan: Plan, table: Table, variable: Variable, outside: Tally,
                   counts: dict[str, int]) -> list[Problem]:
    """A categorical column's values outside its declared levels (``outside``), and the
    declared levels that never occur, from the rows each value holds (``counts``: one
    column's in memory, or merged over a streamed run's batches)."""
    problems = []
    if outside.count:
        foreign = {v: n for v, n in counts.items() if v not in variable.levels}
        values = listed(f"`{v}` ({n} rows)" for v, n in sorted(foreign.items()))
        problems.append(_problem(
            plan, table, variable.name, outside,
            f"values outside the declared levels ({', '.join(variable.levels)}): {values}",
            "unknown-level", level_hints(foreign, variable.levels)))
    if variable.name not in {a.exposure for a in plan.analyses}:
        # an exposure's levels are checked per analysis (sample_findings)
        problems += [Problem(f"the declared level `{level}` never occurs", column=variable.name,
                             severity="warning", code="level-never-seen",
                             details={"level": level})
                     for level in variable.levels if level not in counts]
    return problems


def sample_findings(plan: Plan, analysis: Analysis, table: Table, sample: Sample) -> list[Problem]:
    """Findings about one analysis' sample: no rows at all, or an exposure level absent."""
    flow = sample.flow
    if flow.n == 0:
        return [Problem(f"analysis `{analysis.id}` has no rows to analyse: {describe_flow(flow)}",
                        code="empty-sample", details={"analysis": analysis.id})]
    exposure = plan.variable(analysis.exposure)
    if exposure.kind == "categorical":
        codes, distinct = table.categories(exposure.name)
        levels = exposure.levels
    elif exposure.kind == "binary":
        values = table.columns[exposure.name]
        codes, distinct = np.where(values == 1, 1, np.where(values == 0, 0, -1)), ("0", "1")
        levels = ("0", "1")
    else:
        return []
    seen = level_counts(codes[sample.rows], distinct)
    reference = exposure.reference or levels[0]
    among = f"does not occur among the {flow.n} analysed rows of analysis `{analysis.id}`"

    def absent(level: str) -> Problem:
        # the reference level has no effect of its own: without it no level has a contrast
        said = (f", its reference level, {among}, so no other level can be compared with it"
                if level == reference else f" {among}, so its effect cannot be estimated")
        return Problem(f"the declared level `{level}` of the exposure{said}",
                       column=exposure.name, code="exposure-level-absent",
                       details={"analysis": analysis.id, "level": level})

    return [absent(level) for level in levels if level not in seen]


def describe_flow(flow) -> str:
    steps = [f"{flow.rows_read} rows read"]
    steps += [f"{s.reason}: −{s.excluded}" for s in flow.by_condition if s.excluded]
    steps.append(f"{flow.rows_in_population} in the population")
    steps += [f"{s.reason}: −{s.excluded}" for s in flow.by_missing if s.excluded]
    steps.append(f"{flow.n} analysed")
    return "; ".join(steps)


# --- wording ------------------------------------------------------------------------------


def row_labels(plan: Plan, table: Table, rows) -> tuple[str, list[str]]:
    """Example rows by the plan's row_id when the file has it, else by 1-based row number."""
    ids = table.columns.get(plan.data.row_id) if plan.data.row_id else None
    if ids is not None and all(ids[r] is not None for r in rows):
        return plan.data.row_id, [str(ids[r]) for r in rows]
    return "row number", [str(r + 1) for r in rows]


def _unicode_forms(name: str, ids) -> list[Problem]:
    """A warning when distinct ids are one text in two Unicode forms (é composed, or e and
    a combining accent): they count as two ids, but print the same. Only the ids beyond
    ASCII are normalised."""
    import pyarrow.compute as pc

    if not isinstance(ids, TextColumn):
        return []
    wide = pc.filter(ids.data, pc.invert(pc.fill_null(pc.string_is_ascii(ids.data), True)))
    if not len(wide):
        return []
    distinct = pc.unique(wide)
    forms = pc.utf8_normalize(distinct, form="NFC").to_pylist()
    seen: dict[str, str] = {}
    twins = [(seen.setdefault(form, raw), raw) for form, raw in zip(forms, distinct.to_pylist())
             if seen.setdefault(form, raw) != raw]
    if not twins:
        return []
    first, second = twins[0]
    spelt = " and ".join(" ".join(f"U+{ord(c):04X}" for c in t) for t in (first, second))
    return [Problem(f"{len(twins)} identifier value(s) differ from another only in Unicode "
                    f"form, e.g. {first!r} and {second!r} ({spelt}): they count as two ids "
                    "but print the same", column=name, severity="warning",
                    hint="write every id in one Unicode form (NFC) before the run",
                    code="id-unicode-forms", details={"pairs": [list(t) for t in twins[:20]]})]


def _problem(plan: Plan, table: Table, column: str, found: Tally, message: str, code: str,
             hint: str | None) -> Problem:
    label, rows = row_labels(plan, table, found.rows)
    if code == "duplicate-id":  # rows sharing an id are told apart by their numbers
        label, rows = "row number", [str(r + 1) for r in found.rows]
    noun = "row" if found.count == 1 else "rows"
    if label == "row number":
        named = "; ".join(f"row {r}: {_show(v)}" for r, v in zip(rows, found.values))
    else:
        named = f"{label} " + "; ".join(f"{r}: {_show(v)}" for r, v in zip(rows, found.values))
    return Problem(f"{message}: {found.count} {noun}, e.g. {named}", column=column, hint=hint,
                   code=code, details={"rows": found.count, "examples": rows,
                                       "example_by": label,
                                       "values": [_show(v) for v in found.values]})


def _absent(variable: Variable, table: Table) -> Problem:
    near = nearest(variable.name, table.unused_columns)
    return Problem("declared in the data dictionary but not in the file", column=variable.name,
                   hint=f"the file has a column {shown(near, variable.name)}" if near else None,
                   code="column-missing")


def _markers(plan: Plan) -> str:
    return ", ".join(f'"{m}"' for m in plan.data.missing) or "none declared"


def span(variable: Variable) -> str:
    """The declared range as the findings print it, e.g. "[16, 95]" or "[0, ∞]"."""
    return f"[{_num(variable.min, '-∞')}, {_num(variable.max, '∞')}]"


def _num(value: float | None, default: str) -> str:
    if value is None:
        return default
    return str(int(value)) if _short_whole(value) else str(value)


def _show(value) -> str:
    return "missing" if value is None or (isinstance(value, float) and value != value) \
        else str(value)
