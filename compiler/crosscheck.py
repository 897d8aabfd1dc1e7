"""What verify establishes from a bundle's own contents, with no secret and no data.

A forger who can edit any file and recompute every digest passes the manifest's checks; these
are the checks such a forger must also pass, each reading only the bundle:

- results.json is JSON and follows schemas/results.schema.json;
- plan.yaml compiles, and its canonical digest, recomputed from the bundled bytes, is the one
  the manifest, results.json and (when there is one) the lock record;
- the stamp agrees with results.json (``preregistered``, ``rehearsal``) and with
  plan.lock.json: a real lock, intact by its own chain, under PRE-REGISTERED; exactly the
  stub the run writes otherwise; results.json's lock digest, times and amendments are the
  bundled lock's;
- the manifest's data and environment records are results.json's, and results.json's plan
  and analysis headers follow from the plan;
- every verdict and assumption outcome is the one the decide pass gives on the numbers
  results.json stores (stored_fits).

Not re-derivable offline: the fits' numbers themselves, and the content of report.html and
report.pdf (sealed by their digests). ``verify --data`` re-runs the plan for those numbers.
"""

from __future__ import annotations

import json
from pathlib import Path

from .canonical import canonical_bytes, differences, sha256_hex
from .problems import Problem, Stop

MAX_LISTED = 8  # differences or schema errors named per problem


def _fail(message: str, name: str) -> Problem:
    return Problem(message, code="not-intact", details={"file": name})


def _listed(items: list[str]) -> str:
    shown = items[:MAX_LISTED]
    more = [f"… and {len(items) - len(shown)} more"] if len(items) > len(shown) else []
    return "".join(f"\n  {item}" for item in [*shown, *more])


def read_json(path: Path) -> tuple[object, str | None]:
    """The parsed JSON of a bundle file, or why it is not JSON prespec wrote (files.parse_json)."""
    from .files import MIB, parse_json, read_regular

    try:
        return parse_json(read_regular(path, 64 * MIB))
    except OSError as exc:
        return None, f"it cannot be read ({exc.strerror or exc})"


def schema_errors(document) -> list[str]:
    from jsonschema import Draft202012Validator

    from .resources import schema_path

    schema = json.loads(schema_path("results.schema.json").read_text(encoding="utf-8"))
    try:
        errors = sorted(Draft202012Validator(schema).iter_errors(document),
                        key=lambda e: [str(p) for p in e.absolute_path])
    except RecursionError:
        return ["it is nested too deeply to be a results document"]
    return [f"at {'/'.join(str(p) for p in e.absolute_path) or 'the top'}: {e.message}"
            for e in errors]


def check_contents(folder: Path, manifest: dict) -> tuple[list[Problem], list[str]]:
    """Every cross-check of a bundle whose files match its manifest: (problems, what was
    established, as lines)."""
    try:
        return _check_contents(folder, manifest)
    except (KeyError, TypeError, AttributeError, RecursionError) as exc:  # a last guard
        return [_fail(f"results.json: lacks a part every results document has, or holds it "
                      f"in another shape ({type(exc).__name__}: {exc})", "results.json")], []


def _check_contents(folder: Path, manifest: dict) -> tuple[list[Problem], list[str]]:
    results, why = read_json(folder / "results.json")
    if why is None and not isinstance(results, dict):
        why = "it is not a JSON object"
    if why is not None:
        return [_fail(f"results.json: {why}", "results.json")], []
    errors = schema_errors(results)
    if errors:
        return [_fail("results.json: does not follow its schema (results.schema.json):"
                      + _listed(errors), "results.json")], []
    plan, problems = _compiled(folder)
    lock_problems, lock_words, lock_plan = _stamp_and_lock(folder, manifest, results)
    problems += lock_problems
    problems += _records(manifest, results)
    lines = [f"  stamp {manifest['stamp']} agrees with results.json and plan.lock.json "
             f"({lock_words})"]
    if plan is None:
        return problems, lines
    digest_problem, said = _plan_digest(folder, plan, manifest, results, lock_plan)
    problems += digest_problem + _headers(folder, plan, results)
    lines.append(f"  plan sha256 {said}")
    derived, line = _verdicts(plan, results)
    problems += derived
    lines += [line] if line else []
    return problems, lines


