"""A streamed run: read, bind and fit without ever holding the data's columns.

    pass 1   every batch: the sha256 of the file bytes, the data contract's tallies, each
             analysis' sample flow (compiler/contract.py's checks and population.py's draw,
             on the batch; tallies and counts merge exactly)
    pass 2…  per analysis, the design of each batch's sample rows (compiler/design.py),
             fitted by compiler/stream_fit.py: TSQR for gaussian tiers, one pass per IRLS
             iteration for binomial and Poisson, one residual pass for the diagnostics

Identifier uniqueness keeps one 64-bit hash per row (compared exactly where hashes collide,
in one more pass over the identifier); everything else holds a batch at a time. The result
is a BoundData whose table holds no columns and whose samples hold no row positions — the
flow, findings and digest are all the later passes read — and the AnalysisFits.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from . import contract, population, read_faults
from .batches import FileFacts, NumbersAsText, batch_tables
from .bound import BoundData, FlowStep, Sample, SampleFlow, Table, Tally
from .plan import Analysis, Plan
from .problems import Exit, Problem, Stop, stop_if_errors

_NO_FLOW = SampleFlow(0, None, (), 0, (), 0)  # a batch's design needs rows, not the flow


def streaming_format(plan: Plan, data_path: str | Path, forced: bool) -> str | None:
    """The data format when this run streams (forced, or the budget says so), else None."""
    from .budget import should_stream
    from .read import data_format

    path = Path(data_path)
    if not path.is_file():
        return None  # read.read reports it
    fmt = data_format(plan, path)
    return fmt if should_stream(plan, str(path), fmt, forced) else None


def read_bind_fit(plan: Plan, data_path: str | Path, fmt: str, progress=None):
    """(BoundData, AnalysisFits, characteristics per analysis id) of a streamed run; Stop
    (exit 3) as read and bind would."""
    from .stream_fit import fit_streamed

    import scipy.linalg  # noqa: F401  (loaded before the thread limit, so that it covers it)

    from .qr import one_blas_thread

    path = Path(data_path)
    before = read_faults.identity(path)
    read_faults.refuse_empty(path, before[0], fmt)
    with one_blas_thread(path.stat().st_size):  # every row is at least a byte
        # the pass sums moments and decomposes beside the contract's checks, so values the
        # contract then refuses (ages of 1e200) may overflow there first: quietly, since the
        # run stops with the contract's findings (in memory, the contract runs before)
        with np.errstate(over="ignore", invalid="ignore"):
            bound, kept, firsts, summaries = _bind_pass(plan, path, fmt, progress)
        fits = tuple(fit_streamed(plan, a, _design_passes(plan, a, path, fmt, kept[a.id]),
                                  progress, firsts.get(a.id))
                     for a in plan.analyses)
    if read_faults.identity(path) != before:  # the passes read it again: all the same bytes
        raise read_faults.changed(path)
    if progress is not None:
        progress.done()
    return bound, fits, summaries


# --- pass 1: contract and flow -------------------------------------------------------------

@dataclass
class _Column:
    """The merged tallies of one column, in the order contract._column_findings lists them."""

    tallies: dict = field(default_factory=dict)  # code -> Tally
    levels: dict = field(default_factory=dict)  # categorical: value -> rows
    hashes: list = field(default_factory=list)  # row_id: 64-bit hashes, per batch
    absent: Tally = field(default_factory=Tally)

    def add(self, code: str, found: Tally) -> None:
        self.tallies[code] = self.tallies.get(code, Tally()).merge(found)


def _bind_pass(plan: Plan, path: Path, fmt: str, progress):
    try:
        return _bind_once(plan, path, fmt, progress, numbers_as_text=False)
    except NumbersAsText:  # as read.read: name every text value in a numeric column
        return _bind_once(plan, path, fmt, progress, numbers_as_text=True)


def _bind_once(plan, path, fmt, progress, *, numbers_as_text: bool):
    """BoundData; per analysis, which rows are in its sample (one byte a row), its first fit
    pass (stream_fit.Decomposition) and its characteristics (StreamedSummary), run alongside."""
    from .characteristics import StreamedSummary
    from .design import design
    from .stream_fit import Decomposition

    facts = FileFacts(str(path), fmt)
    kept: dict[str, list] = {a.id: [] for a in plan.analyses}
    decompositions = {a.id: Decomposition() for a in plan.analyses}
    failed: set[str] = set()
    summaries = {a.id: StreamedSummary(plan, a) for a in plan.analyses}
    columns: dict[str, _Column] = {}
    flows: dict[str, SampleFlow] = {}
    seen_levels: dict[str, dict] = {}
    example_ids: dict[int, object] = {}
    logged = contract.logged_variables(plan)
    for offset, table in batch_tables(plan, path, fmt, facts, numbers_as_text=numbers_as_text):
        for variable in plan.variables:
            if variable.name in table.columns:
                column = columns.setdefault(variable.name, _Column())
                _check(plan, table, variable, variable.name in logged, offset, column)
        masks = population.Masks(plan, table)
        for analysis in plan.analyses:
            if all(n in table.columns for n in _needed(plan, analysis)):
                sample = population.draw(plan, analysis, table, masks)
                summaries[analysis.id].add(table, sample)
                flows[analysis.id] = _merge_flow(flows.get(analysis.id), sample.flow)
                _exposure_levels(plan, analysis, table, sample, seen_levels)
                keep = np.zeros(table.rows_read, bool)
                keep[sample.rows] = True
                kept[analysis.id].append(keep)
                decomposition = decompositions[analysis.id]
                if analysis.id not in failed and (len(sample.rows) or not decomposition.rows):
                    try:
                        decomposition.add(design(plan, analysis, BoundData(table, (sample,), ())))
                    except Stop:  # the contract names it over all rows; or the refit will
                        failed.add(analysis.id)
        _remember_ids(plan, table, offset, columns, example_ids)
        if progress is not None:
            progress.show(f"reading {path.name}: {offset + table.rows_read:,} rows")
    if plan.data.row_id in columns:
        repeats = _repeated(plan, path, fmt, columns[plan.data.row_id])
        columns[plan.data.row_id].add("duplicate-id", repeats)
        example_ids.update(zip(repeats.rows, repeats.values))  # its values are the ids
    meta = Table(path=str(path), format=fmt, sha256=facts.sha256, size_bytes=facts.size_bytes,
                 rows_read=facts.rows, columns={}, unused_columns=tuple(
                     n for n in facts.header if n not in {v.name for v in plan.variables}))
    problems = _findings(plan, meta, facts, columns, example_ids)
    samples = []
    for analysis in plan.analyses:
        if analysis.id not in flows or not facts.rows:  # no rows: bind reports the file only
            continue
        sample = Sample(analysis.id, np.zeros(0, np.int64), np.zeros(0, object),
                        flows[analysis.id])
        problems += contract.sample_findings(plan, analysis, *_stand_in(
            plan, analysis, seen_levels.get(analysis.id, {}), sample))
        samples.append(sample)
    warnings = stop_if_errors(problems, Exit.DATA_CONTRACT)
    masks = {a: np.concatenate(k) if k else np.zeros(0, bool) for a, k in kept.items()}
    firsts = {a: d.result() for a, d in decompositions.items()
              if a not in failed and d.shape is not None}
    found = {a: summary.result() for a, summary in summaries.items()}
    return BoundData(meta, tuple(samples), warnings), masks, firsts, found


def _needed(plan: Plan, analysis: Analysis) -> tuple[str, ...]:
    chosen = plan.population(analysis.population)
    conditions = tuple(c.variable for c in chosen.conditions) if chosen else ()
    return conditions + analysis.variables_used


def _check(plan, table: Table, variable, logged: bool, offset: int, column: _Column) -> None:
    """contract._column_findings' checks on one batch (the wording comes at the end)."""
    name, values = variable.name, table.columns[variable.name]
    if name in table.unparsed:
        column.add("text-in-numeric", table.unparsed[name])
    if variable.is_numeric:
        if variable.min is not None or variable.max is not None:
            column.add("out-of-range",
                       contract.outside_range(values, variable.min, variable.max, offset))
        if variable.kind == "binary":
            column.add("not-binary", contract.not_binary(values, offset))
        if variable.kind == "count":
            column.add("not-count", contract.not_count(values, offset))
        if logged:
            column.add("not-positive", contract.not_positive(values, offset))
    elif variable.kind == "categorical":
        codes, distinct = table.categories(name)
        column.add("unknown-level",
                   contract.outside_levels(codes, distinct, variable.levels, offset))
        for value, count in contract.level_counts(codes, distinct).items():
            column.levels[value] = column.levels.get(value, 0) + count
    if name == plan.data.row_id:
        column.add("missing-id", contract.missing(values, offset))
        column.hashes.append(np.fromiter(map(hash, values), dtype=np.int64, count=len(values)))
    if variable.max_missing is not None:
        column.absent = column.absent.merge(contract.missing(
            table.codes[name][0] if name in table.codes else values, offset))


