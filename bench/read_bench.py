"""How fast is read + bind next to pyarrow's own read of the same columns, and how much memory?

Usage:
    python bench/read_bench.py [--rows N] [--repeat K] [--keep]

Writes a seeded CSV of about 1 GB under bench/data/ (git-ignored), then measures, alternating
and each in a fresh subprocess so that peak memory (ru_maxrss) belongs to one measurement:

    pyarrow   pyarrow.csv.read_csv of the declared columns (pyarrow's type inference)
    strings   the alternative design: numeric columns read as text, then cast with pyarrow.compute
    prespec   compiler.read.read + compiler.bind.bind with a matching Plan

It prints the median wall time of each, the ratio prespec / pyarrow (target ≤ 1.3) and the peak
memory above the interpreter's baseline against the in-memory size of the used columns (target
≤ 2×). The data file is deleted at the end unless --keep is given.
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
DATA = HERE / "data" / "read_bench.csv"
ROWS = 13_000_000
CHUNK = 500_000
ARMS = ["control", "low_dose", "high_dose"]
SITES = [f"site_{k:02d}" for k in range(12)]
USED = ["pid", "arm", "site", "age", "weight", "sbp", "visits", "smoker", "score", "outcome"]


def generate(path: Path, rows: int, seed: int = 7) -> None:
    """A seeded mixed-type CSV: identifier, two categoricals, six numerics, two unused columns."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.csv as pacsv

    rng = np.random.default_rng(seed)
    path.parent.mkdir(parents=True, exist_ok=True)
    options = pacsv.WriteOptions(quoting_style="needed")
    writer = None
    with path.open("wb") as sink:
        for start in range(0, rows, CHUNK):
            m = min(CHUNK, rows - start)
            score = np.round(rng.normal(50, 10, m), 2)
            outcome = np.round(rng.normal(120, 15, m), 1)
            batch = pa.table({
                "pid": pa.array([f"P{i:08d}" for i in range(start + 1, start + m + 1)]),
                "arm": pa.array(np.array(ARMS, dtype=object)[rng.integers(0, 3, m)]),
                "site": pa.array(np.array(SITES, dtype=object)[rng.integers(0, 12, m)]),
                "age": np.round(rng.uniform(18, 90, m), 1),
                "weight": np.round(rng.normal(75, 12, m), 1),
                "sbp": np.round(rng.normal(130, 16, m), 1),
                "visits": rng.poisson(4, m),
                "smoker": (rng.random(m) < 0.2).astype(np.int64),
                "score": pa.array(score, mask=rng.random(m) < 0.05),
                "outcome": pa.array(outcome, mask=rng.random(m) < 0.03),
                "note": pa.array(np.array(["seen", "phoned", "not reached", "moved"],
                                          dtype=object)[rng.integers(0, 4, m)]),
                "batch": rng.integers(100, 999, m),
            })
            if writer is None:
                writer = pacsv.CSVWriter(sink, batch.schema, write_options=options)
            writer.write_table(batch)
        writer.close()


def bench_plan(path: Path, with_id: bool = True):
    """A Plan matching the generated file, built directly from the dataclasses."""
    from compiler.plan import (Analysis, Condition, DataSource, Plan, Population, Study, Term,
                               Tier, Variable)

    variables = (
        Variable("pid", "identifier"),
        Variable("arm", "categorical", levels=tuple(ARMS), reference="control"),
        Variable("site", "categorical", levels=tuple(SITES), reference="site_00"),
        Variable("age", "continuous", min=18, max=90),
        Variable("weight", "continuous", min=0, max=300),
        Variable("sbp", "continuous", min=0, max=400),
        Variable("visits", "count"),
        Variable("smoker", "binary"),
        Variable("score", "continuous", max_missing=0.1),
        Variable("outcome", "continuous", min=0, max=300, max_missing=0.1),
    )[0 if with_id else 1:]
    exposure = Term("variable", ("arm",))
    adjusted = (Term("variable", ("age",)), Term("log", ("weight",)), Term("variable", ("sbp",)),
                Term("variable", ("visits",)), Term("variable", ("smoker",)),
                Term("variable", ("site",)), Term("variable", ("score",)))
    tiers = (Tier("crude", (), (exposure,)), Tier("full", adjusted, (exposure, *adjusted)))
    populations = (Population("adults-over-30", (Condition("age", "at_least", 30.0),
                                                 Condition("smoker", "equals", 0.0))),)
    analyses = (Analysis("primary", "outcome", "gaussian", "arm", tiers, "full",
                         population="adults-over-30"),)
    return Plan(1, Study("read-bench"),
                DataSource(str(path), "csv", row_id="pid" if with_id else None),
                variables, populations, analyses, source=str(HERE / "bench.yaml"))


