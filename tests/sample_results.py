"""A realistic results document for the report tests, in the layout of results.schema.json.

Modelled on the demo plan (plans/dusk-sleep.yaml): a gaussian analysis with a three-level
exposure and three tiers, a binomial and a Poisson analysis with two tiers each, five
decisions, an assumption check and an amendment. The estimates are invented but internally
consistent: test value, p and interval follow from estimate and standard error (scipy).
One binomial coefficient is deliberately not estimable, so the report must show a reason.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import stats

from compiler.plots import ResidualSample

PLAN_SHA = "3f9a0c1d2e4b5a6978c0d1e2f3a4b5c6d7e8f90123456789abcdef0123456789"
DATA_SHA = "a1b2c3d4e5f60718293a4b5c6d7e8f9001122334455667788990aabbccddeeff"
LEAFLET, COACHED = "guidance: leaflet vs none", "guidance: coached vs none"
RESULTS_SHA = "9e8d7c6b5a4f3e2d1c0b9a8f7e6d5c4b3a291807f6e5d4c3b2a1908f7e6d5c4b"


def coefficient(column: str, estimate: float | None, se: float | None, df: float | None,
                confidence: float = 0.95, reason: str | None = None) -> dict:
    test = "z" if df is None else "t"
    if estimate is None or se is None:
        return {"column": column, "estimate": estimate, "standard_error": se, "test": test,
                "test_value": None, "p_two_sided": None,
                "interval": {"low": None, "high": None, "level": confidence}, "reason": reason}
    ref = stats.norm if df is None else stats.t(df)
    q = float(ref.ppf(0.5 + confidence / 2))
    test_value = estimate / se
    return {"column": column, "estimate": estimate, "standard_error": se, "test": test,
            "test_value": test_value, "p_two_sided": float(2 * ref.sf(abs(test_value))),
            "interval": {"low": estimate - q * se, "high": estimate + q * se,
                         "level": confidence}, "reason": reason}


def _tier(name, added, coefs, family, n, **stats_):
    base = dict.fromkeys(["log_likelihood", "aic", "bic", "rss", "sigma2", "r_squared",
                          "adjusted_r_squared", "deviance", "null_deviance", "pearson_x2",
                          "dispersion", "iterations", "reason"])
    base.update(stats_)
    exposure = [c for c in coefs if c["column"].startswith("guidance: ")]
    df = n - len(coefs) if family == "gaussian" else None
    return {**base, "name": name, "terms_added": added, "n_parameters": len(coefs),
            "residual_df": n - len(coefs), "converged": True, "warnings": [],
            "columns": coefs,
            "exposure_by_covariance": [{"covariance": "classical", "df": df,
                                        "test": "z" if df is None else "t",
                                        "columns": exposure, "all_columns": None}]}


def _exposure_rows(tiers, family):
    rows, first = [], {}
    for tier in tiers:
        for c in tier["exposure_by_covariance"][0]["columns"]:
            first.setdefault(c["column"], c["estimate"])
            start, b = first[c["column"]], c["estimate"]
            change = None
            if start not in (None, 0) and b is not None:  # compiler.change's rule, by hand
                direction = ("none" if b == start else "sign reversed" if b * start < 0
                             else "away from zero" if abs(b) > abs(start) else "toward zero")
                change = {"relative": abs(b - start) / abs(start), "direction": direction}
            ratio = family != "gaussian"
            natural = {"scale": {"gaussian": "difference", "binomial": "odds ratio",
                                 "poisson": "rate ratio"}[family]}
            for key, value in (("estimate", b), ("low", c["interval"]["low"]),
                               ("high", c["interval"]["high"])):
                natural[key] = math.exp(value) if ratio and value is not None else value
            rows.append({"tier": tier["name"], "column": c["column"], "estimate": b,
                         "standard_error": c["standard_error"], "interval": c["interval"],
                         "natural": natural, "change_vs_first": change,
                         "reason": c["reason"]})
    return rows


def _flow(rows_read, by_condition, by_missing):
    in_population = rows_read - sum(s[2] for s in by_condition)
    n = in_population - sum(s[2] for s in by_missing)
    step = lambda s: {"reason": s[0], "variable": s[1], "excluded": s[2]}  # noqa: E731
    return {"rows_read": rows_read, "by_condition": [step(s) for s in by_condition],
            "rows_in_population": in_population, "by_missing": [step(s) for s in by_missing],
            "n": n}


def characteristics(groups=("none", "leaflet", "coached"), ns=(178, 180, 179)) -> dict:
    """The layout of compiler.characteristics.summarise, with invented values."""
    def cont(mean, sd, miss=0):
        return {"n": 0, "mean": mean, "sd": sd, "median": mean - 0.4, "q1": mean - 0.67 * sd,
                "q3": mean + 0.67 * sd, "min": mean - 2.5 * sd, "max": mean + 3 * sd,
                "missing": miss}

    def fill(stat, n):
        if n == 0:  # what summarise gives an empty group: no statistics, and why
            return {**dict.fromkeys(stat), "n": 0, "missing": 0,
                    "reason": "no analysed rows in this group"}
        return {**stat, "n": n}

    overall_n = sum(ns)
    variables = [
        {"name": "latency_w8", "role": "outcome", "kind": "continuous",
         "label": "Sleep-onset latency at week 8", "unit": "minutes",
         "whole_sample": fill(cont(38.2, 12.1, 41), overall_n),
         "groups": [fill(cont(40.9 - 3 * i, 12.0, 14 - i), n) for i, n in enumerate(ns)]},
        {"name": "age", "role": "covariate", "kind": "continuous", "label": None,
         "unit": "years", "whole_sample": fill(cont(51.3, 17.8), overall_n),
         "groups": [fill(cont(50.8 + i, 17.5), n) for i, n in enumerate(ns)]},
        {"name": "night_shift", "role": "covariate", "kind": "binary",
         "label": "Works night shifts",
         "unit": None, "whole_sample": {"n": overall_n, "count": 118, "share": 118 / overall_n,
                                   "missing": 0},
         "groups": [fill({"count": 38 + i, "share": (38 + i) / max(n, 1), "missing": 0}, n)
                    for i, n in enumerate(ns)]},
        {"name": "district", "role": "covariate", "kind": "categorical", "label": None,
         "unit": None,
         "whole_sample": {"n": overall_n, "missing": 0, "levels": [
             {"level": lv, "count": c, "share": c / overall_n}
             for lv, c in zip(["harbour", "hillside", "market", "riverside"],
                              [161, 107, 162, 107])]},
         "groups": [{"n": n, "missing": 0, "levels": [
             {"level": lv, "count": c if n else 0, "share": c / n if n else None}
             for lv, c in zip(["harbour", "hillside", "market", "riverside"],
                              [54, 36, 54, n - 144])],
             **({"reason": "no analysed rows in this group"} if n == 0 else {})} for n in ns]},
        {"name": "coffee_cups", "role": "covariate", "kind": "count",
         "label": "Cups of coffee per day", "unit": None,
         "whole_sample": {"n": overall_n, "mean": 1.8, "sd": 1.3, "median": 2.0, "q1": 1.0,
                     "q3": 3.0, "min": 0.0, "max": 7.0, "missing": 0},
         "groups": [fill({"mean": 1.8, "sd": 1.3, "median": 2.0, "q1": 1.0, "q3": 3.0,
                          "min": 0.0, "max": 7.0, "missing": 0}, n) for n in ns]},
    ]
    return {"exposure": "guidance", "grouped": True, "missing_basis": "population",
            "groups": [{"level": g, "n": n} for g, n in zip(groups, ns)],
            "whole_sample": {"n": overall_n}, "variables": variables,
            "exposure_missing": 0, "quartiles": "linear interpolation (numpy default)"}


def primary_analysis() -> dict:
    n = 537
    tiers = []
    specs = [
        ("crude", [], [("intercept", 40.91, 0.91), (LEAFLET, -2.63, 1.29),
                       (COACHED, -6.94, 1.29)],
         dict(rss=79650.1, sigma2=149.2, r_squared=0.0412, adjusted_r_squared=0.0376,
              log_likelihood=-2104.6, aic=4215.2, bic=4228.1)),
        ("baseline", ["latency_w0", "age"],
         [("intercept", 8.12, 2.41), (LEAFLET, -2.41, 0.98),
          (COACHED, -7.12, 0.98), ("latency_w0", 0.611, 0.038),
          ("age", 0.0912, 0.0231)],
         dict(rss=45812.7, sigma2=86.12, r_squared=0.4486, adjusted_r_squared=0.4444,
              log_likelihood=-1956.2, aic=3922.4, bic=3943.9)),
        ("full", ["night_shift", "district", "age^2", "screen_hours"],
         [("intercept", 9.87, 3.12), (LEAFLET, -2.52, 0.91),
          (COACHED, -7.03, 0.91), ("latency_w0", 0.603, 0.035),
          ("age", 0.0811, 0.0214), ("night_shift", 5.41, 0.92),
          ("district: hillside vs harbour", 1.62, 1.11), ("district: market vs harbour", -0.98, 0.97),
          ("district: riverside vs harbour", 2.14, 1.12), ("age^2", 0.00412, 0.00118),
          ("screen_hours", 1.07, 0.31)],
         dict(rss=38121.4, sigma2=72.34, r_squared=0.5412, adjusted_r_squared=0.5325,
              log_likelihood=-1906.9, aic=3837.8, bic=3889.2)),
    ]
    for name, added, coefs, extra in specs:
        df = n - len(coefs)
        tiers.append(_tier(name, added, [coefficient(t, e, s, df) for t, e, s in coefs],
                           "gaussian", n, **extra))
    return {
        "id": "primary", "family": "gaussian", "link": "identity", "outcome": "latency_w8",
        "offset": None, "population": "all-randomised", "rows_in_population": 588, "n": n,
        "covariance": "classical", "confidence": 0.95, "report_tier": "full", "events": None,
        "flow": _flow(600, [("age ≥ 18", "age", 12)],
                      [("missing latency_w8", "latency_w8", 41),
                       ("missing screen_hours", "screen_hours", 10)]),
        "characteristics": characteristics(),
        "tiers": tiers,
        "comparisons": [
            {"from": "crude", "to": "baseline", "test": "F", "method": "extra sum of squares",
             "df_added": 2, "df_denominator": 532.0, "test_value": 196.3, "p": 1.2e-63,
             "reason": None},
            {"from": "baseline", "to": "full", "test": "F", "method": "extra sum of squares",
             "df_added": 6, "df_denominator": 526.0, "test_value": 17.62, "p": 3.1e-18,
             "reason": None}],
        "exposure_variable": "guidance",
        "exposure": _exposure_rows(tiers, "gaussian"),
        "diagnostics": {"tier": "full",
                        "vif": [{"column": LEAFLET, "vif": 1.34},
                                {"column": COACHED, "vif": 1.35},
                                {"column": "latency_w0", "vif": 1.06},
                                {"column": "age", "vif": 41.2}, {"column": "age^2", "vif": 40.8},
                                {"column": "night_shift", "vif": 1.05},
                                {"column": "screen_hours", "vif": None}],
                        "normality": {"method": "Shapiro-Wilk", "test_value": 0.9951,
                                      "p": 0.0913},
                        "breusch_pagan": {"test": "chi2", "test_value": 21.7, "p": 0.0167},
                        "influential": [{"row_id": f"DS-0{k}", "cooks_distance": d} for k, d in
                                        [(412, 0.0311), (87, 0.0264), (233, 0.0221),
                                         (590, 0.0198), (145, 0.0187)]],
                        "reason": "screen_hours: VIF not computable (column is constant "
                                  "among the other columns' span)"},
        "warnings": [],
    }


def settled_analysis() -> dict:
    n = 537
    tiers = [
        _tier("crude", [], [coefficient("intercept", -0.412, 0.153, None),
                            coefficient(LEAFLET, 0.218, 0.214, None),
                            coefficient(COACHED, 0.611, 0.212, None)],
              "binomial", n, deviance=712.4, null_deviance=721.1, pearson_x2=537.0,
              dispersion=1.0056, log_likelihood=-356.2, aic=718.4, bic=731.3, iterations=4),
        _tier("adjusted", ["latency_w0", "age", "night_shift"],
              [coefficient("intercept", 3.12, 0.61, None),
               coefficient(LEAFLET, 0.241, 0.238, None),
               coefficient(COACHED, 0.702, 0.236, None),
               coefficient("latency_w0", -0.0712, 0.0101, None),
               coefficient("age", None, None, None,
                           reason="the fit is quasi-separated in age: estimate not finite"),
               coefficient("night_shift", -0.512, 0.251, None)],
              "binomial", n, deviance=640.2, null_deviance=721.1, pearson_x2=541.3,
              dispersion=1.0196, log_likelihood=-320.1, aic=652.2, bic=677.9, iterations=6),
    ]
    return {
        "id": "settled", "family": "binomial", "link": "logit", "outcome": "settled",
        "offset": None, "population": "all-randomised", "rows_in_population": 588, "n": n,
        "covariance": "classical", "confidence": 0.95, "report_tier": "adjusted",
        "events": 201,
        "flow": _flow(600, [("age ≥ 18", "age", 12)], [("missing settled", "settled", 41),
                                                         ("missing latency_w0", "latency_w0",
                                                          10)]),
        "characteristics": characteristics(),
        "tiers": tiers,
        "comparisons": [{"from": "crude", "to": "adjusted", "test": "chi2",
                         "method": "likelihood ratio", "df_added": 3, "df_denominator": None,
                         "test_value": 72.2, "p": 1.4e-15, "reason": None}],
        "exposure_variable": "guidance",
        "exposure": _exposure_rows(tiers, "binomial"),
        "diagnostics": {"tier": "adjusted", "vif": [], "normality": {
            "method": None, "test_value": None, "p": None},
            "breusch_pagan": {"test": "chi2", "test_value": None, "p": None},
            "influential": [{"row_id": "DS-0031", "cooks_distance": 0.0412}],
            "reason": "normality and Breusch–Pagan tests apply to gaussian fits only"},
        "warnings": ["age: the fit is quasi-separated; its estimate is not reported"],
    }


def awakenings_analysis() -> dict:
    n = 402
    tiers = [
        _tier("crude", [], [coefficient("intercept", -0.812, 0.031, None),
                            coefficient(LEAFLET, -0.061, 0.044, None),
                            coefficient(COACHED, -0.244, 0.046, None)],
              "poisson", n, deviance=451.2, null_deviance=480.6, pearson_x2=440.1,
              dispersion=1.1056, log_likelihood=-1012.3, aic=2030.6, bic=2042.6,
              iterations=4),
        _tier("adjusted", ["age", "night_shift", "coffee_cups"],
              [coefficient("intercept", -1.19, 0.072, None),
               coefficient(LEAFLET, -0.052, 0.044, None),
               coefficient(COACHED, -0.251, 0.046, None),
               coefficient("age", 0.0079, 0.0011, None),
               coefficient("night_shift", 0.342, 0.041, None),
               coefficient("coffee_cups", 0.0581, 0.0121, None)],
              "poisson", n, deviance=389.9, null_deviance=480.6, pearson_x2=381.2,
              dispersion=0.9627, log_likelihood=-981.6, aic=1975.3, bic=1999.3,
              iterations=4),
    ]
    return {
        "id": "awakenings", "family": "poisson", "link": "log", "outcome": "awakenings",
        "offset": "diary_nights", "population": "per-protocol", "rows_in_population": 402,
        "n": n, "covariance": "classical", "confidence": 0.95, "report_tier": "adjusted",
        "events": None,
        "flow": _flow(600, [("age ≥ 18", "age", 12),
                            ("sessions_attended ≥ 2", "sessions_attended", 186)], []),
        "characteristics": characteristics(ns=(0, 201, 201)),
        "tiers": tiers,
        "comparisons": [{"from": "crude", "to": "adjusted", "test": "chi2",
                         "method": "likelihood ratio", "df_added": 3, "df_denominator": None,
                         "test_value": 61.3, "p": 3.1e-13, "reason": None}],
        "exposure_variable": "guidance",
        "exposure": _exposure_rows(tiers, "poisson"),
        "diagnostics": None,
        "warnings": [],
    }


def _numbers(**values) -> dict:
    keys = ("estimate", "standard_error", "interval", "test_value", "p", "p_adjusted",
            "alpha_used", "margin", "scale", "covariance", "df", "natural")
    out = dict.fromkeys(keys)
    out.update(values)
    return out


def _difference(estimate, low, high, level) -> dict:
    return {"interval": {"low": low, "high": high, "level": level},
            "natural": {"scale": "difference", "estimate": estimate, "low": low, "high": high}}


def decisions() -> list[dict]:
    return [
        {"id": "H1", "analysis": "primary", "test": "superiority", "tier": "full",
         "verdict": "supported", "covariance": "HC3",
         "branch": "A1: Breusch–Pagan p = 0.0167 < 0.05, so HC3 replaces classical",
         "multiplicity": "holm over H1, H2 at α = 0.05",
         "reason": "two-sided p < 0.0001 is below α = 0.025 (difference (guidance: coached vs "
                   "none) -7.03, 95% CI -8.83 to -5.23)",
         "numbers": _numbers(estimate=-7.03, standard_error=0.918,
                             **_difference(-7.03, -8.83, -5.23, 0.95), test_value=-7.66,
                             p=8.1e-14, p_adjusted=1.6e-13, alpha_used=0.025,
                             scale="difference", covariance="HC3", df=526)},
        {"id": "H2", "analysis": "primary", "test": "superiority", "tier": "full",
         "verdict": "supported", "covariance": "HC3",
         "branch": "A1: Breusch–Pagan p = 0.0167 < 0.05, so HC3 replaces classical",
         "multiplicity": "holm over H1, H2 at α = 0.05",
         "reason": "two-sided p = 0.0061 is below α = 0.05 (difference (guidance: leaflet vs "
                   "none) -2.52, 95% CI -4.32 to -0.72)",
         "numbers": _numbers(estimate=-2.52, standard_error=0.917,
                             **_difference(-2.52, -4.32, -0.72, 0.95), test_value=-2.75,
                             p=0.0061, p_adjusted=0.0061, alpha_used=0.05,
                             scale="difference", covariance="HC3", df=526)},
        {"id": "S1", "analysis": "settled", "test": "superiority", "tier": "adjusted",
         "verdict": "undetermined", "covariance": "classical", "branch": None,
         "multiplicity": None,
         "reason": "the minimum information rule is not met: 9.6 events per parameter, "
                   "fewer than 10",
         "numbers": _numbers(alpha_used=0.025, scale="log odds ratio",
                             covariance="classical")},
        {"id": "T1", "analysis": "primary", "test": "tier-selection", "tier": "full",
         "verdict": "supported", "covariance": "classical", "branch": None,
         "multiplicity": None,
         "reason": "the additions of baseline were needed (p < 0.0001); the additions of full "
                   "were needed (p < 0.0001); the nested tests select tier full, which agrees "
                   "with the pre-specified report tier full",
         "numbers": {**_numbers(alpha_used=0.05), "report_tier": "full",
                     "selected_tier": "full", "agrees": True,
                     "comparisons": [{"from": "crude", "to": "baseline", "p": 1.2e-63,
                                      "needed": True, "method": "extra sum of squares"},
                                     {"from": "baseline", "to": "full", "p": 3.1e-18,
                                      "needed": True, "method": "extra sum of squares"}]}},
        {"id": "C1", "analysis": "primary", "test": "change-in-estimate", "tier": "full",
         "verdict": "not supported", "covariance": "classical", "branch": None,
         "multiplicity": None,
         "reason": "the estimate of guidance: coached vs none (difference) moved 1.3% away "
                   "from zero, from -6.94 in crude to -7.03 in full: a change whose size does "
                   "not exceed the 10% threshold, no confounding flagged",
         "numbers": {**_numbers(estimate=-7.03, scale="difference"), "threshold": 0.1,
                     "from_tier": "crude", "estimate_from": -6.94, "relative": 0.01297,
                     "direction": "away from zero", "flagged": False}},
    ]


def results(*, preregistered: bool = True, rehearsal: bool = False) -> dict:
    lock = {"sha256": "77aa" * 16, "frozen_at": "2026-11-20T09:30:00Z",
            "amended_at": "2026-11-27T16:05:12Z"} if preregistered else None
    return {
        "format": "prespec-results/2",
        "preregistered": preregistered,
        "rehearsal": rehearsal,
        "rehearsal_note": "synthetic data, 600 rows, seed 1" if rehearsal else None,
        "rehearsal_settings": ({"source": "synthetic", "seed": 1, "rows": 600, "effect": None,
                                "scramble": None} if rehearsal else None),
        "plan": {"id": "dusk-sleep",
                 "title": "Evening light-dimming guidance and sleep-onset latency at week 8",
                 "version": "1.0", "sha256": PLAN_SHA, "file_sha256": "5c" * 32,
                 "language": 1},
        "data": {"sha256": DATA_SHA, "rows_read": 600, "file": "dusk-sleep.csv",
                 "format": "csv", "size_bytes": 41872, "unused_columns": ["notes"]},
        "environment": {"prespec": "0.1.0", "python": "3.11.2", "numpy": "2.1.3",
                        "scipy": "1.14.1", "pandas": "2.2.3", "statsmodels": "0.14.4",
                        "pyarrow": "18.1.0", "platform": "Linux-6.1-x86_64-with-glibc2.36"},
        "contract": [
            {"severity": "warning", "column": "notes", "code": "unused-column",
             "message": "the file has a column the dictionary does not name; it is not used",
             "details": {}},
            {"severity": "warning", "column": "district", "code": "unseen-level",
             "message": "declared level 'riverside' occurs in only 3 rows of per-protocol",
             "details": {"rows": 3}},
        ],
        "analyses": [primary_analysis(), settled_analysis(), awakenings_analysis()],
        "decisions": decisions(),
        "assumptions": [{"id": "A1", "analysis": "primary", "check": "constant-variance",
                         "test_value": 21.7, "p": 0.0167, "triggered": True,
                         "covariance": "HC3",
                         "reason": "Breusch–Pagan p = 0.0167 is below 0.05: H1, H2 use HC3"}],
        "amendments": ([{"previous": "1" * 64, "new": PLAN_SHA,
                         "reason": "Add screen_hours to the full tier before unblinding, as "
                                   "the data manager reported it complete",
                         "time": "2026-11-27T16:05:12Z"}] if preregistered else []),
        "lock": lock,
    }


def plots(n: int = 537, seed: int = 7) -> dict:
    """The residual plots' samples of report-tier fitted values and standardized residuals,
    by analysis id."""
    rng = np.random.default_rng(seed)
    fitted = rng.normal(38, 9, n)
    residuals = rng.standard_t(8, n)
    return {"primary": ResidualSample.of(fitted, residuals),
            "settled": ResidualSample.of(rng.uniform(0.1, 0.8, n), rng.normal(0, 1, n))}


def small_results(**kwargs) -> dict:
    """The document cut to the gaussian analysis and its decisions: a quick PDF."""
    document = results(**kwargs)
    document["analyses"] = document["analyses"][:1]
    document["decisions"] = [d for d in document["decisions"] if d["analysis"] == "primary"]
    return document


def tiny_results(**kwargs) -> dict:
    """The gaussian analysis with its first and last tiers, no characteristics: a PDF of a
    few pages that still holds every kind of section, plot and missing value."""
    document = small_results(**kwargs)
    analysis = document["analyses"][0]
    analysis["tiers"] = [analysis["tiers"][0], analysis["tiers"][-1]]
    names = {t["name"] for t in analysis["tiers"]}
    analysis["exposure"] = [r for r in analysis["exposure"] if r["tier"] in names]
    analysis["comparisons"] = analysis["comparisons"][:1]
    analysis["characteristics"] = None
    document["decisions"] = document["decisions"][:1]
    return document