def _compiled(folder: Path):
    from .pipeline import compile_plan

    try:
        return compile_plan(folder / "plan.yaml"), []
    except Stop as stop:
        listed = _listed([p.format() for p in stop.problems])
        return None, [_fail(f"plan.yaml: the bundled plan is not a valid plan, so nothing "
                            f"in the bundle can be checked against it:{listed}", "plan.yaml")]


def _stamp_and_lock(folder: Path, manifest: dict, results: dict):
    """(problems, how the lock reads, the plan digest a real lock holds or None)."""
    from .bundle import LOCK_STUB_FORMAT, lock_stub
    from .lock import LOCK_FORMAT, LockState, check_lock
    from .pipeline import Stamp
    from .results import lock_record

    problems = []
    preregistered, rehearsal = results["preregistered"], results["rehearsal"]
    stamp = Stamp(preregistered=preregistered, rehearsal=rehearsal)
    said = (f"preregistered: {json.dumps(preregistered)}, rehearsal: {json.dumps(rehearsal)}")
    if preregistered and rehearsal:
        problems.append(_fail(f"results.json: says both preregistered and rehearsal ({said}); "
                              "a rehearsal is never pre-registered", "results.json"))
    if manifest["stamp"] != stamp.banner:
        problems.append(_fail(f"manifest.json: stamp {manifest['stamp']}, but results.json says "
                              f"{stamp.banner} ({said})", "manifest.json"))
    for part in ("rehearsal_note", "rehearsal_settings"):
        if (results[part] is not None) != bool(rehearsal):
            problems.append(_fail(f"results.json: {part} is "
                                  f"{'missing' if rehearsal else 'present'}, but rehearsal is "
                                  f"{json.dumps(rehearsal)}", "results.json"))
    data = (folder / "plan.lock.json").read_bytes()
    lock, why = read_json(folder / "plan.lock.json")
    kind = lock.get("format") if isinstance(lock, dict) else None
    if not preregistered:
        if kind == LOCK_FORMAT:
            problems.append(_fail(f"plan.lock.json: a real lock, but results.json says {said}: "
                                  "a run that matched a lock is PRE-REGISTERED", "plan.lock.json"))
        elif data != lock_stub(stamp):
            problems.append(_fail(f"plan.lock.json: not the stub a {stamp.banner} bundle holds "
                                  f"({LOCK_STUB_FORMAT}, naming its stamp and why there is no "
                                  "lock)", "plan.lock.json"))
        if results["lock"] is not None or results["amendments"]:
            problems.append(_fail("results.json: records a lock or amendments, but says "
                                  f"{said}", "results.json"))
        return problems, "a lock stub", None
    if kind != LOCK_FORMAT:
        what = "a stub (no lock)" if kind == LOCK_STUB_FORMAT else f"not a lock ({why or kind})"
        problems.append(_fail(f"plan.lock.json: {what}, but results.json says {said}",
                              "plan.lock.json"))
        return problems, "no lock", None
    broken = check_lock(lock)
    if broken:
        problems += [_fail(f"plan.lock.json: {p}", "plan.lock.json") for p in broken]
        return problems, "a broken lock", None
    state = LockState(folder / "plan.lock.json", sha256_hex(data), lock, data)
    recorded = lock_record(state, sha256_hex((folder / "plan.yaml").read_bytes()))
    changed = differences(results["lock"], recorded, path="lock")
    changed += differences(results["amendments"], state.amendments, path="amendments")
    if changed:
        problems.append(_fail("results.json: its lock record is not the bundled plan.lock.json "
                              "(results.json → plan.lock.json):" + _listed(changed),
                              "results.json"))
    count = len(state.amendments)
    words = (f"a lock frozen at {state.frozen_at}, {count} amendment{'s' * (count != 1)}, "
             "its chain intact")
    return problems, words, state.plan_sha256