def measure(which: str, path: Path) -> dict:
    """One measurement in this process: wall and CPU time, peak RSS above the baseline."""
    import resource

    import numpy as np  # noqa: F401  (part of the baseline in every variant)
    import pandas  # noqa: F401  (pyarrow imports it at its first conversion from Python: ~0.4 s)
    import pyarrow as pa
    import pyarrow.compute as pc
    import pyarrow.csv as pacsv

    from compiler import bind, read  # imports are baseline, not work

    variant, _, scope = which.partition("-")
    used = USED if scope != "noid" else USED[1:]
    text, numeric = pa.string(), [c for c in used if c in USED[3:]]
    dictionary = pa.dictionary(pa.int32(), text)
    typed = {c: pa.float64() for c in numeric} | {"pid": text, "arm": dictionary,
                                                   "site": dictionary}
    usage = resource.getrusage(resource.RUSAGE_SELF)
    baseline, cpu = usage.ru_maxrss * 1024, usage.ru_utime + usage.ru_stime
    start = time.perf_counter()
    if variant == "pyarrow":  # pyarrow's own read: its type inference
        table = pacsv.read_csv(path, convert_options=pacsv.ConvertOptions(include_columns=used))
        used_bytes = table.nbytes
    elif variant in ("typed", "strings"):  # the two designs for numeric columns, arrow only
        types = typed | ({c: text for c in numeric} if variant == "strings" else {})
        table = pacsv.read_csv(path, convert_options=pacsv.ConvertOptions(
            include_columns=used, column_types={c: types[c] for c in used},
            null_values=["", "NA"], strings_can_be_null=True))
        casts = [pc.cast(table.column(c), pa.float64()) for c in numeric] \
            if variant == "strings" else []
        used_bytes = table.nbytes + sum(a.nbytes for a in casts)
    else:
        plan = bench_plan(path, with_id=scope != "noid")
        bound = bind.bind(plan, read.read(plan, path))
        used_bytes = sum(a.nbytes for a in bound.table.columns.values())
    seconds = time.perf_counter() - start
    usage = resource.getrusage(resource.RUSAGE_SELF)
    result = {"which": which, "seconds": seconds, "cpu": usage.ru_utime + usage.ru_stime - cpu,
              "peak_above_baseline": usage.ru_maxrss * 1024 - baseline, "used_bytes": used_bytes}
    return result


def run_one(which: str, path: Path) -> dict:
    out = subprocess.run([sys.executable, __file__, "--measure", which, "--path", str(path)],
                         capture_output=True, text=True)
    if out.returncode:
        raise SystemExit(f"{which} failed:\n{out.stderr}")
    return json.loads(out.stdout)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=ROWS)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--keep", action="store_true", help="keep the generated data file")
    parser.add_argument("--measure", help=argparse.SUPPRESS)
    parser.add_argument("--path", help=argparse.SUPPRESS)
    parser.add_argument("--variants",
                        default="pyarrow,prespec,typed,strings,pyarrow-noid,prespec-noid")
    args = parser.parse_args()
    if args.measure:
        print(json.dumps(measure(args.measure, Path(args.path))))
        return

    if not DATA.exists():
        print(f"writing {args.rows:,} rows to {DATA} ...", flush=True)
        generate(DATA, args.rows)
    print(f"data: {DATA.stat().st_size / 1e9:.2f} GB, {args.rows:,} rows", flush=True)
    variants = args.variants.split(",")
    runs: dict[str, list[dict]] = {v: [] for v in variants}
    try:
        for k in range(args.repeat):
            for which in variants:
                result = run_one(which, DATA)
                runs[which].append(result)
                print(f"  run {k + 1} {which:8s} {result['seconds']:6.2f} s wall "
                      f"{result['cpu']:6.2f} s cpu  "
                      f"peak +{result['peak_above_baseline'] / 1e9:.2f} GB", flush=True)
    finally:
        if not args.keep:
            DATA.unlink(missing_ok=True)
    summary = {v: statistics.median(r["seconds"] for r in rs) for v, rs in runs.items()}
    cpu = {v: statistics.median(r["cpu"] for r in rs) for v, rs in runs.items()}
    print("median wall seconds:", ", ".join(f"{v} {s:.2f}" for v, s in summary.items()))
    print("median cpu seconds:", ", ".join(f"{v} {s:.2f}" for v, s in cpu.items()))
    for scope in ("", "-noid"):
        arrow, ours = f"pyarrow{scope}", f"prespec{scope}"
        if arrow not in summary or ours not in summary:
            continue
        label = "with the identifier column" if not scope else "without the identifier column"
        arrow_bytes = runs[arrow][0]["used_bytes"]
        table_bytes = runs[ours][0]["used_bytes"]
        peak = statistics.median(r["peak_above_baseline"] for r in runs[ours])
        arrow_peak = statistics.median(r["peak_above_baseline"] for r in runs[arrow])
        print(f"{label}:")
        print(f"  time ratio prespec / pyarrow: wall {summary[ours] / summary[arrow]:.2f}, "
              f"cpu {cpu[ours] / cpu[arrow]:.2f} (target ≤ 1.3)")
        print(f"  used columns in memory: pyarrow table {arrow_bytes / 1e9:.2f} GB, "
              f"prespec Table {table_bytes / 1e9:.2f} GB (numpy arrays, arrow identifiers)")
        print(f"  peak above baseline: pyarrow {arrow_peak / 1e9:.2f} GB, prespec "
              f"{peak / 1e9:.2f} GB = {peak / arrow_bytes:.2f}× the pyarrow table, "
              f"{peak / table_bytes:.2f}× prespec's Table (target ≤ 2×)")


if __name__ == "__main__":
    main()
