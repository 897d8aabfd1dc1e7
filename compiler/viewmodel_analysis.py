"""The view model of one analysis: tier tables, fit statistics, comparisons, the exposure
across tiers (plot and table), report-tier diagnostics, and the sample's characteristics."""

from __future__ import annotations

from markupsafe import Markup

from . import plots as plotting
from . import report_format as f
from .report_format import Cell, Notes
from .viewmodel_decisions import decided_rows

RATIO_WORD = {"binomial": "odds ratio", "poisson": "rate ratio"}
SCALE_WORD = {"gaussian": "difference", "binomial": "log odds ratio",
              "poisson": "log rate ratio"}
FAMILY_WORDS = {"gaussian": "linear regression (gaussian, identity link)",
                "binomial": "logistic regression (binomial, logit link)",
                "poisson": "Poisson regression (log link)"}

# (key, label, families): the fit statistics table, in this order.
FIT_STATISTICS = (
    ("n_parameters", "parameters", {"gaussian", "binomial", "poisson"}),
    ("residual_df", "residual df", {"gaussian", "binomial", "poisson"}),
    ("rss", "residual sum of squares", {"gaussian"}),
    ("sigma2", "residual variance", {"gaussian"}),
    ("r_squared", "R²", {"gaussian"}),
    ("adjusted_r_squared", "adjusted R²", {"gaussian"}),
    ("deviance", "deviance", {"binomial", "poisson"}),
    ("null_deviance", "null deviance", {"binomial", "poisson"}),
    ("pearson_x2", "Pearson X²", {"binomial", "poisson"}),
    ("dispersion", "dispersion (Pearson X² / residual df)", {"binomial", "poisson"}),
    ("log_likelihood", "log-likelihood", {"gaussian", "binomial", "poisson"}),
    ("aic", "AIC", {"gaussian", "binomial", "poisson"}),
    ("bic", "BIC", {"gaussian", "binomial", "poisson"}),
    ("iterations", "IRLS iterations", {"binomial", "poisson"}),
)



def outcome_words(a: dict) -> str:
    """The outcome as a reader knows it: its declared label and unit, else its column."""
    label = a.get("outcome_label") or a["outcome"]
    return f"{label} ({a['outcome_unit']})" if a.get("outcome_unit") else label


def exposure_words(a: dict) -> str:
    return a.get("exposure_label") or a["exposure_variable"]


def _named(label: str | None, column: str, unit: str | None = None) -> str:
    """"Sleep-onset latency at week 8 (latency_w8, minutes)": label, column and unit."""
    inside = ", ".join(x for x in (column, unit) if x)
    return f"{label} ({inside})" if label else (f"{column} ({unit})" if unit else column)


def analysis_view(a: dict, sample: plotting.ResidualSample | None, notes: Notes,
                  decisions: list[dict] = ()) -> dict:
    family = a["family"]
    level = f.level(a["confidence"])
    ratio = family in RATIO_WORD
    decided = decided_rows(a, list(decisions), notes)
    return {
        "id": a["id"],
        "anchor": f"analysis-{a['id']}",
        "heading": f"{outcome_words(a)} by {exposure_words(a)}",
        "facts": _facts(a, decisions),
        "decided": decided,
        "decided_legend": _decided_legend(a) if decided else None,
        "exposure_legend": (f"Change vs the first tier: its size |b − b₁| / |b₁| (b the "
                            f"tier's estimate, b₁ the first tier's, on the analysis scale) "
                            f"and which way b moved. Intervals at {level} under "
                            f"{a['covariance']} covariance, the analysis' own"
                            + ("; the inference each decision used is in the table below."
                               if decided else ".")),
        "level": level,
        "scale_word": SCALE_WORD[family],
        "tiers": [_tier_view(a, t, notes) for t in a["tiers"]],
        "fit": _fit_table(a, notes),
        "comparisons": [_comparison_row(c, notes) for c in a["comparisons"]],
        "exposure_plot": _forest(a),
        "exposure_caption": _forest_caption(a),
        "exposure_rows": [_exposure_row(a, r, notes) for r in a["exposure"]],
        "ratio": ratio,
        "ratio_word": RATIO_WORD.get(family, ""),
        "gaussian": family == "gaussian",
        "sigma2": ({t["name"]: _cell(notes, t.get("sigma2"), t.get("reason"))
                    for t in a["tiers"]} if family == "gaussian" else {}),
        "diagnostics": _diagnostics(a, sample, notes),
        "warnings": list(a.get("warnings") or []),
        "notes": notes.items,
    }


def _decided_legend(a: dict) -> str:
    return (f"Each decision's own inference: the covariance it used after its assumption "
            f"checks and the interval at the level it was held to, on the natural scale. "
            f"Where either differs from this page's {a['covariance']} covariance at "
            f"{f.level(a['confidence'])}, the page's numbers follow on a second line.")


