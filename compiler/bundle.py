"""`prespec run` and `prespec rehearse`: from a plan and its data to a sealed bundle.

    compile → lock check (run only) → read, bind, design, fit, decide → results.json
            → report.html, report.pdf → seal (manifest.json, read-only, renamed into place)

Every check that can refuse the run (plan, lock, existing bundle, signing key, data
contract) comes before anything is written, so exit 2, 3 and 4 leave nothing behind.

Bundle files: results.json, report.html, report.pdf, plan.yaml (the exact bytes run),
plan.lock.json and manifest.json (+ manifest.sig when signed). plan.lock.json is the lock the
run matched; for ``--unlocked`` runs and rehearsals, which match no lock, it is a stub
(``{"format": "prespec-lock-stub/1", "locked": false, ...}``) saying why there is none.

The report's dates come from ``SOURCE_DATE_EPOCH`` when set, else from the time the plan
was frozen (its last amendment, if any), else from 1970-01-01 — never from the clock.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

from .canonical import canonical_bytes, sha256_hex
from .problems import Exit

LOCK_STUB_FORMAT = "prespec-lock-stub/1"
STUB_REASON = {"unlocked": "this run did not use a lock (--unlocked)",
               "rehearsal": "a rehearsal never uses a lock"}
DEFAULT_REHEARSAL_ROWS = 500


def run(plan_path, *, data=None, out=None, unlocked=False, stream=None, sign_key=None,
        progress=True):
    """The confirmatory run. Exit 4 unless the plan matches its lock (or ``unlocked``)."""
    from . import load, lock, seal
    from .renderer import Renderer
    from .pipeline import Stamp, analyse, compile_plan, data_path_for, named_data_path

    plan_bytes = load.plan_bytes(plan_path, missing_ok=True)  # compile_plan says why not
    with Renderer() as renderer:
        # the render child's imports take longer than the plan's checks and the lock's:
        # it starts as soon as the plan file has named its data (and is stopped on refusal)
        plan = compile_plan(plan_path, loaded=lambda tree: renderer.start_for(
            named_data_path(tree, data)))
        state = None if unlocked else lock.require_match(plan, plan_path)
        target = seal.target_folder(out, Path("out") / plan.study.id)
        seal.check_target(target)
        key = seal.load_signing_key(sign_key) if sign_key else None
        data_path = data_path_for(plan, data)
        _say(progress, f"reading and fitting {data_path}")
        stamp = Stamp(preregistered=state is not None)
        # no local holds the analysis: _finish lets the data go before the report (see there)
        return _finish(analyse(plan, data_path, stream=stream, progress=progress), stamp,
                       plan_bytes=plan_bytes, state=state, target=target,
                       key=key, settings=None, progress=progress, renderer=renderer)


def rehearse(plan_path, *, data=None, scramble=None, out=None, seed=0, rows=None,
             effects=(), progress=True):
    """A rehearsal on synthetic data, or on real data with one column scrambled.
    ``effects`` are the `--effect` specs (compiler/effects.py), for synthetic data only."""
    from . import load, seal
    from .effects import read_effects
    from .renderer import Renderer
    from .pipeline import Stamp, analyse, compile_plan, data_path_for
    from .problems import Exit, Problem, Stop

    plan_bytes = load.plan_bytes(plan_path, missing_ok=True)  # compile_plan says why not
    plan = compile_plan(plan_path)
    if data is not None and scramble is None:
        raise Stop([Problem("rehearse --data needs --scramble VAR: a rehearsal on real, "
                            "unscrambled data would unblind the study", code="no-scramble")],
                   Exit.PLAN_INVALID)
    if scramble is not None and effects:
        raise Stop([Problem(
            f"--effect {effects[0]}: an effect cannot be planted in scrambled real data: its "
            "outcomes are the real ones, and scrambling the exposure sets every effect to none",
            code="effect-scrambled",
            hint="plant effects in synthetic data (leave out --data and --scramble)")],
            Exit.PLAN_INVALID)
    planted = read_effects(plan, effects)
    target = seal.target_folder(out, Path("out") / f"{plan.study.id}-rehearsal")
    seal.check_target(target)
    if scramble is not None:
        settings = {"source": "scrambled", "seed": seed, "rows": None, "effect": None,
                    "effects": [], "scramble": scramble}
        data_path = data_path_for(plan, data)
        note = f"{data_path.name} with {scramble} scrambled, seed {seed}"
    else:
        count = rows if rows is not None else (plan.data.expected_rows or DEFAULT_REHEARSAL_ROWS)
        settings = {"source": "synthetic", "seed": seed, "rows": count, "effect": None,
                    "effects": [e.as_json() for e in planted], "scramble": None}
        data_path = None
        note = f"synthetic data, {count} rows, seed {seed}" + (
            ", planted effects " + ", ".join(e.describe() for e in planted) if planted else "")
    with Renderer.for_data(data_path) as renderer:
        _say(progress, f"rehearsing on {note}")
        stamp = Stamp(preregistered=False, rehearsal=True, note=note)
        return _finish(analyse(plan, data_path, table=rehearsal_table(plan, settings, data_path)),
                       stamp, plan_bytes=plan_bytes, state=None, target=target, key=None,
                       settings=settings, progress=progress, renderer=renderer)


def rehearsal_table(plan, settings: dict, data_path):
    """The table a rehearsal runs on, made again from its settings (verify uses this too)."""
    from . import read
    from .effects import from_json
    from .rehearse import scrambled_table, synthetic_table

    if settings["source"] == "scrambled":
        return scrambled_table(plan, read.read(plan, data_path), settings["scramble"],
                               settings["seed"])
    return synthetic_table(plan, rows=settings["rows"], seed=settings["seed"],
                           effects=from_json(settings.get("effects") or ()))


def results_document(analysed, stamp, *, plan_bytes: bytes, state, settings) -> dict:
    """The results document. Its decisions and assumption outcomes are those the decide pass
    gives on the document's own stored numbers (stored_fits.settled), so that `verify` can
    re-derive every verdict from results.json alone and must find the same records."""
    from . import results
    from .environment import environment
    from .stored_fits import settled

    document = results.build(analysed, stamp=stamp, plan_file_sha256=sha256_hex(plan_bytes),
                             lock=state, environment=environment(),
                             rehearsal_settings=settings)
    document["decisions"], document["assumptions"] = settled(analysed.plan, document)
    return document


def lock_stub(stamp) -> bytes:
    """plan.lock.json of a bundle that matches no lock (``--unlocked`` runs, rehearsals):
    the stub says why; verify expects exactly these bytes for the bundle's stamp."""
    why = (STUB_REASON["rehearsal"] if stamp.rehearsal else STUB_REASON["unlocked"])
    return canonical_bytes({"format": LOCK_STUB_FORMAT, "locked": False, "stamp": stamp.banner,
                            "why": why})


