"""No first-round name is left: the results document, the report and the design-column labels
use the second naming round (shared/design.md, "Results document", prespec-results/2).

The first round's keys echoed a modelling library's attribute names and a tidying package's
coefficient table, its labels a statistical environment's intercept and a commercial
package's parameter labels, and its characteristics table a table package's default layout.
A real bundle of the demo study (run through the command line, report rendered) is searched
for every one of them; the label of each design-column form is checked on its own.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess

import pytest
from bundlekit import study

from compiler.cli import main
from compiler.columns import INTERCEPT, term_labels
from compiler.plan import Term
from compiler.results import FORMAT

FIRST_ROUND_KEYS = {
    "coefficients", "term", "std_error", "statistic", "p_value", "ci_low", "ci_high",
    "ci_level", "df_resid", "pearson_chi2", "change_from_first", "ratio", "ratio_ci_low",
    "ratio_ci_high", "exposure_inference", "joint", "joint_test", "adjusted_p",
    "adj_r_squared", "overall", "distribution", "change",
}
# first-round labels and layouts, as they would print
FIRST_ROUND_TEXT = [
    r"\(intercept\)",                 # the intercept's label
    r"\b[a-z_]+=[a-z_]+\b",           # VAR=LEVEL
    r"\b[a-z_)\]^0-9]+\*[a-z_(]+",    # A*B
    r"spline\([a-z_]+\)\[\d\]",       # spline(VAR)[j]
    r"\[Q1, Q3\]", r"median \[", r"\bOverall\b",
    r"\bCI low\b", r"\bCI high\b", r">SE<", r">statistic<", r"change from first",
]


@pytest.fixture(scope="module")
def bundle(tmp_path_factory):
    folder = tmp_path_factory.mktemp("names")
    plan, data = study(folder / "study")
    out = folder / "bundle"
    assert main(["run", str(plan), "--data", str(data), "--out", str(out), "--unlocked"]) == 0
    return out


def _keys(value) -> set[str]:
    if isinstance(value, dict):
        return set(value).union(*(_keys(v) for v in value.values()))
    if isinstance(value, list):
        return set().union(*(_keys(v) for v in value))
    return set()


def _strings(value) -> list[str]:
    if isinstance(value, dict):
        return [s for v in value.values() for s in _strings(v)]
    if isinstance(value, list):
        return [s for v in value for s in _strings(v)]
    return [value] if isinstance(value, str) else []


def test_the_document_is_of_the_second_round(bundle):
    document = json.loads((bundle / "results.json").read_bytes())
    assert FORMAT == document["format"] == "prespec-results/2"


def test_no_first_round_key_is_left_in_results_json(bundle):
    document = json.loads((bundle / "results.json").read_bytes())
    assert _keys(document) & FIRST_ROUND_KEYS == set()


def test_no_first_round_label_is_left_in_results_json(bundle):
    document = json.loads((bundle / "results.json").read_bytes())
    texts = [s for s in _strings(document) if not s.startswith(("Linux", "/"))]
    for pattern in FIRST_ROUND_TEXT:
        found = [s for s in texts if re.search(pattern, s)]
        assert found == [], pattern


def test_no_first_round_label_or_heading_is_left_in_the_report(bundle):
    html = (bundle / "report.html").read_text(encoding="utf-8")
    text = re.sub(r"<(style|script)\b.*?</\1>", "", html, flags=re.S)  # CSS is not the report
    text = re.sub(r"<[^>]+>", " ", text)  # what the report says, the plots' words included
    for pattern in FIRST_ROUND_TEXT:
        assert re.search(pattern, text) is None, pattern
    assert "guidance: coached vs none" in text and " intercept " in text
    assert "median (IQR" in text and "whole sample (n =" in text


@pytest.mark.skipif(shutil.which("pdftotext") is None, reason="pdftotext is not installed")
def test_no_first_round_label_or_heading_is_left_in_the_pdf(bundle):
    text = subprocess.run(["pdftotext", str(bundle / "report.pdf"), "-"], check=True,
                          capture_output=True, text=True).stdout
    for pattern in FIRST_ROUND_TEXT:
        assert re.search(pattern, text) is None, pattern
    assert "guidance: coached vs none" in text


def test_the_coefficient_table_names_the_reference_distribution(bundle):
    html = (bundle / "report.html").read_text(encoding="utf-8")
    assert re.search(r"t = −?\d", html) and re.search(r"z = −?\d", html)
    assert "two-sided p" in html and "standard error" in html


# ---- one test per label form (compiler/columns.py) ----------------------------------------

def _plan(tmp_path):
    from compiler.pipeline import compile_plan

    plan, _ = study(tmp_path)
    return compile_plan(plan)


def test_the_intercept_is_labelled_intercept():
    assert INTERCEPT == "intercept"


def test_a_level_is_labelled_against_its_reference(tmp_path):
    plan = _plan(tmp_path)
    assert term_labels(plan, Term("variable", ("guidance",))) == (
        "guidance: leaflet vs none", "guidance: coached vs none")


def test_a_continuous_count_or_binary_variable_is_its_name(tmp_path):
    plan = _plan(tmp_path)
    for name in ("age", "coffee_cups", "night_shift"):
        assert term_labels(plan, Term("variable", (name,))) == (name,)


def test_a_power_and_a_log_keep_their_forms(tmp_path):
    plan = _plan(tmp_path)
    assert term_labels(plan, Term("power", ("age",), degree=2)) == ("age^2",)
    assert term_labels(plan, Term("log", ("age",))) == ("log(age)",)


def test_a_spline_numbers_its_columns(tmp_path):
    plan = _plan(tmp_path)
    assert term_labels(plan, Term("spline", ("age",), knots=(20.0, 40.0, 60.0, 80.0))) == (
        "spline(age) #1", "spline(age) #2", "spline(age) #3")


def test_a_product_joins_its_sides_with_a_times_sign(tmp_path):
    plan = _plan(tmp_path)
    assert term_labels(plan, Term("product", ("night_shift", "age"))) == ("night_shift × age",)
    assert term_labels(plan, Term("product", ("guidance", "age"))) == (
        "guidance: leaflet vs none × age", "guidance: coached vs none × age")
    assert Term("product", ("guidance", "age")).label == "guidance × age"


# ---- the report's own tables (viewmodel_analysis), on the sample document -----------------

def _views():
    import sample_results as sample

    from compiler.report_format import Counter, Notes
    from compiler.viewmodel_analysis import analysis_view, characteristics_view

    document = sample.results()
    counter = Counter()
    analyses = {a["id"]: a for a in document["analyses"]}
    return analyses, (lambda a: analysis_view(a, None, Notes(counter))), (
        lambda a: characteristics_view(a, Notes(counter)))


def test_the_characteristics_table_writes_median_iqr_n_percent_and_mean_sd():
    analyses, _, characteristics = _views()
    view = characteristics(analyses["primary"])
    assert view["header"][-1] == "whole sample (n = 537)"
    stats = [r["stat"] for r in view["rows"] if not r["span"]]
    assert {"mean (SD)", "median (IQR q1 to q3)", "n (%) with 1"} <= set(stats)
    median = next(r for r in view["rows"] if r["stat"] == "median (IQR q1 to q3)")
    outcome = analyses["primary"]["characteristics"]["variables"][0]["whole_sample"]
    from compiler import report_format as f
    assert median["cells"][-1].text == (f"{f.num(outcome['median'])} (IQR "
                                        f"{f.num(outcome['q1'])} to {f.num(outcome['q3'])})")


def test_a_coefficient_row_is_column_estimate_with_interval_se_test_value_and_p():
    from compiler import report_format as f

    analyses, analysis, _ = _views()
    a = analyses["primary"]
    tier = analysis(a)["tiers"][0]
    row = tier["rows"][2]
    c = a["tiers"][0]["columns"][2]
    assert row["column"] == "guidance: coached vs none" == c["column"]
    interval = c["interval"]
    assert [cell.text for cell in row["cells"]] == [
        f"{f.num(c['estimate'])} ({f.num(interval['low'])} to {f.num(interval['high'])})",
        f.num(c["standard_error"]), f"t = {f.num(c['test_value'])}",
        f.p_value(c["p_two_sided"])]
    settled = analysis(analyses["settled"])["tiers"][0]["rows"][1]["cells"][2]
    assert settled.text.startswith("z = ")


def test_the_exposure_table_gives_the_natural_scale_beside_the_model_scale():
    from compiler import report_format as f

    analyses, analysis, _ = _views()
    a = analyses["settled"]
    row = analysis(a)["exposure_rows"][-1]
    r = a["exposure"][-1]
    natural = r["natural"]
    assert natural["scale"] == "odds ratio"
    assert row["cells"][2].text == (f"{f.num(natural['estimate'])} ({f.num(natural['low'])} "
                                    f"to {f.num(natural['high'])})")
    assert row["change"].text == f.change(r["change_vs_first"])
