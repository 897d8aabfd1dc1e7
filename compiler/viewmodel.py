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

CAUTION = ("This report supports, and does not replace, review by a qualified statistician "
           "under the regulations and guidance that apply to the study.")

VERDICT_CLASS = {"supported": "v-yes", "not supported": "v-no", "undetermined": "v-open"}

TEST_WORDS = {"superiority": "superiority", "non-inferiority": "non-inferiority",
              "equivalence": "equivalence", "tier-selection": "tier selection",
              "change-in-estimate": "change in estimate"}


def build(results: dict, plots: dict, *, results_sha256: str) -> dict:
    counter = Counter()
    plan, data = results["plan"], results["data"]
    analyses = results["analyses"]
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
        "analyses": [analysis_view(a, plots.get(a["id"]), Notes(counter)) for a in analyses],
        "decisions": [decision_view(d, Notes(counter)) for d in results["decisions"]],
        "assumptions": [assumption_view(a) for a in results["assumptions"]],
        "amendments": amendments_view(results),
        "environment": environment_view(results),
    }


def stamp(results: dict) -> dict:
    if results["rehearsal"]:
        return {"word": "REHEARSAL", "cls": "stamp-rehearsal", "rehearsal": True,
                "note": results.get("rehearsal_note") or "not a confirmatory run"}
    if results["preregistered"]:
        lock = results.get("lock") or {}
        note = f"plan frozen {lock['frozen_at']}" if lock.get("frozen_at") else ""
        if lock.get("amended_at"):
            note += f", last amended {lock['amended_at']}"
        return {"word": "PRE-REGISTERED", "cls": "stamp-prereg", "rehearsal": False,
                "note": note}
    return {"word": "NOT PRE-REGISTERED", "cls": "stamp-unlocked", "rehearsal": False,
            "note": "run without a matching lock"}


def summary_row(d: dict) -> dict:
    return {"id": d["id"], "analysis": d["analysis"], "test": TEST_WORDS.get(d["test"], d["test"]),
            "tier": d["tier"], "verdict": d["verdict"], "cls": VERDICT_CLASS[d["verdict"]],
            "reason": d["reason"]}


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


# Decision numbers that every rule shows, in this order; the rest only when present.
CORE_NUMBERS = ("estimate", "ci", "statistic", "p_value", "adjusted_p", "alpha_used")
NUMBER_LABELS = {
    "estimate": "estimate", "std_error": "standard error", "statistic": "statistic",
    "df": "degrees of freedom", "p_value": "p", "adjusted_p": "adjusted p",
    "alpha_used": "α used", "margin": "margin", "margin_analysis_scale": "margin (analysis scale)",
    "bound": "interval end compared", "ratio": "ratio", "threshold": "threshold",
    "change": "change", "from_tier": "from tier", "estimate_from": "estimate in from tier",
    "flagged": "flagged", "selected_tier": "selected tier", "report_tier": "report tier",
    "agrees": "agrees with report tier", "p_lower_margin": "p against lower margin",
    "p_upper_margin": "p against upper margin", "margins": "margins",
}
_SHOWN_ELSEWHERE = {"ci_low", "ci_high", "ci_level", "ratio_ci_low", "ratio_ci_high", "scale",
                    "covariance", "comparisons"}