def report_epoch(state) -> int:
    """SOURCE_DATE_EPOCH when set (reproducible-builds.org), else the freeze time, else 0."""
    from .lock import epoch_of

    given = os.environ.get("SOURCE_DATE_EPOCH", "").strip()
    if given.isdigit():
        return int(given)
    if state is not None:
        return epoch_of(state.amended_at or state.frozen_at)
    return 0


def render(document: dict, results_bytes: bytes, fits, epoch: int,
           renderer=None) -> tuple[bytes, bytes]:
    """report.html and report.pdf, each rendered once from the results document, by
    ``renderer`` (compiler/renderer.py; by default, here)."""
    from .plots import ResidualSample
    from .renderer import Renderer

    plots = {fit.analysis: ResidualSample.of(fit.diagnostics.fitted, fit.diagnostics.residuals)
             for fit in fits if fit.diagnostics is not None}
    renderer = renderer or Renderer(child=False)
    return renderer.render(document, plots, sha256_hex(results_bytes), epoch)


def _finish(analysed, stamp, *, plan_bytes, state, target, key, settings,
            progress, renderer=None):
    from . import results, seal
    from .cli import Report
    from .lock import now_utc

    document = results_document(analysed, stamp, plan_bytes=plan_bytes, state=state,
                                settings=settings)
    fits = analysed.fits
    # The report needs the document and the fits' residuals only: with the last reference to
    # the analysis gone, the data's columns are freed before the report is rendered.
    del analysed
    results_bytes = results.to_bytes(document)
    _say(progress, "rendering the report")
    html, pdf = render(document, results_bytes, fits, report_epoch(state), renderer)
    lock_bytes = state.data if state is not None else lock_stub(stamp)
    files = {"results.json": results_bytes, "report.html": html, "report.pdf": pdf,
             "plan.yaml": plan_bytes, "plan.lock.json": lock_bytes}
    about = {"stamp": stamp.banner,
             "plan": {"id": document["plan"]["id"], "sha256": document["plan"]["sha256"],
                      "file_sha256": document["plan"]["file_sha256"]},
             "data": {"sha256": document["data"]["sha256"], "file": document["data"]["file"]},
             "results": {"sha256": sha256_hex(results_bytes)},
             "environment": document["environment"]}
    _say(progress, f"sealing {target}")
    manifest = seal.seal(target, files, about, run_at=now_utc(), key=key)
    return Report(exit_code=exit_code(document), lines=summary_lines(target, document, stamp),
                  payload=_payload(target, document, manifest))