def _records(manifest: dict, results: dict) -> list[Problem]:
    """The manifest's own copies of results.json's records."""
    data, plan = manifest.get("data") or {}, manifest.get("plan") or {}
    copies = {"data.sha256": data.get("sha256"), "data.file": data.get("file"),
              "environment": manifest.get("environment"), "plan.id": plan.get("id")}
    stored = {"data.sha256": results["data"]["sha256"], "data.file": results["data"]["file"],
              "environment": results["environment"], "plan.id": results["plan"]["id"]}
    changed = [f"{name}: {json.dumps(copies[name], ensure_ascii=False)} in the manifest, "
               f"{json.dumps(stored[name], ensure_ascii=False)} in results.json"
               for name in copies if copies[name] != stored[name]]
    return [_fail("manifest.json: disagrees with results.json:" + _listed(changed),
                  "manifest.json")] if changed else []


def _plan_digest(folder: Path, plan, manifest: dict, results: dict, lock_plan: str | None):
    from .canonical import plan_digest

    digest = plan_digest(plan)
    recorded = {"manifest.json": (manifest.get("plan") or {}).get("sha256"),
                "results.json": results["plan"]["sha256"]}
    if lock_plan is not None:
        recorded["plan.lock.json"] = lock_plan
    wrong = {name: value for name, value in recorded.items() if value != digest}
    if wrong:
        listed = ", ".join(f"{name} ({str(value)[:12]})" for name, value in wrong.items())
        return [_fail(f"plan.yaml: its canonical digest {digest[:12]}, recomputed from the "
                      f"bundled bytes, differs from the plan sha256 recorded in {listed}",
                      "plan.yaml")], ""
    names = list(recorded)
    return [], (f"{digest[:12]}, recomputed from plan.yaml, agrees with "
                + (", ".join(names[:-1]) + " and " + names[-1]))


def _headers(folder: Path, plan, results: dict) -> list[Problem]:
    """results.json's plan and analysis headers against the bundled plan."""
    from .results import analysis_header, plan_header

    file_sha = sha256_hex((folder / "plan.yaml").read_bytes())
    expected = {**plan_header(plan, file_sha), "sha256": results["plan"]["sha256"]}
    changed = differences(results["plan"], expected, path="plan")
    stored = {a["id"]: a for a in results["analyses"]}
    for analysis in plan.analyses:
        if analysis.id in stored:
            header = analysis_header(plan, analysis)
            changed += differences({k: stored[analysis.id].get(k) for k in header}, header,
                                   path=f"analyses[{analysis.id}]")
    if not changed:
        return []
    return [_fail("results.json: does not follow the bundled plan (results.json → plan.yaml):"
                  + _listed(changed), "results.json")]


def _verdicts(plan, results: dict) -> tuple[list[Problem], str | None]:
    from .stored_fits import mismatch, settled

    shape = mismatch(plan, results)
    if shape:
        return [_fail(f"results.json: its analyses are not the bundled plan's: {shape}",
                      "results.json")], None
    try:
        decisions, assumptions = settled(plan, results)
    except (KeyError, IndexError, StopIteration, TypeError, ValueError, AttributeError,
            ArithmeticError) as exc:
        return [_fail(f"results.json: its numbers cannot be read by the decision rules "
                      f"({type(exc).__name__}: {exc})", "results.json")], None
    stored = {"decisions": results["decisions"], "assumptions": results["assumptions"]}
    derived = {"decisions": decisions, "assumptions": assumptions}
    if canonical_bytes(stored) != canonical_bytes(derived):
        changed = [*differences(stored["decisions"], decisions, path="decisions"),
                   *differences(stored["assumptions"], assumptions, path="assumptions")]
        changed = changed or ["the same values, written in another form"]
        return [_fail("results.json: its verdicts are not those the plan's decision rules give "
                      "on its own stored numbers (stored → re-derived):" + _listed(changed),
                      "results.json")], None
    d, a = len(decisions), len(assumptions)
    return [], (f"  results.json follows its schema; {d} verdict{'s' * (d != 1)} and {a} "
                f"assumption check{'s' * (a != 1)} re-derived from the stored numbers")
