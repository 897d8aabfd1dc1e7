"""`prespec compare A B`: every difference between two sealed bundles, named.

Both folders are first checked as `prespec verify` checks them (verify.check_bundle): a folder
that is no bundle (missing, or without a readable manifest.json) is exit 2; a bundle that is
not intact is exit 5, with verify's findings. Otherwise the command exits 0 whatever it finds:
a difference is a finding, not a fault.

What is named, by kind: the stamp; the plan, path-style as the lock names a changed plan
(``analyses[primary].confidence: 0.95 → 0.9``, from both bundles' plan.yaml); the data (file,
sha256, rows read); the environment; every verdict that changed; every other value of
results.json that changed beyond rounding — two numbers are the same when they differ by no
more than ``RELATIVE`` = 1e-9 of the larger in size (a number against null, or an integer
count, always differs); and the amendment log entries one bundle's run carried and the
other's did not. Two qualification bundles are compared check by check and by environment.
"""

from __future__ import annotations

from pathlib import Path

from . import readback
from .canonical import differences, show
from .problems import Exit, Problem, Stop

RELATIVE = 1e-9
KINDS = ("stamp", "plan", "data", "environment", "verdicts", "values", "amendments")


def same_within_rounding(a, b) -> bool:
    if isinstance(a, bool) or isinstance(b, bool):
        return a is b
    if isinstance(a, float) or isinstance(b, float):
        if isinstance(a, (int, float)) and isinstance(b, (int, float)):
            return abs(a - b) <= RELATIVE * max(abs(a), abs(b))
        return False
    return type(a) is type(b) and a == b


def compare(first, second):
    from .cli import Report

    folders = (Path(first), Path(second))
    manifests = [_intact(folder) for folder in folders]
    from .qualify_verify import is_qualification

    kinds = [is_qualification(m) for m in manifests]
    if kinds[0] != kinds[1]:
        raise Stop([Problem(f"{first} and {second}: one is a qualification bundle and the other "
                            "a run's: there is nothing to compare value by value",
                            code="not-comparable")], Exit.PLAN_INVALID)
    found = (_qualifications(*folders) if kinds[0] else _runs(*folders))
    count = sum(len(v) for v in found.values())
    lines = [f"compare {first} → {second}: "
             + (f"{count} differences" if count else "no differences")]
    for kind in KINDS:
        if found.get(kind):
            lines.append(f"{kind}:")
            lines += [f"  {line}" for line in found[kind]]
    if not kinds[0]:
        lines.append(f"  (values: numbers equal to within a relative {RELATIVE:g} are the same)")
    return Report(lines=lines, payload={"a": str(first), "b": str(second),
                                        "relative_rounding": RELATIVE, "count": count,
                                        "differences": {k: found.get(k, []) for k in KINDS}})


def _intact(folder: Path) -> dict:
    """The folder's manifest, when it is an intact bundle; else Stop with exit 2 or 5."""
    from .verify import check_bundle

    if not folder.is_dir() or not (folder / "manifest.json").is_file():
        raise Stop([Problem(f"{folder}: not a bundle (no folder with a manifest.json)",
                            code="not-a-bundle")], Exit.PLAN_INVALID)
    problems, _, manifest = check_bundle(folder)
    if problems:
        raise Stop([Problem(f"{folder}: not intact, so not compared: {p.message}",
                            code="not-intact") for p in problems], Exit.NOT_INTACT)
    return manifest


def _json(path: Path):
    from .crosscheck import read_json

    return read_json(path)[0]  # intact: verify parsed it already


def _runs(a: Path, b: Path) -> dict[str, list[str]]:
    from .canonical import plan_form, plan_key
    from .pipeline import compile_plan

    old, new = _json(a / "results.json"), _json(b / "results.json")
    found: dict[str, list[str]] = {}
    if readback.stamp_of(old) != readback.stamp_of(new):
        found["stamp"] = [f"{readback.stamp_of(old)} → {readback.stamp_of(new)}"]
    plans = [plan_form(compile_plan(folder / "plan.yaml")) for folder in (a, b)]
    found["plan"] = differences(*plans, key_of=plan_key)
    found["data"] = differences(readback.data_record(old), readback.data_record(new),
                                path="data")
    found["environment"] = differences(old.get("environment"), new.get("environment"),
                                       path="environment")
    found["verdicts"] = _verdicts(readback.verdicts(old), readback.verdicts(new))
    found["values"] = [line for part in sorted((set(old) | set(new)) - set(readback.NAMED_PARTS))
                       for line in differences(old.get(part), new.get(part), path=part,
                                               same=same_within_rounding)]
    found["values"] += differences(_without_verdicts(old), _without_verdicts(new),
                                   path="decisions", same=same_within_rounding)
    found["amendments"] = _amendments(readback.amendments(old), readback.amendments(new))
    return found


def _without_verdicts(document: dict) -> list:
    return [{k: v for k, v in d.items() if k != "verdict"} for d in document.get("decisions") or []]


def _verdicts(old: dict, new: dict) -> list[str]:
    out = [f"{i}: {old[i]} → {new[i]}" for i in old if i in new and old[i] != new[i]]
    out += [f"{i}: only in A ({old[i]})" for i in old if i not in new]
    out += [f"{i}: only in B ({new[i]})" for i in new if i not in old]
    return out


def _amendments(old: list, new: list) -> list[str]:
    def key(entry):
        return (entry.get("previous"), entry.get("new"), entry.get("time"))

    def said(entry):
        seen = entry.get("outcome_data_seen")
        when = ("not stated" if seen is None else
                "after unblinding" if seen else "before unblinding")
        return (f"{str(entry.get('previous'))[:12]} → {str(entry.get('new'))[:12]} at "
                f"{entry.get('time')} ({when}): {entry.get('reason')}")

    before = {key(e) for e in old}
    after = {key(e) for e in new}
    return ([f"only in B: {said(e)}" for e in new if key(e) not in before]
            + [f"only in A: {said(e)}" for e in old if key(e) not in after])


def _qualifications(a: Path, b: Path) -> dict[str, list[str]]:
    old, new = _json(a / "qualification.json"), _json(b / "qualification.json")
    found = {"environment": differences(old["environment"], new["environment"],
                                        path="environment")}
    checks = [{c["id"]: c for c in doc["checks"]} for doc in (old, new)]
    values = []
    for check_id in [*checks[0], *(i for i in checks[1] if i not in checks[0])]:
        one, two = checks[0].get(check_id), checks[1].get(check_id)
        if one is None or two is None:
            values.append(f"{check_id}: only in {'B' if one is None else 'A'}")
            continue
        if not same_within_rounding(one["value"], two["value"]):
            values.append(f"{check_id}: {show(one['value'])} → {show(two['value'])}")
        if one["passed"] != two["passed"]:
            values.append(f"{check_id}: {'met' if one['passed'] else 'missed'} → "
                          f"{'met' if two['passed'] else 'missed'}")
    found["values"] = values
    if old["qualified"] != new["qualified"]:
        found["verdicts"] = [f"qualified: {show(old['qualified'])} → {show(new['qualified'])}"]
    return found