def _remember_ids(plan, table: Table, offset: int, columns, example_ids: dict) -> None:
    """The row_id of every example row found in this batch, for the findings' wording."""
    ids = table.columns.get(plan.data.row_id) if plan.data.row_id else None
    if ids is None:
        return
    for column in columns.values():
        for found in [*column.tallies.values(), column.absent]:
            for row in found.rows:
                if offset <= row < offset + table.rows_read:
                    example_ids[row] = ids[row - offset]


def _repeated(plan, path, fmt, column: _Column) -> Tally:
    """contract.repeated over the whole identifier column, holding only its hashes; the rows
    whose hashes collide are compared exactly in one more pass over the identifier."""
    hashes = np.concatenate(column.hashes) if column.hashes else np.zeros(0, np.int64)
    column.hashes = []
    ordered = np.sort(hashes)
    if not np.any(ordered[1:] == ordered[:-1]):
        return Tally()
    collided = np.unique(ordered[1:][ordered[1:] == ordered[:-1]])
    candidates = np.flatnonzero(np.isin(hashes, collided))
    del hashes, ordered
    ids = {}
    for offset, table in batch_tables(plan, path, fmt, FileFacts(str(path), fmt),
                                      numbers_as_text=True, hashing=False):
        values = table.columns[plan.data.row_id]
        inside = candidates[(candidates >= offset) & (candidates < offset + len(values))]
        ids.update((int(r), values[r - offset]) for r in inside)
    rows = np.array(sorted(ids), dtype=np.int64)
    found, _ = contract.identifier_faults(np.array([ids[r] for r in rows], dtype=object))
    return Tally(found.count, tuple(int(rows[r]) for r in found.rows), found.values)


