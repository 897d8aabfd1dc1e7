"""The report: one self-contained HTML file and a PDF whose bytes repeat, across processes.

The input is tests/sample_results.py, a results document in the layout of
results.schema.json. PDF renders are slow (seconds), so they are few and shared.
"""

from __future__ import annotations

import hashlib
import re
import subprocess
import sys
import zlib
from pathlib import Path

import pytest
import sample_results as sample

from compiler.render import render_html, render_pdf

EPOCH = 1764000000  # 2025-11-24T16:00:00Z
TESTS = Path(__file__).resolve().parent

# Renders the tiny report in a fresh interpreter and prints the digests of both files.
CHILD = f"""
import hashlib, sys
sys.path.insert(0, {str(TESTS)!r})
import sample_results as s
from compiler.render import render_html, render_pdf
html = render_html(s.tiny_results(), s.plots(), results_sha256=s.RESULTS_SHA)
pdf = render_pdf(html, epoch={EPOCH})
print(hashlib.sha256(html.encode()).hexdigest(), hashlib.sha256(pdf).hexdigest())
"""


def _html(document=None, plots=None) -> str:
    return render_html(document or sample.results(), sample.plots() if plots is None else plots,
                       results_sha256=sample.RESULTS_SHA)


@pytest.fixture(scope="module")
def html() -> str:
    return _html()


@pytest.fixture(scope="module")
def child():
    """A second process rendering the same report, started early so it runs alongside."""
    process = subprocess.Popen([sys.executable, "-c", CHILD], stdout=subprocess.PIPE,
                               stderr=subprocess.PIPE, text=True)
    yield process
    process.kill()


@pytest.fixture(scope="module")
def tiny(child):
    html = render_html(sample.tiny_results(), sample.plots(), results_sha256=sample.RESULTS_SHA)
    return html, render_pdf(html, epoch=EPOCH)


def test_the_same_results_give_the_same_html_bytes(html):
    assert _html() == html


def test_the_same_html_gives_the_same_pdf_bytes(tiny):
    html, pdf = tiny
    assert render_pdf(html, epoch=EPOCH) == pdf


def test_another_process_renders_the_same_bytes(tiny, child):
    out, err = child.communicate(timeout=300)
    assert child.returncode == 0, err
    html, pdf = tiny
    assert out.split() == [hashlib.sha256(html.encode()).hexdigest(),
                           hashlib.sha256(pdf).hexdigest()]


def _pdf_objects(pdf: bytes) -> bytes:
    """The PDF with its compressed streams inflated (the Info dictionary sits in one)."""
    parts = [pdf]
    for stream in re.findall(rb"stream\r?\n(.*?)\r?\nendstream", pdf, flags=re.S):
        try:
            parts.append(zlib.decompress(stream))
        except zlib.error:
            pass
    return b"\n".join(parts)


def test_the_pdf_dates_come_from_the_epoch(tiny):
    objects = _pdf_objects(tiny[1])
    assert b"/CreationDate (D:20251124160000Z)" in objects
    assert b"/ModDate (D:20251124160000Z)" in objects


@pytest.mark.parametrize("anchor", [
    "verdicts", "flow", "contract", "characteristics", "analysis-primary", "analysis-settled",
    "analysis-awakenings", "decisions", "assumptions", "amendments", "environment"])
def test_every_section_is_present(html, anchor):
    assert f'id="{anchor}"' in html


def test_the_caution_stands_at_the_top_and_at_the_end(html):
    caution = ("This report supports, and does not replace, review by a qualified statistician "
               "under the regulations and guidance that apply to the study.")
    assert html.count(caution) == 2
    assert html.index(caution) < html.index('id="verdicts"')
    assert html.rindex(caution) > html.index('id="environment"')


def test_the_band_shows_the_study_the_three_digests_and_the_stamp(html):
    band = html[html.index('<header class="band"'):html.index("</header>")]
    for text in ("dusk-sleep", "version 1.0", sample.PLAN_SHA[:12], sample.DATA_SHA[:12],
                 sample.RESULTS_SHA[:12], "PRE-REGISTERED"):
        assert text in band


def test_a_value_that_is_null_shows_a_dash_and_its_reason(html):
    reason = "the fit is quasi-separated in age: estimate not finite"
    assert re.search(r'<td class="num null" title="' + re.escape(reason)
                     + r'">—<sup class="mark">(\d+)</sup></td>', html)
    assert re.search(r'<li value="\d+"><span class="mark">\d+</span> ' + re.escape(reason), html)


def test_every_null_mark_has_its_note(html):
    marks = set(re.findall(r'<sup class="mark">(\d+)</sup>', html))
    notes = set(re.findall(r'<li value="(\d+)">', html))
    assert marks and marks == notes


def test_the_html_is_self_contained(html):
    assert "<script" not in html and "<link" not in html and "@import" not in html
    assert not re.search(r'(src|href)="(https?:)?//', html)
    assert "<style>" in html


def test_element_ids_are_unique_across_the_inline_plots(html):
    ids = re.findall(r'\bid="([^"]+)"', html)
    assert len(ids) == len(set(ids))


def test_a_rehearsal_is_stamped_rehearsal_with_a_watermark():
    html = _html(sample.results(preregistered=False, rehearsal=True))
    assert 'class="stamp-rehearsal"' in html and 'class="watermark"' in html
    assert "PRE-REGISTERED" not in html


def test_an_unlocked_run_is_stamped_not_preregistered_and_has_no_amendment_log():
    html = _html(sample.results(preregistered=False))
    assert "NOT PRE-REGISTERED" in html
    assert "No lock: the plan was not frozen for this run" in html


def test_the_amendment_log_shows_each_entry(html):
    assert "Add screen_hours to the full tier before unblinding" in html


def test_an_analysis_without_plot_data_says_so():
    html = _html(sample.tiny_results(), plots={})
    assert "The residual plots were not drawn" in html


def _page_texts(html: str) -> list[str]:
    from weasyprint import HTML

    pages = HTML(string=html).render().pages
    return [" ".join(b.text for b in page._page_box.descendants() if getattr(b, "text", None))
            for page in pages]


def test_every_pdf_page_shows_the_digests_and_the_stamp(tiny):
    html, _ = tiny
    pages = _page_texts(html)
    assert len(pages) > 1
    for text in pages:
        for needed in (sample.PLAN_SHA[:12], sample.DATA_SHA[:12], sample.RESULTS_SHA[:12],
                       "dusk-sleep", "PRE-REGISTERED"):
            assert needed in text


def test_characteristics_left_out_of_a_streamed_run_say_why():
    document = sample.tiny_results()
    document["analyses"][0]["characteristics"] = {
        "variables": [], "reason": "not computed: a streamed run never holds the data's columns"}
    assert "a streamed run never holds the data&#39;s columns" in _html(document, plots={})