def _covariance_fact(a: dict, decisions) -> str:
    others: dict[str, list[str]] = {}
    for d in decisions:
        inference = d.get("inference")
        if d["analysis"] == a["id"] and inference and inference["covariance"] != a["covariance"]:
            others.setdefault(inference["covariance"], []).append(d["id"])
    if not others:
        return a["covariance"]
    used = "; ".join(f"{', '.join(ids)} decided under {cov}" for cov, ids in others.items())
    return f"{a['covariance']} in the tables of this page; {used} (see below)"


def _facts(a: dict, decisions=()) -> list[tuple[str, str]]:
    facts = [("model", FAMILY_WORDS[a["family"]]),
             ("outcome", _named(a.get("outcome_label"), a["outcome"], a.get("outcome_unit"))),
             ("exposure", _named(a.get("exposure_label"), a["exposure_variable"])),
             ("population", a["population"] or "all rows"),
             ("rows in population", f.integer(a["rows_in_population"])),
             ("rows analysed", f.integer(a["n"]))]
    if a.get("events") is not None:
        facts.append(("events (outcome = 1)", f.integer(a["events"])))
    if a.get("offset"):
        facts.append(("offset", f"log({a['offset']})"))
    facts.append(("covariance", _covariance_fact(a, decisions)))
    if a.get("reference"):
        facts.append(("reference distribution", a["reference"]["label"]))
    facts += [("confidence", f.level(a["confidence"])),
              ("report tier", a["report_tier"])]
    return facts


def _cell(notes: Notes, value, reason, fmt=None) -> Cell:
    return notes.cell(value, reason, fmt, default="not computed (no reason was recorded)")


def _tier_view(a: dict, t: dict, notes: Notes) -> dict:
    rows = []
    exposure = {r["column"] for r in a["exposure"]}
    for c in t["columns"]:
        why = c.get("reason") or t.get("reason")
        interval = c["interval"]
        rows.append({"column": c["column"],
                     "cells": [_estimate_cell(notes, c["estimate"], interval["low"],
                                              interval["high"], why),
                               _cell(notes, c["standard_error"], why),
                               _cell(notes, c["test_value"], why,
                                     lambda v, test=c["test"]: f.test_value(test, v)),
                               _cell(notes, c["p_two_sided"], why, f.p_value)],
                     "exposure": c["column"] in exposure})
    added = ", ".join(t["terms_added"]) if t["terms_added"] else None
    return {"name": t["name"], "report": t["name"] == a["report_tier"],
            "added": added or "the exposure alone", "rows": rows,
            "converged": t.get("converged", True), "warnings": list(t.get("warnings") or []),
            "reason": t.get("reason")}


def _estimate_cell(notes: Notes, estimate, low, high, why) -> Cell:
    return notes.estimate_cell(estimate, low, high, why,
                               default="not computed (no reason was recorded)")


def _fit_table(a: dict, notes: Notes) -> dict:
    family = a["family"]
    rows = [{"label": "rows analysed", "cells": [Cell(f.integer(a["n"])) for _ in a["tiers"]]}]
    for key, label, families in FIT_STATISTICS:
        if family not in families:
            continue
        if all(t.get(key) is None and not t.get("reason") for t in a["tiers"]):
            continue  # nothing to show and no tier's own reason: the row does not apply
        fmt = f.integer if key in ("n_parameters", "residual_df", "iterations") else None
        cells = [_cell(notes, t.get(key), t.get("reason"), fmt) for t in a["tiers"]]
        rows.append({"label": label, "cells": cells})
    if family != "gaussian":
        rows.append({"label": "converged",
                     "cells": [Cell("yes" if t.get("converged", True) else "no")
                               for t in a["tiers"]]})
    return {"tiers": [t["name"] for t in a["tiers"]], "rows": rows}


def _comparison_row(c: dict, notes: Notes) -> dict:
    df = f"{c['df_added']}" if c.get("df_denominator") is None else (
        f"{c['df_added']}, {f.df(c['df_denominator'])}")
    return {"step": f"{c['from']} → {c['to']}", "method": c["method"], "df": df,
            "test_value": _cell(notes, c["test_value"], c.get("reason"),
                                lambda v: f.test_value(c["test"], v)),
            "p": _cell(notes, c["p"], c.get("reason"), f.p_value)}


