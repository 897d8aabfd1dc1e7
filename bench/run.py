"""The speed-and-scale benchmark: prespec against the script a statistician would write.

Usage (from the checkout; `make bench` runs the first form):
    .venv/bin/python bench/run.py [--rows N] [--repeat K] [--keep]
    .venv/bin/python bench/run.py --streamed-big [--big-rows N] [--keep]

Writes seeded data under bench/data/ (git-ignored): N rows (default 1,000,000) of a binary
exposure, 20 continuous covariates and a continuous outcome, and a plan with four nested
gaussian tiers (bench/data/bench.yaml). Then, alternating, each in a fresh subprocess whose
process tree's resident memory is sampled every 10 ms (summed over the tree: prespec renders
its report in a child process), it times:

    prespec   `prespec run --unlocked` end to end, bundle included, into a fresh folder
    script    pandas.read_csv of the used columns, one statsmodels formula fit (smf.ols) per
              tier, and statsmodels.stats.anova.anova_lm(*fits) for the nested F table
    limit     pyarrow.csv.read_csv of the used columns, plus the sha256 of the file
    compute   prespec's own work up to results.json, in a fresh process: the plan's checks,
              the read and hash, bind, fits, characteristics and decisions; no report, no
              render child, no bundle (a part of `prespec`, timed to show where its time goes)

and prints the medians, the ratios prespec/script (target ≤ 0.5) and prespec/limit (target
≤ 1.5), each one's peak memory above an idle interpreter's against the in-memory size of the
used columns (target ≤ 2×), prespec's also above its own loaded libraries, and the start-up
time of `prespec check`.

Last, the report alone: the HTML and PDF of the same results rendered in a process whose
report libraries are loaded and warm (median of three renders), as the render child does
once the results exist. It is the serial tail of every run, which no reading or fitting can
hide, so it bounds prespec/limit from below.

--streamed-big writes a CSV of --big-rows rows (default 20,000,000, about 8 GB; needs about
10 GB free under bench/data), times one `prespec run --unlocked --stream` on it, prints the
wall time and peak memory (target ≤ 1.5 GB) and deletes the file unless --keep is given.
"""

from __future__ import annotations

import argparse
import compileall
import hashlib
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
DATA = HERE / "data"
PYTHON = sys.executable
PRESPEC = str(Path(PYTHON).parent / "prespec")
COVARIATES = [f"c{j:02d}" for j in range(1, 21)]
USED = ["y", "treated", *COVARIATES]
TIERS = [("crude", []), ("demographic", COVARIATES[:5]), ("clinical", COVARIATES[5:12]),
         ("full", COVARIATES[12:])]
CHUNK = 250_000

# Each measured child runs under this wrapper. It samples, every 10 ms, the resident memory
# of the child and of every process the child starts (prespec renders its report in a child
# process of its own), so the peak is that of the whole process tree, summed, not of its
# largest member; ru_maxrss of the largest member is reported beside it as a check on the
# sampling (the sum can never be below it).
WRAPPER = r"""
import os, resource, subprocess, sys, time

def tree(root):
    found, todo = [], [root]
    while todo:
        pid = todo.pop()
        found.append(pid)
        try:  # the main thread's children: prespec and Python start processes from it
            with open(f"/proc/{pid}/task/{pid}/children") as f:
                todo.extend(int(c) for c in f.read().split())
        except OSError:
            pass
    return found

def resident(pid):
    try:
        with open(f"/proc/{pid}/statm") as f:
            return int(f.read().split()[1]) * os.sysconf("SC_PAGE_SIZE")
    except OSError:
        return 0

start = time.perf_counter()
child = subprocess.Popen(sys.argv[1:], stdout=subprocess.DEVNULL)
peak_tree = 0
while child.poll() is None:
    peak_tree = max(peak_tree, sum(resident(p) for p in tree(child.pid)))
    time.sleep(0.01)
wall = time.perf_counter() - start
largest = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss * 1024
print(f"{child.returncode} {wall:.6f} {max(peak_tree, largest)} {largest}")
"""

