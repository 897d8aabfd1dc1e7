"""The report shows the inference that decided, every verdict's estimate and interval, and
no empty rows (issue 21, points 1, 2, 4 and 7).

The document comes from a real run of the demo plan (tests/bundlekit: seeded invented data),
edited so that the constant-variance check switches H1 and H2 to HC3 (p_below 0.99), S1 is
one-sided at 0.05, and an equivalence rule exists. Every number the report prints is checked
against the results document it was made from: the view model formats, never recomputes.
"""

from __future__ import annotations

import re

import pytest
from bundlekit import edit, study

from compiler import report_format as f
from compiler import viewmodel, viewmodel_analysis
from compiler.pipeline import Stamp, analyse, compile_plan
from compiler.render import render_html
from compiler.results import build

SHA = "0" * 64


@pytest.fixture(scope="module")
def document(tmp_path_factory) -> dict:
    plan_path, data = study(tmp_path_factory.mktemp("decided"))
    edit(plan_path, "    p_below: 0.05\n", "    p_below: 0.99\n")
    edit(plan_path, "    direction: higher\n    alpha: 0.025\n",
         "    direction: higher\n    alpha: 0.05\n")
    edit(plan_path, "assumptions:\n",
         "  - {id: E1, analysis: primary, test: equivalence, level: leaflet, "
         "margins: [-5, 5]}\nassumptions:\n")
    plan = compile_plan(plan_path)
    analysed = analyse(plan, data)
    return build(analysed, stamp=Stamp(preregistered=False), plan_file_sha256=SHA,
                 environment={"prespec": "test"})


@pytest.fixture(scope="module")
def view(document) -> dict:
    return viewmodel.build(document, {}, results_sha256=SHA)


@pytest.fixture(scope="module")
def html(document) -> str:
    return render_html(document, {}, results_sha256=SHA)


def _decision(document, decision_id):
    return next(d for d in document["decisions"] if d["id"] == decision_id)


def _primary(view):
    return next(a for a in view["analyses"] if a["id"] == "primary")


def _coefficient(document, analysis, tier, column):
    a = next(x for x in document["analyses"] if x["id"] == analysis)
    t = next(x for x in a["tiers"] if x["name"] == tier)
    return next(c for c in t["columns"] if c["column"] == column)


# ---- point 1: the analysis page shows what decided, and its own numbers, both labelled ----

def test_the_fallback_decision_records_hc3_at_its_holm_level(document):
    h1 = _decision(document, "H1")
    assert h1["inference"]["covariance"] == "HC3"
    assert h1["inference"]["interval"]["level"] in (0.975, 0.95)  # a Holm step: α/2 or α
    assert "Holm step" in h1["inference"]["level_why"]


def test_the_analysis_page_shows_the_decided_and_its_own_inference(document, view):
    h1 = _decision(document, "H1")
    row = next(r for r in _primary(view)["decided"] if r["id"] == "H1")
    decided, page = row["lines"]
    inference = h1["inference"]
    assert (decided["label"], decided["covariance"]) == ("decided", "HC3")
    assert decided["standard_error"].text == f.num(inference["standard_error"])
    assert decided["level"].text == f.level(inference["interval"]["level"])
    assert decided["interval"].text == (f"{f.num(inference['interval']['low'])} to "
                                        f"{f.num(inference['interval']['high'])}")
    own = _coefficient(document, "primary", "full", "guidance: coached vs none")
    assert (page["label"], page["covariance"]) == ("this page", "classical")
    assert page["standard_error"].text == f.num(own["standard_error"])
    assert page["interval"].text == (f"{f.num(own['interval']['low'])} to "
                                     f"{f.num(own['interval']['high'])}")
    assert "Holm step" in row["why"] and "Breusch–Pagan" in row["why"]


def test_the_analysis_facts_name_the_covariance_the_decisions_used(view):
    facts = dict(_primary(view)["facts"])
    assert facts["covariance"].startswith("classical in the tables of this page")
    assert "decided under HC3" in facts["covariance"]