def _exposure_row(a: dict, r: dict, notes: Notes) -> dict:
    why = r.get("reason")
    first = r["tier"] == a["tiers"][0]["name"]
    change = (Cell("(first tier)") if first else
              _cell(notes, r["change_vs_first"], why, f.change))
    interval, natural = r["interval"], r["natural"]
    cells = [_estimate_cell(notes, r["estimate"], interval["low"], interval["high"], why),
             _cell(notes, r["standard_error"], why)]
    if a["family"] in RATIO_WORD:
        cells.append(_estimate_cell(notes, natural["estimate"], natural["low"],
                                    natural["high"], why))
    return {"tier": r["tier"], "column": r["column"], "cells": cells, "change": change,
            "report": r["tier"] == a["report_tier"]}


def _forest(a: dict) -> Markup:
    ratio = a["family"] in RATIO_WORD
    columns = list(dict.fromkeys(r["column"] for r in a["exposure"]))
    rows = []
    # Grouped by exposure level, tiers in plan order within each: the eye follows one level
    # as adjustment grows. Every row is on the natural scale (a difference, a ratio).
    for r in sorted(a["exposure"], key=lambda r: columns.index(r["column"])):
        natural = r["natural"]
        label = (f"{_level_of(r['column'])} · {r['tier']}" if len(columns) > 1
                 else r["tier"])
        rows.append(plotting.ForestRow(label, natural["estimate"], natural["low"],
                                       natural["high"], emphasis=r["tier"] == a["report_tier"]))
    axis = (f"{RATIO_WORD[a['family']]}, {outcome_words(a)} (log scale)" if ratio else
            f"difference in {outcome_words(a)}")
    return Markup(plotting.forest(rows, key=f"{a['id']}-exposure", ratio=ratio,
                                  axis_label=axis))


def _level_of(column: str) -> str:
    """A categorical level's column "VAR: LEVEL vs REFERENCE" shortened to "LEVEL" (the
    axis title names the variable); any other column as it is."""
    if ": " not in column or " vs " not in column:
        return column
    return column.split(": ", 1)[1].rsplit(" vs ", 1)[0]


def _forest_caption(a: dict) -> str:
    what = (f"{RATIO_WORD[a['family']]}s against the reference level, on a log axis"
            if a["family"] in RATIO_WORD else "differences from the reference level")
    return (f"The exposure in every tier: {what}, with {f.level(a['confidence'])} confidence "
            f"intervals. The filled square is the report tier ({a['report_tier']}).")


def _diagnostics(a: dict, sample: plotting.ResidualSample | None,
                 notes: Notes) -> dict | None:
    d = a.get("diagnostics")
    if d is None:
        return {"absent": "No diagnostics were computed for this analysis."}
    why = d.get("reason")
    residual_label = "standardized residual" if a["family"] == "gaussian" else "Pearson residual"
    view = {
        "absent": None, "tier": d["tier"],
        "vif": [{"column": v["column"], "vif": _cell(notes, v["vif"], why),
                 "high": v["vif"] is not None and v["vif"] > 10} for v in d["vif"]],
        "tests": _diagnostic_tests(a, d, notes),
        "influential": [{"row_id": i["row_id"], "cooks": Cell(f.num(i["cooks_distance"]))}
                        for i in d["influential"]],
        "plots": None,
        "plots_absent": "The residual plots were not drawn: the fitted values and residuals "
                        "were not available to the report.",
    }
    if sample is not None and sample.n > 0:
        n, shown = sample.n, len(sample.fitted)
        subset = ("" if shown == n else
                  f" With {f.integer(n)} rows, every {n / shown:.3g}th row in data order is "
                  f"drawn ({f.integer(shown)} points, evenly spaced).")
        key = f"{a['id']}-{d['tier']}"
        view["plots"] = {
            "fitted": Markup(plotting.residuals_vs_fitted(
                sample, key=f"{key}-rvf", residual_label=residual_label,
                fitted_label=FITTED_WORDS[a["family"]].format(outcome_words(a)))),
            "quantiles": Markup(plotting.normal_quantiles(
                sample, key=f"{key}-qq", residual_label=residual_label)),
            "caption": f"Tier {d['tier']}: {residual_label}s against fitted values (left) and "
                       f"against standard normal quantiles (right).{subset}"}
    return view


FITTED_WORDS = {"gaussian": "fitted {}", "binomial": "fitted probability: {}",
                "poisson": "fitted count: {}"}
# (key, label, families): residual tests, printed only for the families they apply to
DIAGNOSTIC_TESTS = (("normality", None, {"gaussian"}),
                    ("breusch_pagan", "Breusch–Pagan", {"gaussian"}))


def _diagnostic_tests(a: dict, d: dict, notes: Notes) -> list[dict]:
    why = d.get("reason")
    rows = []
    for key, label, families in DIAGNOSTIC_TESTS:
        test = d.get(key) or {}
        if a["family"] not in families and test.get("test_value") is None:
            continue
        rows.append({"label": label or test.get("method") or "normality test",
                     "test_value": _cell(notes, test.get("test_value"), why),
                     "p": _cell(notes, test.get("p"), why, f.p_value)})
    return rows


