"""The view model of the decisions: the verdict table, each decision in detail, and the
inference that decided as the analysis pages show it.

A rule on an estimate records in results.json the covariance, level and interval it used,
each with why (``decisions[].inference``, made by ``decide._decided``). Here they are only
formatted; where they differ from the analysis' own covariance and confidence (the tier
tables), both are shown, each labelled.
"""

from __future__ import annotations

from . import report_format as f
from .report_format import Cell, Notes

VERDICT_CLASS = {"supported": "v-yes", "not supported": "v-no", "undetermined": "v-open"}

TEST_WORDS = {"superiority": "superiority", "non-inferiority": "non-inferiority",
              "equivalence": "equivalence", "tier-selection": "tier selection",
              "change-in-estimate": "change in estimate"}

# The rows each kind of rule shows, in this order; a row that does not apply is not printed.
_ESTIMATE_RULES = ("superiority", "non-inferiority", "equivalence")
NUMBER_LABELS = {
    "estimate": "estimate", "standard_error": "standard error", "test_value": "test value",
    "df": "degrees of freedom", "p": "p", "p_adjusted": "adjusted p",
    "alpha_used": "α used", "margin": "margin", "margin_analysis_scale": "margin (analysis scale)",
    "bound": "interval end compared", "ratio": "ratio", "threshold": "threshold",
    "relative": "change vs from tier", "from_tier": "from tier", "estimate_from": "estimate in from tier",
    "flagged": "flagged", "selected_tier": "selected tier", "report_tier": "report tier",
    "agrees": "agrees with report tier", "p_lower_margin": "p against lower margin",
    "p_upper_margin": "p against upper margin", "margins": "margins",
    "family_alpha": "family α", "family_step": "family step", "tested": "tested",
}
# shown by the decided-inference rows, or not numbers at all
_SHOWN_ELSEWHERE = {"estimate", "standard_error", "interval", "natural", "scale", "covariance",
                    "comparisons", "margins_analysis_scale", "direction", "test", "method"}
_P_KEYS = ("p", "p_adjusted", "p_lower_margin", "p_upper_margin")
_ORDER = ("test_value", "p", "p_adjusted", "alpha_used")


def level_of(inference: dict | None) -> float | None:
    """The level of the interval a decision used (None for a joint test)."""
    return ((inference or {}).get("interval") or {}).get("level")


def article(word: str) -> str:
    return f"an {word}" if word[:1] in "aeiou" else f"a {word}"


def _natural_text(inference: dict | None) -> str | None:
    """"−7.121 (97.5 % CI −9.914 to −4.327)" on the natural scale, or None."""
    natural = (inference or {}).get("natural")
    if not natural or natural.get("estimate") is None:
        return None
    if natural.get("low") is None or natural.get("high") is None:
        return f.num(natural["estimate"])
    return (f"{f.num(natural['estimate'])} ({f.level(level_of(inference))} CI "
            f"{f.num(natural['low'])} to {f.num(natural['high'])})")


def summary_row(d: dict) -> dict:
    """One line of the verdict table on page 1."""
    inference = d.get("inference")
    numbers = d.get("numbers") or {}
    text = _natural_text(inference)
    if text is not None:
        estimate = f"{inference['natural']['scale']} {text}"
    elif d["test"] == "change-in-estimate" and numbers.get("estimate") is not None \
            and numbers.get("estimate_from") is not None:
        estimate = (f"{numbers.get('scale') or 'estimate'} {f.num(numbers['estimate_from'])} → "
                    f"{f.num(numbers['estimate'])}")
    elif inference is not None and inference.get("reason"):
        estimate = inference["reason"]
    else:
        estimate = f"no estimate: {article(TEST_WORDS.get(d['test'], d['test']))} rule"
    return {"id": d["id"], "analysis": d["analysis"], "test": TEST_WORDS.get(d["test"], d["test"]),
            "tier": d["tier"], "verdict": d["verdict"], "cls": VERDICT_CLASS[d["verdict"]],
            "reason": d["reason"], "estimate": estimate, "cautions": list(d.get("cautions") or [])}


def reported(analysis: dict | None, inference: dict) -> dict | None:
    """The analysis page's own numbers for the decision's column and tier (its covariance
    and confidence; the interval on the natural scale), or None when the page holds none."""
    if analysis is None or not inference.get("column"):
        return None
    row = next((r for r in analysis["exposure"] if r["tier"] == inference["tier"]
                and r["column"] == inference["column"]), None)
    if row is None:
        return None
    return {"covariance": analysis["covariance"], "level": analysis["confidence"],
            "standard_error": row["standard_error"], "low": row["natural"]["low"],
            "high": row["natural"]["high"]}


def differs(inference: dict, page: dict | None) -> bool:
    return page is not None and (inference["covariance"] != page["covariance"] or
                                 level_of(inference) != page["level"])


