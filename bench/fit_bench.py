"""Benchmark: four nested gaussian tiers on 1M rows × 21 columns against one QR.

Issue 4's figure: fitting the four tiers takes at most the time of one QR of the largest
design plus 20 %. Measured three ways, alternating, median of --repeats runs:
  qr        numpy.linalg.qr(X, mode="r") of the 1M × 21 design (LAPACK, the yardstick)
  qr1       the same on one BLAS thread (the fit runs its LAPACK calls on one thread)
  tsqr      compiler.qr.augmented_r alone: the chunked QR of [X | y] the fit is built on
  core      compiler.fit without the report-tier diagnostics: size and rank checks, the one
            chunked QR of [X | y], coefficients, SEs, RSS, F for all four tiers, exposure rows
  full      compiler.fit.fit as the pipeline calls it (core + VIF, Shapiro/D'Agostino,
            Breusch–Pagan, leverages, Cook's distance, studentized residuals)

    .venv/bin/python bench/fit_bench.py [--rows 1000000] [--repeats 5]
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np

from compiler import fit as fit_pass
from compiler.covariance import distinct_covariances
from compiler.fit_gaussian import fit_gaussian
from compiler.fitted import Design
from compiler.plan import Analysis, DataSource, Plan, Study, Term, Tier, Variable
import scipy.linalg  # noqa: F401  (loaded before any thread limit is set)

from compiler.qr import augmented_r, one_blas_thread

WIDTHS = (2, 7, 14, 21)  # intercept + exposure; then 5, 7, 7 covariates


def make_problem(rows: int, seed: int = 2024):
    rng = np.random.default_rng(seed)
    p = WIDTHS[-1]
    x = np.empty((rows, p))
    x[:, 0] = 1.0
    x[:, 1] = rng.integers(0, 2, rows)  # binary exposure
    x[:, 2:] = rng.standard_normal((rows, p - 2))
    beta = rng.normal(size=p)
    y = x @ beta + rng.standard_normal(rows)
    names = ["exposure"] + [f"c{j}" for j in range(2, p)]
    terms, tiers = (), []
    for k, width in enumerate(WIDTHS):
        added = tuple(Term("variable", (name,)) for name in names[len(terms):width - 1])
        terms = terms + added
        tiers.append(Tier(f"tier{k}", added if k else (), terms))
    analysis = Analysis(id="bench", outcome="y", family="gaussian", exposure="exposure",
                        tiers=tuple(tiers), report_tier=tiers[-1].name)
    variables = tuple(Variable(n, "continuous") for n in ["y"] + names)
    plan = Plan(1, Study("bench"), DataSource(None, "csv"), variables, (), (analysis,))
    design = Design(analysis="bench", x=x, y=y, offset=None,
                    labels=tuple(["intercept"] + names), column_term=tuple(["intercept"] + names),
                    tier_names=tuple(t.name for t in tiers), tier_width=WIDTHS,
                    exposure_columns=(1,), row_ids=None)
    return plan, analysis, design


def core_fit(plan, analysis, design):
    """compiler.fit.fit minus the diagnostics, step for step."""
    fit_pass._check_sizes(analysis, design)
    r = augmented_r(design.x, design.y)
    fit_pass._check_rank(plan, analysis, design, r)
    fitted = fit_gaussian(analysis, design, r, distinct_covariances(plan, analysis))
    return fit_pass.exposure_across_tiers(fitted.tiers, "gaussian", 0.95)


def _one_thread(run):
    with one_blas_thread(10 ** 9):
        return run()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args()
    plan, analysis, design = make_problem(args.rows)
    runs = {
        "qr": lambda: np.linalg.qr(design.x, mode="r"),
        "qr1": lambda: _one_thread(lambda: np.linalg.qr(design.x, mode="r")),
        "tsqr": lambda: augmented_r(design.x, design.y),
        "core": lambda: core_fit(plan, analysis, design),
        "full": lambda: fit_pass.fit(plan, analysis, design),
    }
    for run in runs.values():  # warm up: imports, page faults
        run()
    times: dict[str, list[float]] = {name: [] for name in runs}
    for _ in range(args.repeats):
        for name, run in runs.items():
            start = time.perf_counter()
            run()
            times[name].append(time.perf_counter() - start)
    median = {name: statistics.median(t) for name, t in times.items()}
    print(f"design {args.rows} × {WIDTHS[-1]}, tiers of {WIDTHS} columns, "
          f"median of {args.repeats} alternating runs")
    for name, t in median.items():
        print(f"  {name:5s} {t:8.3f} s   (all: {', '.join(f'{v:.3f}' for v in times[name])})")
    for base in ("qr", "qr1"):
        print(f"  core / {base} = {median['core'] / median[base]:.2f}   (target ≤ 1.20)"
              f"   full / {base} = {median['full'] / median[base]:.2f}")
    print(f"  core / tsqr = {median['core'] / median['tsqr']:.2f}   (the fit beyond its own QR)")


if __name__ == "__main__":
    main()