# ---- characteristics -------------------------------------------------------------------

def characteristics_view(a: dict, notes: Notes) -> dict:
    chars = a.get("characteristics")
    if not chars or not chars.get("variables"):
        why = (chars or {}).get("reason") or "not computed"
        return {"id": a["id"], "absent": f"The sample's characteristics: {why}.",
                "notes": notes.items}
    groups = chars.get("groups") or []
    header = [f"{g['level']} (n = {f.integer(g['n'])})" for g in groups]
    header.append(f"whole sample (n = {f.integer(chars['whole_sample']['n'])})")
    rows: list[dict] = []
    for v in chars["variables"]:
        cells = (v.get("groups") or []) + [v["whole_sample"]]
        unit = f", {v['unit']}" if v.get("unit") else ""
        name = f"{v['label']} ({v['name']}{unit})" if v.get("label") else f"{v['name']}{unit}"
        role = "" if v.get("role") in (None, "covariate") else v["role"]
        rows.append({"span": True, "variable": name, "role": role, "stat": "", "cells": [],
                     "level": False})
        kind = v["kind"]
        if kind == "continuous":
            rows.append(_row("mean (SD)", cells, _mean_sd, notes))
            if chars.get("quartiles") is not None:
                rows.append(_row("median (IQR q1 to q3)", cells, _median_iqr, notes))
        elif kind == "count" and chars.get("quartiles") is None:  # streamed: no quartiles
            rows.append(_row("mean (SD)", cells, _mean_sd, notes))
        elif kind == "count":
            rows.append(_row("median (IQR q1 to q3)", cells, _count_median_iqr, notes))
        elif kind == "binary":
            rows.append(_row("n (%) with 1", cells, _count_share, notes))
        else:
            for i, lv in enumerate(lv["level"] for lv in v["whole_sample"]["levels"]):
                per = [_level_stat(c, i) for c in cells]
                rows.append(_row(f"{lv}, n (%)", per, _count_share, notes, level=True))
        if any(c.get("missing") for c in cells):
            rows.append(_row("missing", cells, lambda c, _n: Cell(f.integer(c["missing"])),
                             notes))
    basis = chars.get("missing_basis")
    missing_note = ("Missing counts are of the rows in the population, before complete-case "
                    "exclusion; variables without a missing row had none."
                    if basis == "population" else
                    "The analysed rows have no missing values by construction; the sample "
                    "flow lists the rows excluded for missing values.")
    grouping = (f"by {chars['exposure']}" if chars.get("grouped") else
                f"as a whole ({chars.get('exposure')} is not grouped: it is not categorical)")
    quartiles = (f"Quartiles by {chars['quartiles']}." if chars.get("quartiles") else
                 "A streamed run sums counts, means, SDs, minima and maxima over the batches; "
                 "it computes no medians or quartiles, which need every value at once.")
    return {"id": a["id"], "absent": None, "header": header, "rows": rows,
            "caption": f"Analysed rows of {a['id']}, {grouping}. {missing_note} {quartiles}",
            "notes": notes.items}


def _row(stat, cells, fmt, notes, level=False) -> dict:
    return {"span": False, "variable": "", "role": "", "stat": stat, "level": level,
            "cells": [fmt(c, notes) for c in cells]}


def _level_stat(c: dict, i: int) -> dict:
    lv = c["levels"][i]
    return {"n": c["n"], "count": lv["count"], "share": lv["share"], "reason": c.get("reason")}


def _empty(c: dict, notes: Notes) -> Cell:
    why = c.get("reason") or ("no analysed rows in this group" if c["n"] == 0 else
                              "not computed (no reason was recorded)")
    return Cell(f.DASH, notes.mark(why), why)


def _mean_sd(c: dict, notes: Notes) -> Cell:
    if c.get("mean") is None:
        return _empty(c, notes)
    if c.get("sd") is None:
        why = c.get("reason") or "a standard deviation needs at least two rows"
        return Cell(f"{f.num(c['mean'])} ({f.DASH})", notes.mark(why), why)
    return Cell(f"{f.num(c['mean'])} ({f.num(c['sd'])})")


def _median_iqr(c: dict, notes: Notes, fmt=f.num) -> Cell:
    if c.get("median") is None:
        return _empty(c, notes)
    return Cell(f"{fmt(c['median'])} (IQR {fmt(c['q1'])} to {fmt(c['q3'])})")


def _count_median_iqr(c: dict, notes: Notes) -> Cell:
    return _median_iqr(c, notes, f.plain)


def _count_share(c: dict, notes: Notes) -> Cell:
    if c.get("share") is None:
        return _empty(c, notes)
    return Cell(f"{f.integer(c['count'])} ({f.percent(c['share'])})")