def exit_code(document: dict) -> Exit:
    """0, or 6 for a rehearsal that shows the plan would not decide (a tier that cannot be
    fitted, a rule left undetermined), so that CI stops before the plan is frozen. A run's
    verdicts never change its exit code: a negative result is a result."""
    if document["rehearsal"] and rehearsal_findings(document):
        return Exit.WOULD_NOT_DECIDE
    return Exit.OK


def summary_lines(target, document: dict, stamp) -> list[str]:
    lines = [f"bundle {target}: {stamp.banner}"
             + (f" ({stamp.note})" if stamp.rehearsal and stamp.note else "")]
    lines += [f"{d['id']} {d['verdict']} — {d['reason']}" for d in document["decisions"]]
    if stamp.rehearsal:
        to_fix = rehearsal_findings(document)
        if to_fix:
            lines.append(f"rehearsal: the plan would not decide (exit {int(Exit.WOULD_NOT_DECIDE)}); "
                         "fix before freezing:")
            lines += [f"  {item}" for item in to_fix]
        else:
            lines.append("rehearsal: every tier fitted, every rule evaluable")
    return lines


def rehearsal_findings(document: dict) -> list[str]:
    """What a rehearsal is for: tiers that did not fit cleanly and rules not evaluable."""
    found = []
    for analysis in document["analyses"]:
        for tier in analysis["tiers"]:
            if not tier["converged"] or tier["reason"]:
                why = tier["reason"] or "the fit did not converge"
                found.append(f"analyses[{analysis['id']}].tiers[{tier['name']}]: {why}")
    found += [f"{d['id']} undetermined — {d['reason']}" for d in document["decisions"]
              if d["verdict"] == "undetermined"]
    return found


def _payload(target, document: dict, manifest: dict) -> dict:
    return {"bundle": str(target), "stamp": manifest["stamp"],
            "verdicts": [{"id": d["id"], "verdict": d["verdict"], "reason": d["reason"]}
                         for d in document["decisions"]],
            "digests": {"plan": document["plan"]["sha256"],
                        "plan_file": document["plan"]["file_sha256"],
                        "data": document["data"]["sha256"],
                        "results": manifest["results"]["sha256"],
                        "manifest": manifest["manifest_sha256"]},
            **({"rehearsal": {"ready": not rehearsal_findings(document),
                              "to_fix": rehearsal_findings(document)}}
               if document["rehearsal"] else {})}


def _say(progress: bool, message: str) -> None:
    if progress and sys.stderr.isatty():
        print(f"prespec: {message}…", file=sys.stderr, flush=True)