SCRIPT = r"""
import sys
import pandas as pd
import statsmodels.formula.api as smf
from statsmodels.stats.anova import anova_lm

path, tiers = sys.argv[1], sys.argv[2:]
frame = pd.read_csv(path, usecols=[t for t in tiers[-1].split("+")])
fits = []
for terms in tiers:
    outcome, *rhs = terms.split("+")
    fits.append(smf.ols(f"{outcome} ~ " + " + ".join(rhs), data=frame).fit())
table = anova_lm(*fits)
print(table.to_string(), file=sys.stderr)
"""

LIMIT = r"""
import hashlib, sys
import pyarrow.csv as pacsv
path, columns = sys.argv[1], sys.argv[2].split(",")
table = pacsv.read_csv(path, convert_options=pacsv.ConvertOptions(include_columns=columns))
digest = hashlib.sha256()
with open(path, "rb") as handle:
    while block := handle.read(1 << 22):
        digest.update(block)
print(table.num_rows, digest.hexdigest(), file=sys.stderr)
"""

# The run's work up to the bytes of results.json, as `prespec run` does it (compiler/bundle.py):
# the start of the two parts of a run that are timed on their own below.
ANALYSED = r"""
import hashlib, statistics, sys, time
from compiler import bundle, renderer, results
from compiler.pipeline import Stamp, analyse, compile_plan, data_path_for
plan_path = sys.argv[1]
plan = compile_plan(plan_path)
analysed = analyse(plan, data_path_for(plan, None))
document = bundle.results_document(analysed, Stamp(preregistered=False),
                                   plan_bytes=open(plan_path, "rb").read(), state=None,
                                   settings=None)
fits, payload = analysed.fits, results.to_bytes(document)
del analysed
"""

# That work in a fresh process of its own: what prespec adds to the limit before any report.
COMPUTE = ANALYSED + r"""
print(len(payload), file=sys.stderr)
"""

# The report alone: the same results rendered in a warm process (the render child's state
# when its job arrives); the analysis before it and the libraries' loading are not timed.
REPORT = ANALYSED + r"""
renderer.load_libraries()
renderer._warm_up()
times = []
for _ in range(3):
    started = time.perf_counter()
    bundle.render(document, payload, fits, 0)
    times.append(time.perf_counter() - started)
print(f"{statistics.median(times):.6f} {hashlib.sha256(payload).hexdigest()}")
"""

IDLE = "import sys"
# What a run holds before it touches data: the analysis libraries in the main process, and
# the report's in the render child (compiler/renderer.py); their peaks, added, are prespec's
# own baseline, reported beside the idle interpreter's.
LOADED_MAIN = ("import numpy, pyarrow, pyarrow.csv, scipy.linalg, scipy.special, threadpoolctl;"
               " import compiler.read, compiler.bind, compiler.design, compiler.fit,"
               " compiler.characteristics, compiler.results, compiler.bundle")
LOADED_RENDER = "from compiler import renderer; renderer.load_libraries()"