def test_the_decision_detail_labels_both_intervals_and_says_why_the_level(document, view):
    d = next(x for x in view["decisions"] if x["id"] == "H1")
    labels = [label for label, _ in d["numbers"]]
    level = f.level(_decision(document, "H1")["inference"]["interval"]["level"])
    assert f"{level} CI, decided" in labels
    assert f"{f.level(0.95)} CI, classical, as on the analysis page" in labels
    assert "why this level" in labels and "why this covariance" in labels


def test_a_one_sided_interval_says_one_minus_two_alpha(document):
    s1 = _decision(document, "S1")
    assert s1["inference"]["interval"]["level"] == pytest.approx(0.9)  # 1 − 2α at α = 0.05
    assert s1["inference"]["level_why"].startswith("1 − 2α with α = 0.05, the rule's own")


# ---- point 2: every verdict line carries its estimate and interval ------------------------

@pytest.mark.parametrize("decision_id", ["H1", "H2", "S1", "E1"])
def test_every_verdict_line_on_an_estimate_carries_its_natural_scale_interval(document,
                                                                             decision_id):
    d = _decision(document, decision_id)
    natural = d["inference"]["natural"]
    words = "odds ratio" if d["analysis"] == "settled" else "difference"
    assert re.search(rf"{words} \(guidance: \w+ vs none\) -?[\d.]+, [\d.]+% CI -?[\d.]+ "
                     rf"to -?[\d.]+",
                     d["reason"]), d["reason"]
    assert natural["low"] < natural["estimate"] < natural["high"]


def test_the_verdict_table_has_an_estimate_and_interval_column(document, view, html):
    assert ">estimate (interval)</th>" in html
    row = next(r for r in view["summary"] if r["id"] == "S1")
    natural = _decision(document, "S1")["inference"]["natural"]
    assert row["estimate"] == (f"odds ratio {f.num(natural['estimate'])} (90{f.THIN}% CI "
                               f"{f.num(natural['low'])} to {f.num(natural['high'])})")


# ---- point 4: the report says so beside a one-sided rule above 0.025 ----------------------

def test_the_report_cautions_a_one_sided_rule_at_005(document, html):
    (caution,) = _decision(document, "S1")["cautions"]
    assert "0.025" in caution
    assert html.count(f"Caution: {caution}") == 2  # the verdict table and the detail


# ---- point 7: no empty rows, no "a equivalence", labels not column names ------------------

def test_no_fit_statistic_row_is_empty_without_a_reason(view):
    for a in view["analyses"]:
        for row in a["fit"]["rows"]:
            assert not all(c.text == f.DASH for c in row["cells"]), (a["id"], row["label"])


def test_a_glm_prints_no_residual_normality_or_constant_variance_rows(view, html):
    settled = next(a for a in view["analyses"] if a["id"] == "settled")
    assert settled["diagnostics"]["tests"] == []
    primary = _primary(view)
    assert [t["label"] for t in primary["diagnostics"]["tests"]][1] == "Breusch–Pagan"


def test_no_decision_row_says_it_does_not_apply(html):
    assert "does not apply to" not in html
    assert "a equivalence" not in html


def test_headings_facts_and_axis_use_the_declared_label_and_unit(view, document, monkeypatch):
    primary = _primary(view)
    assert primary["heading"] == ("Sleep-onset latency at week 8 (minutes) by "
                                  "Light-dimming guidance")
    assert dict(primary["facts"])["outcome"] == ("Sleep-onset latency at week 8 "
                                                 "(latency_w8, minutes)")
    seen = {}
    monkeypatch.setattr(viewmodel_analysis.plotting, "forest",
                        lambda rows, **kw: seen.update(kw) or "<svg></svg>")
    a = next(x for x in document["analyses"] if x["id"] == "primary")
    viewmodel_analysis._forest(a)
    assert seen["axis_label"] == "difference in Sleep-onset latency at week 8 (minutes)"