def decision_view(d: dict, notes: Notes) -> dict:
    numbers = d.get("numbers") or {}

    def why(key: str) -> str:
        if d["verdict"] == "undetermined":
            return f"not computed: {d['reason']}"
        if key == "adjusted_p" and not d.get("multiplicity"):
            return "no multiplicity procedure covers this decision"
        return f"does not apply to a {TEST_WORDS.get(d['test'], d['test'])} rule"

    def value_cell(key: str) -> Cell:
        value = numbers.get(key)
        if key in ("p_value", "adjusted_p", "p_lower_margin", "p_upper_margin"):
            return notes.cell(value, None if value is not None else why(key), f.p_value,
                              default="")
        if key in ("change", "threshold"):
            return notes.cell(value, why(key), f.percent if key == "threshold" else f.change,
                              default="")
        if key in ("alpha_used", "family_alpha"):
            return notes.cell(value, why(key), f.alpha, default="")
        if key == "family_step" and isinstance(value, (int, float)):
            return Cell(f.integer(int(value)))
        if key in ("df", "df_denominator"):
            return notes.cell(value, why(key), f.df, default="")
        if isinstance(value, (bool, str)):
            return Cell(f.num(value) if isinstance(value, bool) else value, numeric=False)
        if isinstance(value, (list, tuple)) and len(value) == 2:
            return Cell(f"{f.num(value[0])} to {f.num(value[1])}")
        return notes.cell(value, why(key), default="")

    rows = []
    for key in CORE_NUMBERS:
        if key == "ci":
            rows.append((_ci_label(numbers), _interval(numbers, "ci_low", "ci_high", notes, why)))
            continue
        label = NUMBER_LABELS[key]
        if key == "estimate" and numbers.get("scale"):
            label = f"estimate ({numbers['scale']})"
        rows.append((label, value_cell(key)))
    if numbers.get("ratio") is not None:
        rows.append(("ratio", value_cell("ratio")))
        rows.append((f"ratio {_ci_label(numbers)}",
                     _interval(numbers, "ratio_ci_low", "ratio_ci_high", notes, why)))
    for key, value in numbers.items():
        if key in CORE_NUMBERS or key in _SHOWN_ELSEWHERE or key == "ratio" or value is None:
            continue
        rows.append((NUMBER_LABELS.get(key, key.replace("_", " ")), value_cell(key)))
    rows.append(("covariance", Cell(d.get("covariance") or "classical", numeric=False)))
    walk = [{"step": f"{c['from']} → {c['to']}", "test": c.get("test") or "",
             "p": notes.cell(c.get("p_value"), "the comparison has no p-value", f.p_value,
                             default=""),
             "needed": "—" if c.get("needed") is None else ("yes" if c["needed"] else "no")}
            for c in numbers.get("comparisons") or []]
    return {"id": d["id"], "analysis": d["analysis"], "tier": d["tier"],
            "test": TEST_WORDS.get(d["test"], d["test"]), "verdict": d["verdict"],
            "cls": VERDICT_CLASS[d["verdict"]], "reason": f.sentence(d["reason"]), "numbers": rows,
            "walk": walk,
            "branch": d.get("branch") or "none: no assumption fallback applies",
            "multiplicity": d.get("multiplicity") or "none", "notes": notes.items}


def _ci_label(numbers: dict) -> str:
    level = numbers.get("ci_level")
    return f"{f.level(level)} CI" if level is not None else "CI"


def _interval(numbers: dict, low: str, high: str, notes: Notes, why) -> Cell:
    lo, hi = numbers.get(low), numbers.get(high)
    if lo is None or hi is None:
        reason = why(low)
        return Cell(f.DASH, notes.mark(reason), reason)
    return Cell(f"{f.num(lo)} to {f.num(hi)}")


def assumption_view(a: dict) -> dict:
    return {"id": a["id"], "analysis": a["analysis"], "check": a["check"],
            "statistic": f.num(a["statistic"]) if a["statistic"] is not None else f.DASH,
            "p": f.p_value(a["p_value"]) if a["p_value"] is not None else f.DASH,
            "triggered": "yes: fallback taken" if a["triggered"] else "no",
            "covariance": a["covariance"], "reason": a["reason"]}


def amendments_view(results: dict) -> dict:
    lock = results.get("lock")
    if lock is None:
        status = ("No lock: the plan was not frozen for this run, so there is no amendment "
                  "log." if not results["rehearsal"] else
                  "A rehearsal reads the plan as it stands; no lock is checked.")
    else:
        status = f"Plan frozen {lock['frozen_at']}; lock file sha256 {lock['sha256']}."
    entries = [{"time": e["time"], "previous": f.short(e["previous"]), "new": f.short(e["new"]),
                "previous_full": e["previous"], "new_full": e["new"], "reason": e["reason"]}
               for e in results["amendments"]]
    return {"status": status, "entries": entries,
            "empty": "No amendments." if lock is not None and not entries else None}


def environment_view(results: dict) -> list[tuple[str, str]]:
    env = results["environment"]
    first = ["prespec", "python", "numpy", "scipy", "pandas", "statsmodels", "pyarrow",
             "platform"]
    keys = [k for k in first if k in env] + sorted(k for k in env if k not in first)
    return [(k, str(env[k])) for k in keys]