def decided_rows(analysis: dict, decisions: list[dict], notes: Notes) -> list[dict]:
    """The analysis page's table of the inference each of its decisions used: per decision
    a line of what decided, a line of this page's own numbers when the covariance or level
    differ, and why."""
    rows = []
    for d in decisions:
        inference = d.get("inference")
        if d["analysis"] != analysis["id"] or inference is None:
            continue
        natural = inference.get("natural") or {}
        why = inference.get("reason") or d["reason"]
        lines = [{"label": "decided", "covariance": inference["covariance"],
                  "estimate": notes.cell(natural.get("estimate"), why, default=""),
                  "standard_error": notes.cell(inference.get("standard_error"), why,
                                               default=""),
                  "level": (Cell(f.level(level_of(inference))) if level_of(inference)
                            else Cell(f.DASH, notes.mark(why), why)),
                  "interval": _pair(natural.get("low"), natural.get("high"), notes, why)}]
        page = reported(analysis, inference)
        if differs(inference, page):
            lines.append({"label": "this page", "covariance": page["covariance"],
                          "estimate": Cell(""),
                          "standard_error": notes.cell(page["standard_error"], why, default=""),
                          "level": Cell(f.level(page["level"])),
                          "interval": _pair(page["low"], page["high"], notes, why)})
        level = f.level(level_of(inference)) if level_of(inference) else None
        why_words = [w for w in (level and f"Level {level} = {inference['level_why']}.",
                                 f"Covariance {inference['covariance']}: "
                                 f"{inference['covariance_why']}.") if w]
        if len(lines) > 1:
            why_words.append("This page: the analysis' own covariance and confidence, as in "
                             "the tier tables.")
        rows.append({"id": d["id"], "tier": inference["tier"],
                     "column": inference.get("column") or "(joint test)", "lines": lines,
                     "why": " ".join(why_words)})
    return rows


def _pair(low, high, notes: Notes, why: str) -> Cell:
    if low is None or high is None:
        return Cell(f.DASH, notes.mark(why), why)
    return Cell(f"{f.num(low)} to {f.num(high)}")


def decision_view(d: dict, analysis: dict | None, notes: Notes) -> dict:
    numbers = d.get("numbers") or {}
    inference = d.get("inference")

    def why(key: str) -> str:
        return f"not computed: {d['reason']}"

    def applies(key: str) -> bool:
        if key == "p_adjusted":
            return bool(d.get("multiplicity"))
        if key in ("test_value", "p"):
            return d["test"] in _ESTIMATE_RULES
        return numbers.get(key) is not None

    def value_cell(key: str) -> Cell:
        value = numbers.get(key)
        if key in _P_KEYS:
            return notes.cell(value, why(key), f.p_value, default="")
        if key == "threshold":
            return notes.cell(value, why(key), f.percent, default="")
        if key == "relative":
            change = {"relative": value, "direction": numbers.get("direction")}
            return notes.cell(value, why(key), lambda _: f.change(change), default="")
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

    rows: list[tuple[str, Cell]] = []
    if inference is not None:
        rows += _inference_rows(inference, reported(analysis, inference), notes, why("estimate"))
    elif d["test"] == "change-in-estimate":
        label = f"estimate ({numbers['scale']})" if numbers.get("scale") else "estimate"
        rows.append((label, notes.cell(numbers.get("estimate"), why("estimate"), default="")))
    keys = [k for k in _ORDER if applies(k)]
    keys += [k for k in numbers if k not in _ORDER and k not in _SHOWN_ELSEWHERE
             and numbers.get(k) is not None]
    for key in keys:
        rows.append((NUMBER_LABELS.get(key, key.replace("_", " ")), value_cell(key)))
    walk = [{"step": f"{c['from']} → {c['to']}", "method": c.get("method") or "",
             "p": notes.cell(c.get("p"), "the comparison has no p-value", f.p_value,
                             default=""),
             "needed": "—" if c.get("needed") is None else ("yes" if c["needed"] else "no")}
            for c in numbers.get("comparisons") or []]
    return {"id": d["id"], "analysis": d["analysis"], "tier": d["tier"],
            "test": TEST_WORDS.get(d["test"], d["test"]), "verdict": d["verdict"],
            "cls": VERDICT_CLASS[d["verdict"]], "reason": f.sentence(d["reason"]), "numbers": rows,
            "walk": walk, "cautions": list(d.get("cautions") or []),
            "branch": d.get("branch") or "none: no assumption fallback applies",
            "multiplicity": d.get("multiplicity") or "none", "notes": notes.items}


def _inference_rows(inference: dict, page: dict | None, notes: Notes,
                    missing: str) -> list[tuple[str, Cell]]:
    """Estimate, standard error, interval, level and covariance that decided, each with
    why; then the analysis page's own, labelled, when its covariance or level differs."""
    why = inference.get("reason") or missing
    natural = inference.get("natural") or {}
    scale = natural.get("scale")
    rows = [(f"estimate ({scale})" if scale else "estimate",
             notes.cell(natural.get("estimate"), why, default=""))]
    ratio = scale not in (None, "difference")
    se_label = "standard error (log scale)" if ratio else "standard error"
    rows.append((f"{se_label}, {inference['covariance']}",
                 notes.cell(inference.get("standard_error"), why, default="")))
    if level_of(inference) is not None:
        level = f.level(level_of(inference))
        if natural.get("low") is not None and natural.get("high") is not None:
            rows.append((f"{level} CI, decided", Cell(f"{f.num(natural['low'])} to "
                                                      f"{f.num(natural['high'])}")))
        else:
            rows.append((f"{level} CI, decided", Cell(f.DASH, notes.mark(why), why)))
        rows.append(("why this level", Cell(inference["level_why"], numeric=False)))
    rows.append(("covariance, decided", Cell(inference["covariance"], numeric=False)))
    rows.append(("why this covariance", Cell(inference["covariance_why"], numeric=False)))
    if differs(inference, page):
        lo, hi = page["low"], page["high"]
        label = f"{f.level(page['level'])} CI, {page['covariance']}, as on the analysis page"
        rows.append((f"{se_label}, {page['covariance']}, as on the analysis page",
                     notes.cell(page["standard_error"], why, default="")))
        rows.append((label, Cell(f"{f.num(lo)} to {f.num(hi)}") if lo is not None and
                     hi is not None else Cell(f.DASH, notes.mark(why), why)))
    return rows
