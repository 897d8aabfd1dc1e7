"""The whole journey from plan file to sealed bundle, one pass at a time.

    plan.yaml --load--> --validate--> --resolve--> Plan
    data file --read--> Table --bind--> BoundData --design--> --fit--> --decide--> Verdicts
              --results--> results.json --render--> report.html, report.pdf --seal--> bundle

Each pass lives in the module of its name and is a plain function; heavy libraries are
imported inside the passes that need them, so that `prespec check` starts fast.
"""

from __future__ import annotations

import threading
from dataclasses import dataclass
from pathlib import Path

from .plan import Plan


@dataclass(frozen=True)
class Stamp:
    """How a run is to be labelled: pre-registered, not pre-registered, or a rehearsal."""

    preregistered: bool
    rehearsal: bool = False
    note: str | None = None  # e.g. "synthetic data, seed 1" or "exposure arm scrambled, seed 1"

    @property
    def banner(self) -> str:
        if self.rehearsal:
            return "REHEARSAL"
        return "PRE-REGISTERED" if self.preregistered else "NOT PRE-REGISTERED"


@dataclass(frozen=True)
class Analysed:
    """Everything the analysis passes produced, ready for the results document."""

    plan: Plan
    bound: object  # BoundData
    fits: tuple  # AnalysisFit per analysis, in plan order
    verdicts: tuple  # Verdict per decision, in plan order
    assumptions: tuple  # AssumptionOutcome per assumption
    characteristics: dict | None = None  # analysis id → its summary (characteristics.py)


def compile_plan(path: str | Path, *, loaded=None) -> Plan:
    """load → validate → resolve. Raises problems.Stop (exit 2) with every problem found:
    the schema's, then the resolver's on the parts the schema found no fault with.
    ``loaded`` is called with the source tree as soon as it is read, before the checks."""
    from . import load, resolve, validate, wellformed
    from .problems import Exit, Stop

    tree = load.load(path)
    if loaded is not None:
        loaded(tree)
    shape, faults = validate.check(tree)
    if shape:
        rest, broken = wellformed.well_formed(tree, faults, recheck=validate.faults)
        more = resolve.problems_in(rest, broken) if rest is not None else ()
        raise Stop((*shape, *more), Exit.PLAN_INVALID)
    return resolve.resolve(tree)


def named_data_path(tree, override: str | Path | None) -> Path | None:
    """The data file a loaded, not yet checked plan names (``_data_file``), or None when
    it names none as a string. For work worth starting before the checks (the render
    child); the run itself reads ``data_path_for`` of the checked plan, the same file."""
    from .load import Mapping, Scalar

    data = tree.root.get("data")
    path = data.get("path") if isinstance(data, Mapping) else None
    written = path.value if isinstance(path, Scalar) and isinstance(path.value, str) else None
    return _data_file(tree.source, written, override)


def analyse(plan: Plan, data_path: str | Path, *, stream: bool | None = None,
            table=None, progress: bool = False) -> Analysed:
    """read → bind → design → fit → decide. Raises problems.Stop (exit 3) on a broken contract.
    Streams the data in batches when ``stream`` or when it would not fit the memory budget
    (compiler/stream.py); ``progress`` shows a progress line on a terminal."""
    from concurrent.futures import ThreadPoolExecutor

    from . import bind, read, stream as streamed

    fmt = None if table is not None else streamed.streaming_format(plan, data_path, bool(stream))
    if fmt is not None:
        from .budget import Progress

        bound, fits, summaries = streamed.read_bind_fit(plan, data_path, fmt, Progress(progress))
    else:
        if table is None:
            # pyarrow parses outside the GIL and leaves part of a core idle: load the fitting
            # libraries meanwhile, so the first fit does not stop to import them
            threading.Thread(target=_import_fitting, name="prespec-import", daemon=True).start()
        bound = bind.bind(plan, table if table is not None else read.read(plan, data_path))
        from . import characteristics, design, fit  # here: loaded meanwhile by _import_fitting

        # The fits run LAPACK on one thread and the summaries are numpy passes that release
        # the GIL, so the summaries take the second core while the tiers are fitted, and
        # both cores once they are (one thread leads each analysis' summary, two summarise
        # its variables).
        with ThreadPoolExecutor(2) as columns, ThreadPoolExecutor(1) as pool:
            pending = {a.id: pool.submit(characteristics.summarise, plan, a, bound, columns.map)
                       for a in plan.analyses}
            fits = tuple(fit.fit(plan, a, design.design(plan, a, bound)) for a in plan.analyses)
            summaries = {name: future.result() for name, future in pending.items()}
    from . import decide

    verdicts, assumptions = decide.decide(plan, fits)
    return Analysed(plan, bound, fits, verdicts, assumptions, summaries)


def _import_fitting() -> None:
    """Import the fitting libraries, with the cyclic collector paused meanwhile: its passes
    over the objects they create (scipy parses docstrings as it loads) were 0.08-0.14 s of
    the run's CPU, measured with gc.callbacks, and found some twenty objects to free. What
    exists when they are loaded is then frozen (gc.freeze), so no later pass walks it again;
    the run's own garbage is collected as usual. A process that has them loaded (a second
    run in one process) changes nothing."""
    import gc
    import importlib
    import sys

    ours = ("design", "fit", "fit_gaussian", "diagnostics", "characteristics", "decide")
    names = [name for name in ("scipy.linalg", "scipy.special", "threadpoolctl",
                               *(f"{__package__}.{module}" for module in ours))
             if name not in sys.modules]
    if not names:
        return
    collecting = gc.isenabled()
    gc.disable()
    try:
        for name in names:
            try:
                importlib.import_module(name)
            except Exception:  # noqa: BLE001 - the pass that needs it imports it again and says why
                return
    finally:
        if collecting:
            gc.freeze()
            gc.enable()


def data_path_for(plan: Plan, override: str | Path | None) -> Path:
    """The data file (``_data_file``); exit 2 when there is none."""
    from .problems import Exit, Problem, Stop

    path = _data_file(plan.source, plan.data.path, override)
    if path is None:
        raise Stop([Problem("the plan names no data file (data.path) and --data was not given",
                            code="no-data")], Exit.PLAN_INVALID)
    return path


def _data_file(source: str, written: str | None, override: str | Path | None) -> Path | None:
    """`--data` when given, else `data.path` as written, relative to the plan file."""
    if override is not None:
        return Path(override)
    return None if written is None else Path(source).parent / written
