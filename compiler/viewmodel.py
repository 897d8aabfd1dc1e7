"""The report's view model: the results document turned into ready-to-print values.

The templates only loop and print; every number is formatted and every branch decided here.
The per-analysis part (tier tables, comparisons, exposure plot, diagnostics) lives in
:mod:`compiler.viewmodel_analysis`.
"""

from __future__ import annotations

from . import report_format as f
from .problems import LISTED, listed
from .report_format import Cell, Counter, Notes
from .viewmodel_analysis import analysis_view, characteristics_view
from .viewmodel_decisions import decision_view, summary_row

CAUTION = ("This report supports, and does not replace, review by a qualified statistician "
           "under the regulations and guidance that apply to the study.")


def build(results: dict, plots: dict, *, results_sha256: str) -> dict:
    counter = Counter()
    plan, data = results["plan"], results["data"]
    analyses = results["analyses"]
    by_id = {a["id"]: a for a in analyses}
    return {
        "title": f"{plan['id']} {plan.get('version') or ''}".strip(),
        "study": {"id": plan["id"], "version": plan.get("version") or "unversioned",
                  "title": plan.get("title") or ""},
        "stamp": stamp(results),
        "digests": [("plan", f.short(plan["sha256"]), plan["sha256"]),
                    ("data", f.short(data["sha256"]), data["sha256"]),
                    ("results", f.short(results_sha256), results_sha256)],
        "caution": CAUTION,
        "summary": [summary_row(d) for d in results["decisions"]],
        "flows": [flow_view(a) for a in analyses],
        "contract": contract_view(results),
        "characteristics": [characteristics_view(a, Notes(counter)) for a in analyses],
        "analyses": [analysis_view(a, plots.get(a["id"]), Notes(counter),
                                   decisions=results["decisions"]) for a in analyses],
        "decisions": [decision_view(d, by_id.get(d["analysis"]), Notes(counter))
                      for d in results["decisions"]],
        "assumptions": [assumption_view(a) for a in results["assumptions"]],
        "amendments": amendments_view(results),
        "environment": environment_view(results),
    }


def stamp(results: dict) -> dict:
    if results["rehearsal"]:
        return {"word": "REHEARSAL", "cls": "stamp-rehearsal", "rehearsal": True,
                "note": results.get("rehearsal_note") or "not a confirmatory run", "flag": None}
    if results["preregistered"]:
        lock = results.get("lock") or {}
        note = f"plan frozen {lock['frozen_at']}" if lock.get("frozen_at") else ""
        if lock.get("amended_at"):
            note += f", last amended {lock['amended_at']}"
        return {"word": "PRE-REGISTERED", "cls": "stamp-prereg", "rehearsal": False,
                "note": note, "flag": after_unblinding(results)}
    return {"word": "NOT PRE-REGISTERED", "cls": "stamp-unlocked", "rehearsal": False,
            "note": "run without a matching lock", "flag": None}


def flow_view(a: dict) -> dict:
    flow = a["flow"]
    steps = [{"label": "rows read", "count": f.integer(flow["rows_read"]), "kind": "total"}]
    for s in flow["by_condition"]:
        steps.append({"label": f"not {s['reason']}", "count": _minus(s["excluded"]),
                      "kind": "out"})
    steps.append({"label": f"in population {a['population'] or '(all rows)'}",
                  "count": f.integer(flow["rows_in_population"]), "kind": "total"})
    for s in flow["by_missing"]:
        steps.append({"label": s["reason"], "count": _minus(s["excluded"]), "kind": "out"})
    steps.append({"label": "analysed", "count": f.integer(flow["n"]), "kind": "final"})
    return {"id": a["id"], "steps": steps}


def _minus(excluded: int) -> str:
    return f"{f.MINUS}{f.integer(excluded)}" if excluded else "0"


def contract_view(results: dict) -> dict:
    findings = [{"severity": p["severity"], "column": p.get("column") or "(file)",
                 "message": p["message"], "code": p.get("code") or ""}
                for p in results["contract"]]
    data = results["data"]
    facts = [("file", data.get("file") or "(not named)"), ("format", data["format"]),
             ("size", f"{f.integer(data['size_bytes'])} bytes"),
             ("rows read", f.integer(data["rows_read"])),
             ("sha256", data["sha256"])]
    unused = listed(data["unused_columns"], number=f.integer) or "none"
    if len(data["unused_columns"]) > LISTED:  # a long list costs seconds of PDF layout
        unused += "; results.json lists every one (data.unused_columns)"
    facts.append(("columns not in the dictionary", unused))
    return {"findings": findings, "facts": facts}


def assumption_view(a: dict) -> dict:
    return {"id": a["id"], "analysis": a["analysis"], "check": a["check"],
            "test_value": f.num(a["test_value"]) if a["test_value"] is not None else f.DASH,
            "p": f.p_value(a["p"]) if a["p"] is not None else f.DASH,
            "triggered": "yes: fallback taken" if a["triggered"] else "no",
            "covariance": a["covariance"], "reason": a["reason"]}


SEEN_WORDS = {True: "after unblinding: outcome data had been seen",
              False: "before unblinding: no outcome data had been seen",
              None: "not stated (the amendment predates this record)"}
PLAN_TEXT_WORDS = {
    "as frozen": "The plan file run is byte for byte the text frozen.",
    "comments or layout differ": "The plan file run differs from the text frozen in comments "
                                 "or layout only: its canonical form, which the lock holds, is "
                                 "the same.",
}


def after_unblinding(results: dict) -> str | None:
    """The stamp every page carries when any amendment was made after unblinding."""
    late = [(number, e["time"]) for number, e in enumerate(results["amendments"], start=1)
            if e.get("outcome_data_seen") is True]
    if not late:
        return None
    listed = ", ".join(f"{number} ({time})" for number, time in late)
    return f"AMENDED AFTER UNBLINDING: amendment{'s' if len(late) > 1 else ''} {listed}"


def amendments_view(results: dict) -> dict:
    lock = results.get("lock")
    if lock is None:
        status = ("No lock: the plan was not frozen for this run, so there is no amendment "
                  "log." if not results["rehearsal"] else
                  "A rehearsal reads the plan as it stands; no lock is checked.")
    else:
        status = f"Plan frozen {lock['frozen_at']}; lock file sha256 {lock['sha256']}."
        words = PLAN_TEXT_WORDS.get(lock.get("plan_text"))
        status += f" {words}" if words else ""
    entries = [{"time": e["time"], "previous": f.short(e["previous"]), "new": f.short(e["new"]),
                "previous_full": e["previous"], "new_full": e["new"], "reason": e["reason"],
                "seen": SEEN_WORDS[e.get("outcome_data_seen")],
                "late": e.get("outcome_data_seen") is True}
               for e in results["amendments"]]
    return {"status": status, "entries": entries,
            "empty": "No amendments." if lock is not None and not entries else None}


def environment_view(results: dict) -> list[tuple[str, str]]:
    env = results["environment"]
    first = ["prespec", "python", "numpy", "scipy", "pandas", "statsmodels", "pyarrow",
             "platform"]
    keys = [k for k in first if k in env] + sorted(k for k in env if k not in first)
    return [(k, str(env[k])) for k in keys]