def _merge_flow(before: SampleFlow | None, batch: SampleFlow) -> SampleFlow:
    if before is None:
        return batch

    def steps(a, b):
        return tuple(FlowStep(x.reason, x.variable, x.excluded + y.excluded) for x, y in zip(a, b))

    return SampleFlow(before.rows_read + batch.rows_read, batch.population,
                      steps(before.by_condition, batch.by_condition),
                      before.rows_in_population + batch.rows_in_population,
                      steps(before.by_missing, batch.by_missing), before.n + batch.n)


def _exposure_levels(plan, analysis, table: Table, sample: Sample, seen: dict) -> None:
    exposure = plan.variable(analysis.exposure)
    if exposure.kind == "categorical":
        codes, distinct = table.categories(exposure.name)
    elif exposure.kind == "binary":
        codes, distinct = table.columns[exposure.name].astype(np.int64), ("0", "1")
    else:
        return
    counts = seen.setdefault(analysis.id, {})
    for value, n in contract.level_counts(codes[sample.rows], distinct).items():
        counts[value] = counts.get(value, 0) + n


def _stand_in(plan, analysis, levels: dict, sample: Sample):
    """A one-row-per-seen-level table and sample, for contract.sample_findings' wording."""
    exposure = plan.variable(analysis.exposure)
    distinct = tuple(levels)
    codes = np.arange(len(distinct), dtype=np.int32)
    if exposure.kind == "binary":
        values = np.array([float(v) for v in distinct])
        table = Table("", "", "", 0, len(distinct), {exposure.name: values})
    else:
        table = Table("", "", "", 0, len(distinct), {}, codes={exposure.name: (codes, distinct)})
    return table, replace(sample, rows=codes.astype(np.int64))