def generate(path: Path, rows: int, seed: int = 20240601) -> None:
    """Seeded CSV: y, treated (0/1), c01…c20; y depends on the exposure and ten covariates."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.csv as pacsv

    rng = np.random.default_rng(seed)
    path.parent.mkdir(parents=True, exist_ok=True)
    effects = np.zeros(20)
    effects[:10] = rng.normal(0, 0.5, 10)
    writer = None
    with path.open("wb") as sink:
        for start in range(0, rows, CHUNK):
            m = min(CHUNK, rows - start)
            treated = (rng.random(m) < 0.5).astype(np.int64)
            covariates = np.round(rng.normal(50, 10, (m, 20)), 3)
            y = np.round(10 + 1.5 * treated + (covariates - 50) @ effects
                         + rng.normal(0, 5, m), 3)
            columns = {"y": y, "treated": treated}
            columns.update({name: covariates[:, j] for j, name in enumerate(COVARIATES)})
            batch = pa.table(columns)
            if writer is None:
                writer = pacsv.CSVWriter(sink, batch.schema)
            writer.write_table(batch)
        writer.close()


def write_plan(path: Path, data: Path) -> None:
    lines = ["prespec: 1", "study:", "  id: bench-million", "  title: Benchmark, seeded data",
             "data:", f"  path: {data.name}", "variables:", "  y: {kind: continuous}",
             "  treated: {kind: binary}"]
    lines += [f"  {name}: {{kind: continuous}}" for name in COVARIATES]
    lines += ["analyses:", "  - id: main", "    outcome: y", "    family: gaussian",
              "    exposure: treated", "    tiers:"]
    for name, added in TIERS:
        lines.append(f"      - name: {name}")
        if added:
            lines.append(f"        add: [{', '.join(added)}]")
    lines += ["    report_tier: full", "decisions:", "  - id: H1", "    analysis: main",
              "    test: superiority"]
    path.write_text("\n".join(lines) + "\n")


def measure(command: list[str]) -> tuple[float, int]:
    """(wall seconds, peak bytes of its process tree) of one fresh child process."""
    done = subprocess.run([PYTHON, "-c", WRAPPER, *command], capture_output=True, text=True,
                          cwd=ROOT)
    code, wall, peak, _largest = done.stdout.split()
    if code != "0":
        raise SystemExit(f"benchmark child failed ({code}): {' '.join(command)}\n{done.stderr}")
    return float(wall), int(peak)


def tier_formulas() -> list[str]:
    """'y+treated+c01+…' per tier, for the hand-written script."""
    terms = ["y", "treated"]
    out = []
    for _, added in TIERS:
        terms = terms + added
        out.append("+".join(terms))
    return out


def prespec_command(plan: Path, out_root: Path, extra=()) -> list[str]:
    out = tempfile.mkdtemp(prefix="run-", dir=out_root)
    os.rmdir(out)  # a bundle is never written into an existing folder
    return [PRESPEC, "run", str(plan), "--unlocked", "--out", out, *extra]


def report_alone(plan: Path, bundles: Path) -> float:
    """Median seconds of one report render (HTML and PDF) in a warm process, after checking
    that it renders the very results the timed runs sealed (the same work, not a lookalike)."""
    done = subprocess.run([PYTHON, "-c", REPORT, str(plan)], capture_output=True, text=True,
                          cwd=ROOT)
    if done.returncode != 0:
        raise SystemExit(f"benchmark child failed ({done.returncode}): report\n{done.stderr}")
    seconds, digest = done.stdout.split()[-2:]
    sealed = {hashlib.sha256(p.read_bytes()).hexdigest() for p in bundles.glob("*/results.json")}
    if sealed != {digest}:
        raise SystemExit(f"the report was timed on other results ({digest}) than the runs "
                         f"sealed ({', '.join(sorted(sealed)) or 'none'})")
    return float(seconds)


def megabytes(n: float) -> str:
    return f"{n / 2**20:,.0f} MiB"


def compile_prespec() -> None:
    """Write prespec's bytecode, as installing it from its wheel does (pip compiles every
    module) and as the script's libraries have theirs. An editable checkout run with
    PYTHONDONTWRITEBYTECODE set (so it is on the machines this was measured on) would
    otherwise compile its modules from source in every run (45 in the run process, about
    ten in the render child): 0.1-0.15 s of CPU that no installed copy pays. py_compile
    writes whatever that variable says."""
    compileall.compile_dir(str(ROOT / "compiler"), quiet=1)


def benchmark(rows: int, repeat: int, keep: bool) -> None:
    data = DATA / f"bench-{rows}.csv"
    plan = DATA / "bench.yaml"
    if not data.exists():
        print(f"writing {data.relative_to(ROOT)} ({rows:,} rows)", flush=True)
        generate(data, rows)
    write_plan(plan, data)
    compile_prespec()
    out_root = Path(tempfile.mkdtemp(prefix="prespec-bench-"))
    used_bytes = rows * len(USED) * 8  # float64 columns in memory
    commands = {
        "prespec": lambda: prespec_command(plan, out_root),
        "script": lambda: [PYTHON, "-c", SCRIPT, str(data), *tier_formulas()],
        "limit": lambda: [PYTHON, "-c", LIMIT, str(data), ",".join(USED)],
        "compute": lambda: [PYTHON, "-c", COMPUTE, str(plan)],
    }
    try:
        times = {name: [] for name in commands}
        peaks = {name: [] for name in commands}
        measure(commands["limit"]())  # warm the page cache: every contender reads a cached file
        for round_ in range(repeat):
            for name, command in commands.items():
                wall, peak = measure(command())
                times[name].append(wall)
                peaks[name].append(peak)
            print(f"round {round_ + 1}/{repeat}: " + ", ".join(
                f"{n} {times[n][-1]:.2f} s" for n in commands), flush=True)
        idle = statistics.median(measure([PYTHON, "-c", IDLE])[1] for _ in range(3))
        loaded = sum(statistics.median(measure([PYTHON, "-c", code])[1] for _ in range(3))
                     for code in (LOADED_MAIN, LOADED_RENDER))
        check = statistics.median(measure([PRESPEC, "check", str(plan)])[0] for _ in range(5))
        report = report_alone(plan, out_root)
    finally:
        shutil.rmtree(out_root, ignore_errors=True)
        if not keep:
            data.unlink(missing_ok=True)
    median = {name: statistics.median(values) for name, values in times.items()}
    print(f"\n{rows:,} rows × {len(USED)} used columns "
          f"({megabytes(used_bytes)} as float64), {repeat} rounds, medians:")
    for name in commands:
        peak = statistics.median(peaks[name])
        print(f"  {name:8s} {median[name]:7.2f} s   peak {megabytes(peak)} "
              f"({megabytes(peak - idle)} above an idle interpreter, "
              f"{(peak - idle) / used_bytes:.2f}× the used columns)")
    # the machine's speed drifts from round to round, so each round's ratio of neighbours
    # (run one after the other) is reported too: its median is the steadier figure
    paired = {other: statistics.median(a / b for a, b in zip(times["prespec"], times[other]))
              for other in ("script", "limit")}
    print(f"  prespec / script = {median['prespec'] / median['script']:.2f} of the medians, "
          f"{paired['script']:.2f} median of the rounds' ratios  (target ≤ 0.5)")
    print(f"  prespec / limit  = {median['prespec'] / median['limit']:.2f} of the medians, "
          f"{paired['limit']:.2f} median of the rounds' ratios  (target ≤ 1.5)")
    prespec_peak = statistics.median(peaks["prespec"])
    print(f"  prespec memory above an idle interpreter = "
          f"{(prespec_peak - idle) / used_bytes:.2f}× the used columns (target ≤ 2)")
    print(f"  prespec memory above its loaded libraries ({megabytes(loaded)}, main process "
          f"and render child) = {(prespec_peak - loaded) / used_bytes:.2f}× the used columns")
    print(f"  prespec check start-up = {check:.3f} s  (target < 1)")
    print(f"  compute / limit  = {median['compute'] / median['limit']:.2f} of the medians "
          f"(prespec's work up to results.json, no report)")
    print(f"  report alone     = {report:.2f} s = {report / median['limit']:.2f}× the limit "
          f"(HTML and PDF in a warm process, median of 3)")


def streamed_big(rows: int, keep: bool) -> None:
    free = shutil.disk_usage(DATA if DATA.exists() else HERE).free
    need = rows * 420  # about 400 bytes a row, and some room
    if free < need:
        raise SystemExit(f"--streamed-big needs about {megabytes(need)} free under "
                         f"{DATA}; {megabytes(free)} are free")
    data = DATA / f"bench-{rows}.csv"
    plan = DATA / "bench-big.yaml"
    out_root = Path(tempfile.mkdtemp(prefix="prespec-bench-"))
    try:
        if not data.exists():
            print(f"writing {data.relative_to(ROOT)} ({rows:,} rows)", flush=True)
            started = time.perf_counter()
            generate(data, rows)
            print(f"  written in {time.perf_counter() - started:.0f} s, "
                  f"{data.stat().st_size / 1e9:.1f} GB", flush=True)
        write_plan(plan, data)
        wall, peak = measure(prespec_command(plan, out_root, ["--stream"]))
        print(f"\nstreamed run on {rows:,} rows ({data.stat().st_size / 1e9:.1f} GB CSV): "
              f"{wall:.1f} s, peak {megabytes(peak)} (target ≤ 1.5 GB)")
    finally:
        shutil.rmtree(out_root, ignore_errors=True)
        if not keep:
            data.unlink(missing_ok=True)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--keep", action="store_true", help="keep the generated data file")
    parser.add_argument("--streamed-big", action="store_true",
                        help="one streamed run on a CSV of --big-rows rows")
    parser.add_argument("--big-rows", type=int, default=20_000_000)
    args = parser.parse_args()
    if args.streamed_big:
        streamed_big(args.big_rows, args.keep)
    else:
        benchmark(args.rows, args.repeat, args.keep)


if __name__ == "__main__":
    main()
