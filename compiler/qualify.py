"""`prespec qualify [--out DIR]`: run the reference problems on this installation and seal
the evidence as a bundle (qualification.json, report.html, report.pdf, manifest.json).

Each problem of compiler/qualify_problems.py is written as plan.yaml and data.csv in a
temporary folder and run through the code `prespec run --unlocked` runs: compile_plan, then
analyse (read, bind, design, fit, decide), then the results document and its canonical
bytes, written as results.json; the values are read back from that file
(compiler/readback.py). Only the report and the seal of each problem's own bundle are left
out. A problem prespec refuses (an aliased design, say) is recorded as refused, with its
message, and its checks fail. Holm's example and the handbook quantiles call the functions
the pipeline calls (compiler/qualify_checks.py).

Nothing is fetched: the data ship with the package (reference/) or come from the installed
statsmodels. Two runs on one installation give the same bytes but for the manifest's time.
"""

from __future__ import annotations

import json
import tempfile
from pathlib import Path

from .canonical import canonical_bytes, sha256_hex
from .problems import Exit, Stop

FORMAT = "prespec-qualification/1"
STAMP = "QUALIFICATION"
FILE = "qualification.json"
DEFAULT_OUT = Path("out") / "qualification"


def qualify(out=None, progress: bool = True):
    from . import seal
    from .bundle import _say
    from .cli import Report
    from .lock import now_utc
    from .qualify_report import render

    target = seal.target_folder(out, DEFAULT_OUT)
    seal.check_target(target)
    _say(progress, "running the reference problems")
    document = qualification_document()
    qualification_bytes = canonical_bytes(document)
    _say(progress, "rendering the qualification report")
    html, pdf = render(document, sha256_hex(qualification_bytes))
    files = {FILE: qualification_bytes, "report.html": html, "report.pdf": pdf}
    manifest = seal.seal(target, files, manifest_about(document, qualification_bytes),
                         run_at=now_utc())
    failed = [c for c in document["checks"] if not c["passed"]]
    lines = [f"qualification {target}: {len(document['checks']) - len(failed)} of "
             f"{len(document['checks'])} checks within tolerance"
             + ("" if failed else ": this installation is qualified")]
    lines += [f"  missed: {c['id']}: {c['quantity']}: {_shown(c)}" for c in failed]
    lines += [f"  not yet expressible: {n['id']} (needs {n['needs']})"
              for n in document["not_yet_expressible"]]
    return Report(exit_code=Exit.QUALIFICATION_MISSED if failed else Exit.OK, lines=lines,
                  payload={"bundle": str(target), "qualified": not failed,
                           "checks": len(document["checks"]),
                           "failed": [c["id"] for c in failed],
                           "digests": {"qualification": sha256_hex(qualification_bytes),
                                       "manifest": manifest["manifest_sha256"]}})


def manifest_about(document: dict, qualification_bytes: bytes) -> dict:
    """What the manifest says of a qualification (verify checks it against the file)."""
    return {"stamp": STAMP, "environment": document["environment"],
            "qualification": {"sha256": sha256_hex(qualification_bytes),
                              "qualified": document["qualified"],
                              "checks": len(document["checks"]),
                              "failed": sum(not c["passed"] for c in document["checks"])}}


def _shown(check: dict) -> str:
    if check["rule"] in ("lre", "rounded"):
        lre = "none" if check["lre"] is None else f"{check['lre']:g}"
        return f"value {check['value']}, reference {check['reference']}, LRE {lre} < {check['tolerance']:g}"
    return f"value {check['value']}, expected {check['reference'] if check['rule'] == 'equal' else 'none'}"


def qualification_document() -> dict:
    from .qualify_checks import holm_checks, quantile_checks
    from .qualify_problems import NOT_YET_EXPRESSIBLE, problems

    checks, outcomes = [], []
    with tempfile.TemporaryDirectory(prefix="prespec-qualify-") as folder:
        for problem in problems():
            found, outcome = run_problem(problem, Path(folder) / problem.id)
            checks += found
            outcomes.append({"id": problem.id, "title": problem.title, "source": problem.source,
                             "tolerance_basis": problem.tolerance_basis, "outcome": outcome})
    checks += holm_checks() + quantile_checks()
    return {"format": FORMAT, "qualified": all(c["passed"] for c in checks),
            "scope": "this installation of prespec on this machine, and nothing else",
            "problems": outcomes, "checks": checks,
            "not_yet_expressible": [dict(n) for n in NOT_YET_EXPRESSIBLE],
            "environment": qualification_environment()}


def run_problem(problem, folder: Path) -> tuple[list, str]:
    """Write the problem as plan.yaml and data.csv, run it as `run --unlocked` does, read the
    values back from its results.json; (check records, outcome in words)."""
    from . import results
    from .bundle import results_document
    from .columns import design_labels
    from .pipeline import Stamp, analyse, compile_plan, data_path_for
    from .qualify_checks import problem_checks, refused

    folder.mkdir(parents=True)
    plan_path = folder / "plan.yaml"
    plan_path.write_text(problem.plan_yaml, encoding="utf-8")
    (folder / "data.csv").write_text(problem.data_csv, encoding="utf-8")
    try:
        plan = compile_plan(plan_path)
        analysed = analyse(plan, data_path_for(plan, None))
    except Stop as stop:
        why = "; ".join(p.message for p in stop.problems)
        return refused(problem, f"refused (exit {int(stop.exit_code)}): {why}"), \
            f"refused by prespec (exit {int(stop.exit_code)}): {why}"
    document = results_document(analysed, Stamp(preregistered=False),
                                plan_bytes=plan_path.read_bytes(), state=None, settings=None)
    (folder / "results.json").write_bytes(results.to_bytes(document))
    written = json.loads((folder / "results.json").read_text(encoding="utf-8"))
    (analysis,) = plan.analyses
    labels = design_labels(plan, analysis)[[t.name for t in analysis.tiers].index(problem.tier)]
    return problem_checks(problem, written, labels), "fitted"


def qualification_environment() -> dict:
    """Library versions (as every bundle records them, plus the BLAS and LAPACK libraries
    numpy and scipy loaded, as threadpoolctl sees them) and the processor."""
    from .environment import environment

    return {"libraries": environment(), "blas": _blas(), "cpu": _cpu()}


def _blas() -> list[dict]:
    import numpy  # noqa: F401 - load the BLAS numpy and scipy use before asking
    import scipy.linalg  # noqa: F401
    from threadpoolctl import threadpool_info

    keep = ("user_api", "internal_api", "version", "architecture", "threading_layer",
            "num_threads")
    return sorted(({k: info.get(k) for k in keep if k in info} for info in threadpool_info()),
                  key=lambda i: json.dumps(i, sort_keys=True))


def _cpu() -> dict:
    import os
    import platform

    model = None
    try:
        for line in Path("/proc/cpuinfo").read_text(encoding="utf-8", errors="replace").splitlines():
            if line.lower().startswith("model name"):
                model = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    return {"model": model or platform.processor() or None, "machine": platform.machine(),
            "logical_cores": os.cpu_count()}
