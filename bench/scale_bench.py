"""What a run's cost grows with: unused columns, the number of analyses, the rows.

Usage (from the checkout):
    .venv/bin/python bench/scale_bench.py [--case wide|analyses|demo|all] [--repeat K]
                                          [--columns N] [--analyses N] [--rows N]

Writes seeded data and plans under bench/data/scale/ (git-ignored), then times
`prespec run --unlocked` on each case in a fresh process, with the peak resident memory of
its process tree (sampled every 10 ms, as bench/run.py does) and the CPU time of the run and
its children (steadier than wall time on a shared machine):

    wide      the demo plan on 600 demo rows plus --columns (default 30,000) columns the
              data dictionary does not declare; beside it the same plan on the demo rows
              alone, so the ratio is the cost of the unused columns
    analyses  --analyses (default 200) analyses on 300 demo rows: the demo's three analyses
              (gaussian, binomial, Poisson) repeated, each with a superiority decision;
              beside it the same plan with a tenth of the analyses, so the ratio shows how
              the cost grows (10 for linear)
    demo      the demo plan on --rows (default 1,000,000) demo rows; beside it 100,000 rows

Each case prints the medians of --repeat (default 1) runs, alternating the two sizes.
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
DATA = HERE / "data" / "scale"
PYTHON = sys.executable
PRESPEC = str(Path(PYTHON).parent / "prespec")
DEMO_PLAN = ROOT / "plans" / "dusk-sleep.yaml"

sys.path.insert(0, str(ROOT / "plans"))
sys.path.insert(0, str(HERE))
from make_demo_data import generate as demo_rows  # noqa: E402

# bench/run.py's sampler of the process tree's resident memory, and the CPU time of the
# finished tree (the render child is waited for by its parent, so its time is in
# RUSAGE_CHILDREN of the run)
from run import WRAPPER as _RUN_WRAPPER  # noqa: E402

WRAPPER = _RUN_WRAPPER[:_RUN_WRAPPER.index("start = time.perf_counter()")] + r"""
import tempfile
err = tempfile.TemporaryFile()  # a file, not a pipe: a full pipe would stall the run
start = time.perf_counter()
child = subprocess.Popen(sys.argv[1:], stdout=subprocess.DEVNULL, stderr=err)
peak = 0
while child.poll() is None:
    peak = max(peak, sum(resident(p) for p in tree(child.pid)))
    time.sleep(0.01)
wall = time.perf_counter() - start
usage = resource.getrusage(resource.RUSAGE_CHILDREN)
peak = max(peak, usage.ru_maxrss * 1024)
err.seek(0)
sys.stderr.write(err.read().decode(errors="replace"))
print(f"{child.returncode} {wall:.6f} {usage.ru_utime + usage.ru_stime:.6f} {peak}")
"""


def write_csv(path: Path, rows: int, extra_columns: int = 0) -> None:
    """The demo's invented rows, with ``extra_columns`` undeclared columns after them."""
    import csv

    records = demo_rows(rows, 20261202)
    path.parent.mkdir(parents=True, exist_ok=True)
    names = list(records[0])
    extra = [f"spare_{j:05d}" for j in range(1, extra_columns + 1)]
    with path.open("w", newline="", encoding="utf-8") as f:
        writer = csv.writer(f, lineterminator="\n")
        writer.writerow(names + extra)
        filler = [str(j % 10) for j in range(extra_columns)]
        for record in records:
            writer.writerow([record[n] for n in names] + filler)


def demo_plan(path: Path, data: Path) -> None:
    """The demo plan, reading ``data``."""
    text = DEMO_PLAN.read_text(encoding="utf-8")
    path.write_text(text.replace("path: data/dusk-sleep.csv", f"path: {data.name}"),
                    encoding="utf-8")


def many_analyses_plan(path: Path, data: Path, count: int) -> None:
    """The demo's dictionary and populations, and ``count`` analyses: its three repeated."""
    text = DEMO_PLAN.read_text(encoding="utf-8")
    head = text[:text.index("analyses:")].replace("path: data/dusk-sleep.csv",
                                                  f"path: {data.name}")
    shapes = [
        ("latency_w8", "gaussian", "all-randomised", None,
         [[], ["latency_w0", "age"], ["night_shift", "district", "screen_hours"]]),
        ("settled", "binomial", "all-randomised", None,
         [[], ["latency_w0", "age", "night_shift"]]),
        ("awakenings", "poisson", "per-protocol", "diary_nights",
         [[], ["age", "night_shift", "coffee_cups"]]),
    ]
    lines = [head.rstrip("\n"), "analyses:"]
    decisions = ["decisions:"]
    for k in range(count):
        outcome, family, population, offset, tiers = shapes[k % len(shapes)]
        lines += [f"  - id: a{k:03d}", f"    population: {population}",
                  f"    outcome: {outcome}", f"    family: {family}",
                  "    exposure: guidance"] + ([f"    offset: {offset}"] if offset else [])
        lines.append("    tiers:")
        for j, added in enumerate(tiers):
            lines.append(f"      - name: t{j}")
            if added:
                lines.append(f"        add: [{', '.join(added)}]")
        decisions += [f"  - id: H{k:03d}", f"    analysis: a{k:03d}", "    test: superiority",
                      "    level: coached", "    direction: two-sided"]
    path.write_text("\n".join(lines + decisions) + "\n", encoding="utf-8")