def _findings(plan: Plan, meta: Table, facts: FileFacts, columns, example_ids) -> list[Problem]:
    """contract.findings' problems, from the merged tallies."""
    present = {name: np.zeros(0) for name in facts.present}
    problems = [p for p in contract.findings(plan, replace(meta, rows_read=0, columns=present))
                if p.code != "no-rows" or meta.rows_read == 0]
    if not meta.rows_read:
        return problems
    wording = replace(meta, columns={plan.data.row_id: example_ids} if plan.data.row_id else {})
    messages = {
        "out-of-range": None, "not-binary": "values other than 0 and 1 in a binary column",
        "not-count": "negative or non-integer values in a count column",
        "not-positive": "values ≤ 0 in a variable that enters as a log",
        "duplicate-id": "identifier values repeated (row_id must be unique)",
        "missing-id": "identifier missing (row_id must be complete)",
    }
    hints = {"not-positive": "a log is defined only for positive values"}
    for name, column in columns.items():
        variable = plan.variable(name)
        for code, found in column.tallies.items():
            if not found.count or code == "unknown-level":
                continue
            if code == "text-in-numeric":
                message, code, hint = contract.unparsed_wording(plan, found)
            else:
                message = messages[code] or f"values outside {contract.span(variable)}"
                hint = hints.get(code)
            problems.append(contract._problem(plan, wording, name, found, message, code, hint))
        if variable.kind == "categorical":
            problems += contract.level_findings(  # from the merged tally and level counts
                plan, wording, variable, column.tallies.get("unknown-level", Tally()),
                column.levels)
        if variable.max_missing is not None:
            share = column.absent.count / meta.rows_read
            if share > variable.max_missing:
                problems.append(contract._problem(
                    plan, wording, name, column.absent,
                    f"missing in {share:.1%} of rows, above the declared max_missing "
                    f"{variable.max_missing:.1%}", "too-many-missing", None))
    return problems


# --- passes 2…: designs per batch ----------------------------------------------------------

def _design_passes(plan: Plan, analysis: Analysis, path: Path, fmt: str, kept: np.ndarray):
    """A function that starts a fresh pass and yields the analysis' Design batch by batch;
    ``kept`` marks the sample's rows (pass 1 drew them)."""
    from .design import design

    def one_pass():
        yielded = False
        clusters = ClusterCodes()
        # pass 1 stopped the run on any text in a numeric column: numbers parse here
        for offset, table in batch_tables(plan, path, fmt, FileFacts(str(path), fmt),
                                          hashing=False):
            rows = np.flatnonzero(kept[offset:offset + table.rows_read])
            if not len(rows) and yielded:
                continue
            if plan.data.row_id and plan.data.row_id in table.columns:
                ids = table.columns[plan.data.row_id][rows]
            else:  # 1-based data row numbers; made text only for the rows a report names
                ids = rows + offset + 1
            yielded = True
            sample = Sample(analysis.id, rows, ids, _NO_FLOW)
            batch = design(plan, analysis, BoundData(table, (sample,), ()))
            if batch.cluster is not None:  # the batch's own codes → the file's
                batch = replace(batch, cluster=clusters.of(
                    table.columns[analysis.covariance.cluster][rows]))
            yield batch

    return one_pass


class ClusterCodes:
    """Cluster codes that hold across batches: each value gets the next code when first met,
    batch by batch in file order (sorted within a batch), so every pass over the file gives
    every row the same code."""

    def __init__(self):
        self._codes: dict = {}

    def of(self, values) -> np.ndarray:
        if getattr(values, "dtype", None) == object:  # text or coded: compare as text
            values = np.asarray([str(v) for v in values], dtype=object)
        uniques, inverse = np.unique(np.asarray(values), return_inverse=True)
        local = np.fromiter((self._codes.setdefault(u, len(self._codes))
                             for u in uniques.tolist()), np.int64, len(uniques))
        return local[inverse.reshape(-1)]
