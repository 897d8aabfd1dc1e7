"""`prespec compare A B` on two real bundles of the demo study: the run as frozen, and the run
after an amendment (confidence 0.95 → 0.9, H1's alpha tightened) on other data. Each kind of
difference must be named; the exit code is 0 whatever is found, 2 for a folder that is no
bundle, 5 for a bundle that is not intact."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

import bundlekit
from compiler import bundle as bundle_module
from compiler.cli import main
from compiler.compare import RELATIVE, same_within_rounding


@pytest.fixture(scope="module")
def two_bundles(tmp_path_factory):
    folder = tmp_path_factory.mktemp("compare")
    plan, data = bundlekit.study(folder / "study")
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(bundle_module, "render", bundlekit.quick_render)
        assert main(["freeze", str(plan)]) == 0
        assert main(["run", str(plan), "--data", str(data), "--out", str(folder / "a")]) == 0
        bundlekit.edit(plan, "    confidence: 0.95", "    confidence: 0.9")
        bundlekit.edit(plan, "    alpha: 0.025", "    alpha: 1.0e-300")
        assert main(["amend", str(plan), "--reason", "narrower intervals, stricter S1",
                     "--before-unblinding"]) == 0
        other = folder / "other.csv"
        subprocess.run([sys.executable, str(bundlekit.MAKE_DATA), str(other), "--rows", "200"],
                       check=True, capture_output=True)
        assert main(["run", str(plan), "--data", str(other), "--out", str(folder / "b")]) == 0
    return folder / "a", folder / "b"


def _compare(capsys, *args) -> tuple[int, dict]:
    code = main(["compare", "--json", *map(str, args)])
    return code, json.loads(capsys.readouterr().out)


def test_compare_names_the_changed_plan_path_style(two_bundles, capsys):
    code, found = _compare(capsys, *two_bundles)
    assert code == 0
    assert "analyses[primary].confidence: 0.95 → 0.9" in found["differences"]["plan"]


def test_compare_names_the_data_digest_and_rows(two_bundles, capsys):
    _, found = _compare(capsys, *two_bundles)
    data = found["differences"]["data"]
    assert any(line.startswith("data.sha256: ") for line in data)
    assert any(line.startswith("data.rows_read: ") for line in data)


def test_compare_names_values_and_verdicts(two_bundles, capsys):
    _, found = _compare(capsys, *two_bundles)
    values = found["differences"]["values"]
    assert any(line.startswith("analyses[primary].tiers[full]") for line in values)
    # S1 held to alpha 1e-300 instead of 0.025 is no longer supported
    assert "S1: supported → not supported" in found["differences"]["verdicts"]


def test_compare_names_the_amendments_between_them(two_bundles, capsys):
    _, found = _compare(capsys, *two_bundles)
    (entry,) = found["differences"]["amendments"]
    assert entry.startswith("only in B: ") and "narrower intervals, stricter S1" in entry
    assert "before unblinding" in entry


def test_compare_in_words(two_bundles, capsys):
    assert main(["compare", *map(str, two_bundles)]) == 0
    out = capsys.readouterr().out
    for heading in ("plan:", "data:", "values:", "amendments:"):
        assert f"\n{heading}\n" in out


def test_a_bundle_against_itself_has_no_differences(two_bundles, capsys):
    code, found = _compare(capsys, two_bundles[0], two_bundles[0])
    assert code == 0 and found["count"] == 0


def test_a_folder_that_is_no_bundle_is_exit_2(two_bundles, tmp_path, capsys):
    code, found = _compare(capsys, two_bundles[0], tmp_path)
    assert code == 2 and "not a bundle" in found["problems"][0]["message"]


def test_a_bundle_not_intact_is_exit_5(two_bundles, tmp_path, capsys):
    copy = bundlekit.copy_of(two_bundles[1], tmp_path)
    bundlekit.rewrite(copy / "report.html", b"<p>edited</p>")
    code, found = _compare(capsys, two_bundles[0], copy)
    assert code == 5 and "not intact" in found["problems"][0]["message"]


def test_beyond_rounding_is_a_relative_difference_above_1e_9():
    assert RELATIVE == 1e-9
    assert same_within_rounding(1.0, 1.0 + 1e-12)
    assert not same_within_rounding(1.0, 1.0 + 1e-8)
    assert not same_within_rounding(None, 0.0)
    assert not same_within_rounding(240, 200)
