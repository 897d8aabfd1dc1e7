"""Amendments state whether outcome data had been seen; the report shows it, and stamps every
page when a plan was changed after unblinding. A plan file that differs from the text frozen
in comments or layout only is said to, not passed over.

Why it matters (common practice in confirmatory trials): a change made once outcome data have
been seen can be steered by them, so a reader must be told of it wherever they look.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest
import sample_results as sample

import bundlekit
from compiler import lock
from compiler.cli import main
from compiler.pipeline import compile_plan
from compiler.problems import Exit
from compiler.render import render_html, render_pdf

DEMO = Path(__file__).resolve().parent.parent / "plans" / "dusk-sleep.yaml"
EPOCH = 1764000000
STAMP = "AMENDED AFTER UNBLINDING"


@pytest.fixture
def plan_file(tmp_path) -> Path:
    target = tmp_path / "dusk-sleep.yaml"
    shutil.copyfile(DEMO, target)
    return target


def _entries(plan: Path) -> list[dict]:
    return json.loads(lock.lock_path(plan).read_text(encoding="utf-8"))["amendments"]


def _frozen_and_changed(plan: Path) -> None:
    assert main(["freeze", str(plan)]) == Exit.OK
    bundlekit.edit(plan, "confidence: 0.95", "confidence: 0.9")


def test_amend_refuses_unless_the_analyst_states_whether_outcome_data_were_seen(plan_file,
                                                                                capsys):
    _frozen_and_changed(plan_file)
    before = lock.lock_path(plan_file).read_bytes()
    assert main(["amend", str(plan_file), "--reason", "narrower intervals"]) == Exit.PLAN_INVALID
    err = capsys.readouterr().err
    assert "--before-unblinding" in err and "--after-unblinding" in err
    assert lock.lock_path(plan_file).read_bytes() == before  # nothing written


def test_both_statements_at_once_are_a_command_line_error(plan_file):
    _frozen_and_changed(plan_file)
    with pytest.raises(SystemExit) as caught:
        main(["amend", str(plan_file), "--reason", "r", "--before-unblinding",
              "--after-unblinding"])
    assert caught.value.code == Exit.PLAN_INVALID


@pytest.mark.parametrize("flag, seen", [("--before-unblinding", False),
                                        ("--after-unblinding", True)])
def test_the_statement_is_recorded_in_the_chained_entry(plan_file, capsys, flag, seen):
    _frozen_and_changed(plan_file)
    assert main(["amend", str(plan_file), "--reason", "narrower", flag]) == Exit.OK
    assert ("after unblinding" if seen else "before unblinding") in capsys.readouterr().out
    entry, = _entries(plan_file)
    assert entry["outcome_data_seen"] is seen
    state = lock.require_match(compile_plan(plan_file), plan_file)
    assert state.amendments[0]["outcome_data_seen"] is seen


def test_changing_the_statement_afterwards_breaks_the_chain(plan_file, capsys):
    _frozen_and_changed(plan_file)
    main(["amend", str(plan_file), "--reason", "narrower", "--after-unblinding"])
    path = lock.lock_path(plan_file)
    text = path.read_text(encoding="utf-8")
    path.write_text(text.replace('"outcome_data_seen": true', '"outcome_data_seen": false'),
                    encoding="utf-8")
    assert main(["check", str(plan_file)]) == Exit.OK  # check does not read the lock
    run = main(["run", str(plan_file), "--out", str(plan_file.parent / "b")])
    assert run == Exit.LOCK
    assert "the amendment chain is broken at amendment 1" in capsys.readouterr().err


def _old_style_lock(plan: Path) -> None:
    """A lock amended before prespec asked: the entry has no outcome_data_seen, and its
    chain digests are those of that entry (as an older prespec wrote them)."""
    path = lock.lock_path(plan)
    document = json.loads(path.read_text(encoding="utf-8"))
    entry = document["amendments"][0]
    del entry["outcome_data_seen"]
    document["head"] = lock.digest(entry)
    path.write_text(json.dumps(document, indent=2, sort_keys=True), encoding="utf-8")


def test_an_old_entry_without_the_statement_still_reads_and_shows_not_stated(plan_file):
    _frozen_and_changed(plan_file)
    lock.amend(plan_file, "narrower", outcome_data_seen=False)
    _old_style_lock(plan_file)
    state = lock.require_match(compile_plan(plan_file), plan_file)  # still intact
    assert state.amendments[0]["outcome_data_seen"] is None
    html = render_html(sample.results(), sample.plots(), results_sha256=sample.RESULTS_SHA)
    assert "not stated" in html  # sample.results()'s entry has no statement either
    assert STAMP not in html


def _with_statement(document: dict, seen: bool | None) -> dict:
    for entry in document["amendments"]:
        entry["outcome_data_seen"] = seen
    return document


def test_the_amendment_log_shows_the_statement():
    html = render_html(_with_statement(sample.results(), False), sample.plots(),
                       results_sha256=sample.RESULTS_SHA)
    log = html[html.index('id="amendments"'):html.index('id="environment"')]
    assert "before unblinding: no outcome data had been seen" in log
    assert STAMP not in html


def _page_texts(html: str) -> list[str]:
    from weasyprint import HTML

    pages = HTML(string=html).render().pages
    return [" ".join(b.text for b in page._page_box.descendants() if getattr(b, "text", None))
            for page in pages]


def test_an_amendment_after_unblinding_is_stamped_on_every_page():
    document = _with_statement(sample.tiny_results(), True)
    html = render_html(document, sample.plots(), results_sha256=sample.RESULTS_SHA)
    log = html[html.index('id="amendments"'):html.index('id="environment"')]
    assert "after unblinding: outcome data had been seen" in log
    pages = _page_texts(html)
    assert len(pages) > 1
    for text in pages:
        assert f"{STAMP}: amendment 1 (2026-11-27T16:05:12Z)" in text
    assert render_pdf(html, epoch=EPOCH) == render_pdf(html, epoch=EPOCH)


# ---------------------------------------------------------------------------------------------
# One real run: amended after unblinding, then a comment added to the plan


@pytest.fixture(scope="module")
def late_bundle(tmp_path_factory):
    folder = tmp_path_factory.mktemp("late")
    plan, data = bundlekit.study(folder)
    assert main(["freeze", str(plan)]) == Exit.OK
    bundlekit.edit(plan, "threshold: 0.10", "threshold: 0.2")
    assert main(["amend", str(plan), "--reason", "wider threshold", "--after-unblinding"]) == 0
    bundlekit.edit(plan, "decisions:\n", "# reviewed again on 2026-12-04\ndecisions:\n")
    out = folder / "out"
    assert main(["run", str(plan), "--data", str(data), "--out", str(out)]) == Exit.OK
    return plan, data, out


def test_the_run_reports_the_statement_and_the_comment_only_difference(late_bundle):
    _, _, out = late_bundle
    document = json.loads((out / "results.json").read_text(encoding="utf-8"))
    assert document["amendments"][0]["outcome_data_seen"] is True
    assert document["lock"]["plan_text"] == "comments or layout differ"
    assert document["lock"]["file_sha256"] != document["plan"]["file_sha256"]
    html = (out / "report.html").read_text(encoding="utf-8")
    assert 'class="band-flag"' in html and f"{STAMP}: amendment 1" in html
    assert "differs from the text frozen in comments or layout only" in html


def test_the_results_still_follow_their_schema(late_bundle):
    import jsonschema

    from compiler.resources import schema_path

    _, _, out = late_bundle
    schema = json.loads(Path(schema_path("results.schema.json")).read_text(encoding="utf-8"))
    jsonschema.validate(json.loads((out / "results.json").read_text(encoding="utf-8")), schema)


def test_a_plan_run_as_frozen_says_so(tmp_path, monkeypatch):
    from compiler import bundle

    monkeypatch.setattr(bundle, "render", bundlekit.quick_render)
    plan, data = bundlekit.study(tmp_path)
    main(["freeze", str(plan)])
    assert main(["run", str(plan), "--data", str(data), "--out", str(tmp_path / "b")]) == 0
    document = json.loads((tmp_path / "b" / "results.json").read_text(encoding="utf-8"))
    assert document["lock"]["plan_text"] == "as frozen"
    assert document["amendments"] == []


def test_a_reformatted_plan_is_described_in_the_report():
    document = sample.results()
    document["lock"]["plan_text"] = "comments or layout differ"
    html = render_html(document, sample.plots(), results_sha256=sample.RESULTS_SHA)
    assert "differs from the text frozen in comments or layout only" in html
    document["lock"]["plan_text"] = "as frozen"
    html = render_html(document, sample.plots(), results_sha256=sample.RESULTS_SHA)
    assert "byte for byte the text frozen" in html


def test_freeze_of_a_plan_changed_in_comments_only_says_so_and_keeps_the_lock(plan_file):
    lock.freeze(plan_file)
    before = lock.lock_path(plan_file).read_bytes()
    assert "comments or layout" not in lock.freeze(plan_file).lines[0]
    bundlekit.edit(plan_file, "decisions:\n", "# reviewed\ndecisions:\n")
    report = lock.freeze(plan_file)
    assert "differs from the frozen text in comments or layout only" in report.lines[0]
    assert report.payload["comments_or_layout_differ"] is True
    assert lock.lock_path(plan_file).read_bytes() == before