def measure(plan: Path, out_root: Path) -> tuple[float, float, int]:
    """(wall s, CPU s, peak bytes) of one `prespec run --unlocked` in a fresh process."""
    out = tempfile.mkdtemp(prefix=f"{plan.stem}-", dir=out_root)
    os.rmdir(out)
    done = subprocess.run([PYTHON, "-c", WRAPPER, PRESPEC, "run", str(plan), "--unlocked",
                           "--out", out], capture_output=True, text=True, cwd=ROOT)
    code, wall, cpu, peak = done.stdout.split()
    if code != "0":
        raise SystemExit(f"run failed ({code}) on {plan}:\n{done.stderr}")
    return float(wall), float(cpu), int(peak)


def compare(title: str, small: tuple[str, Path], large: tuple[str, Path], repeat: int,
            out_root: Path) -> None:
    found = {small[0]: [], large[0]: []}
    for _ in range(repeat):
        for name, plan in (small, large):
            found[name].append(measure(plan, out_root))
    print(title)
    for name, runs in found.items():
        wall, cpu, peak = (statistics.median(r[i] for r in runs) for i in range(3))
        print(f"  {name:28s} wall {wall:7.2f} s   CPU {cpu:7.2f} s   peak {peak / 2**20:7.0f} MiB")
    (s_wall, s_cpu, s_peak), (l_wall, l_cpu, l_peak) = (
        [statistics.median(r[i] for r in found[n]) for i in range(3)] for n in found)
    print(f"  ratio large/small: wall {l_wall / s_wall:.2f}, CPU {l_cpu / s_cpu:.2f}, "
          f"peak {l_peak / s_peak:.2f}", flush=True)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--case", choices=("wide", "analyses", "demo", "all"), default="all")
    parser.add_argument("--repeat", type=int, default=1)
    parser.add_argument("--columns", type=int, default=30_000)
    parser.add_argument("--analyses", type=int, default=200)
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--keep", metavar="DIR", help="write the bundles into DIR and keep "
                        "them (to compare their bytes across versions with cmp)")
    args = parser.parse_args()
    DATA.mkdir(parents=True, exist_ok=True)
    out_root = Path(args.keep) if args.keep else Path(tempfile.mkdtemp(prefix="prespec-scale-"))
    out_root.mkdir(parents=True, exist_ok=True)
    try:
        if args.case in ("wide", "all"):
            narrow, wide = DATA / "demo-600.csv", DATA / f"wide-{args.columns}.csv"
            if not narrow.exists():
                write_csv(narrow, 600)
            if not wide.exists():
                write_csv(wide, 600, args.columns)
            demo_plan(DATA / "narrow.yaml", narrow)
            demo_plan(DATA / "wide.yaml", wide)
            compare(f"demo plan, 600 rows, with and without {args.columns:,} unused columns",
                    ("13 columns", DATA / "narrow.yaml"),
                    (f"{args.columns:,} unused columns more", DATA / "wide.yaml"),
                    args.repeat, out_root)
        if args.case in ("analyses", "all"):
            rows300 = DATA / "demo-300.csv"
            if not rows300.exists():
                write_csv(rows300, 300)
            few = max(1, args.analyses // 10)
            many_analyses_plan(DATA / "few.yaml", rows300, few)
            many_analyses_plan(DATA / "many.yaml", rows300, args.analyses)
            compare(f"{few} and {args.analyses} analyses on 300 rows",
                    (f"{few} analyses", DATA / "few.yaml"),
                    (f"{args.analyses} analyses", DATA / "many.yaml"), args.repeat, out_root)
        if args.case in ("demo", "all"):
            small_rows = max(1, args.rows // 10)
            for rows in (small_rows, args.rows):
                data = DATA / f"demo-{rows}.csv"
                if not data.exists():
                    write_csv(data, rows)
                demo_plan(DATA / f"demo-{rows}.yaml", data)
            compare(f"demo plan on {small_rows:,} and {args.rows:,} rows",
                    (f"{small_rows:,} rows", DATA / f"demo-{small_rows}.yaml"),
                    (f"{args.rows:,} rows", DATA / f"demo-{args.rows}.yaml"),
                    args.repeat, out_root)
    finally:
        if not args.keep:
            import shutil

            shutil.rmtree(out_root, ignore_errors=True)


if __name__ == "__main__":
    main()
