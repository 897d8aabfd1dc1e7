"""A data file with many columns the dictionary does not declare (issue 22, point 9).

The report and the contract's message name how many there are and the first few; results.json
lists every one. What the report holds does not grow with them: a file with ten times as many
unused columns gives the same report but for the counts. (Speed itself is measured by
bench/scale_bench.py, never timed in a test.)
"""

from __future__ import annotations

import csv
import re

import pytest
from bundlekit import study

from compiler import bundle, viewmodel
from compiler.pipeline import Stamp, analyse, compile_plan, data_path_for
from compiler.problems import LISTED, Stop
from compiler.render import render_html


def _widen(data, count: int) -> list[str]:
    """Append ``count`` undeclared columns to the demo's CSV; return their names."""
    with data.open(newline="", encoding="utf-8") as f:
        rows = list(csv.reader(f))
    names = [f"spare_{j:05d}" for j in range(1, count + 1)]
    with data.open("w", newline="", encoding="utf-8") as f:
        writer = csv.writer(f, lineterminator="\n")
        writer.writerow(rows[0] + names)
        writer.writerows(row + ["1"] * count for row in rows[1:])
    return names


def _document(tmp_path, count: int):
    plan_path, data = study(tmp_path)
    names = _widen(data, count)
    plan = compile_plan(plan_path)
    analysed = analyse(plan, data_path_for(plan, data))
    document = bundle.results_document(analysed, Stamp(preregistered=False),
                                       plan_bytes=plan_path.read_bytes(), state=None,
                                       settings=None)
    return document, names


@pytest.fixture(scope="module")
def wide(tmp_path_factory):
    return _document(tmp_path_factory.mktemp("wide"), 400)


def _finding(document):
    found = [p for p in document["contract"] if p["code"] == "unused-columns"]
    assert len(found) == 1, document["contract"]
    return found[0]


def test_results_json_lists_every_unused_column_in_file_order(wide):
    document, names = wide
    assert document["data"]["unused_columns"] == names
    assert _finding(document)["details"]["columns"] == names


def test_the_finding_names_the_count_and_the_first_few(wide):
    document, names = wide
    message = _finding(document)["message"]
    assert "400 in all" in message and f"{400 - LISTED} more" in message
    assert ", ".join(names[:LISTED]) in message
    assert names[LISTED] not in message and names[-1] not in message


def test_the_report_names_the_count_and_the_first_few(wide):
    document, names = wide
    facts = dict(viewmodel.contract_view(document)["facts"])
    shown = facts["columns not in the dictionary"]
    assert shown.startswith(", ".join(names[:LISTED]))
    assert "400 in all" in shown and "results.json" in shown
    assert names[LISTED] not in shown
    html = render_html(document, {}, results_sha256="0" * 64)
    assert names[LISTED] not in html and names[-1] not in html


def test_a_short_list_is_given_whole(tmp_path):
    document, names = _document(tmp_path, 3)
    facts = dict(viewmodel.contract_view(document)["facts"])
    assert facts["columns not in the dictionary"] == "spare_00001, spare_00002, spare_00003"
    assert _finding(document)["message"].endswith("not read: spare_00001, spare_00002, "
                                                  "spare_00003")


def test_the_report_does_not_grow_with_the_unused_columns(wide, tmp_path):
    """Ten times the unused columns: the same report but for the counts, the file's size and
    digest (the HTML's length, the cost of laying it out, does not follow the columns)."""
    many, _ = _document(tmp_path, 4000)
    few, _ = wide

    def masked(document) -> str:
        html = render_html(document, {}, results_sha256="0" * 64)
        html = re.sub(r"\b[0-9a-f]{6,64}\b", "DIGEST", html)  # the data's, whole or cut
        return re.sub(r"[0-9][0-9\u202f]*", "N", html)

    assert masked(many) == masked(few)


def test_many_values_outside_the_levels_are_summarised(tmp_path):
    plan_path, data = study(tmp_path)
    with data.open(newline="", encoding="utf-8") as f:
        rows = list(csv.reader(f))
    column = rows[0].index("district")
    for i, row in enumerate(rows[1:]):
        row[column] = f"zone{i % 30:02d}"
    with data.open("w", newline="", encoding="utf-8") as f:
        csv.writer(f, lineterminator="\n").writerows(rows)
    plan = compile_plan(plan_path)
    with pytest.raises(Stop) as stopped:
        analyse(plan, data_path_for(plan, data))
    message = next(p.message for p in stopped.value.problems if p.code == "unknown-level")
    assert "`zone00` (8 rows)" in message and "`zone09` (8 rows)" in message
    assert "zone10" not in message and "and 20 more (30 in all)" in message
