"""freeze, amend and the lock check: canonical digests, plain-words changes, the hash chain."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest

from compiler import lock
from compiler.canonical import canonical_bytes, differences, plan_digest, plan_form, plan_key
from compiler.cli import main
from compiler.pipeline import compile_plan
from compiler.problems import Exit, Stop

DEMO = Path(__file__).resolve().parent.parent / "plans" / "dusk-sleep.yaml"


@pytest.fixture
def plan_file(tmp_path) -> Path:
    target = tmp_path / "dusk-sleep.yaml"
    shutil.copyfile(DEMO, target)
    return target


def edit(path: Path, old: str, new: str) -> None:
    text = path.read_text(encoding="utf-8")
    assert old in text, old
    path.write_text(text.replace(old, new, 1), encoding="utf-8")


def stop_of(call) -> Stop:
    with pytest.raises(Stop) as caught:
        call()
    return caught.value


def test_freeze_writes_the_lock_beside_the_plan(plan_file):
    report = lock.freeze(plan_file)
    written = json.loads(lock.lock_path(plan_file).read_text(encoding="utf-8"))
    assert report.exit_code == Exit.OK
    assert lock.lock_path(plan_file).name == "dusk-sleep.yaml.lock.json"
    assert written["plan"]["sha256"] == plan_digest(compile_plan(plan_file))
    assert written["freeze"]["time"].endswith("Z") and len(written["freeze"]["time"]) == 20
    assert written["freeze"]["language"] == 1 and written["amendments"] == []


def test_comments_and_layout_do_not_change_the_canonical_digest(plan_file, tmp_path):
    before = plan_digest(compile_plan(plan_file))
    edit(plan_file, "confidence: 0.95", "confidence: 0.950   # as agreed")
    edit(plan_file, "  - id: H1\n", "# the primary hypothesis\n  - id: H1\n")
    assert plan_digest(compile_plan(plan_file)) == before


def test_a_change_of_meaning_changes_the_canonical_digest(plan_file):
    before = plan_digest(compile_plan(plan_file))
    edit(plan_file, "threshold: 0.10", "threshold: 0.2")
    assert plan_digest(compile_plan(plan_file)) != before


def test_freeze_twice_says_already_frozen_and_keeps_the_lock(plan_file):
    lock.freeze(plan_file)
    first = lock.lock_path(plan_file).read_bytes()
    report = lock.freeze(plan_file)
    assert report.exit_code == Exit.OK and "already frozen" in report.lines[0]
    assert lock.lock_path(plan_file).read_bytes() == first


def test_freeze_of_a_changed_plan_refuses_and_points_to_amend(plan_file):
    lock.freeze(plan_file)
    edit(plan_file, "confidence: 0.95", "confidence: 0.9")
    stop = stop_of(lambda: lock.freeze(plan_file))
    assert stop.exit_code == Exit.LOCK
    assert "analyses[primary].confidence: 0.95 → 0.9" in stop.problems[0].message
    assert "amend" in stop.problems[0].hint


def test_changes_are_named_path_style_one_line_each(plan_file):
    old = plan_form(compile_plan(plan_file))
    edit(plan_file, "confidence: 0.95", "confidence: 0.9")
    edit(plan_file, "test: tier-selection\n    alpha: 0.05", "test: tier-selection\n    alpha: 0.025")
    edit(plan_file, "add: [night_shift, district, {power: age, degree: 2}, screen_hours]",
         "add: [night_shift, district, {power: age, degree: 2}]")
    changes = differences(old, plan_form(compile_plan(plan_file)), key_of=plan_key)
    assert changes == ["analyses[primary].confidence: 0.95 → 0.9",
                       "analyses[primary].tiers[full].add: - screen_hours",
                       "decisions[T1].alpha: 0.05 → 0.025"]


def test_a_population_condition_change_reads_as_the_condition(plan_file):
    old = plan_form(compile_plan(plan_file))
    edit(plan_file, "{variable: sessions_attended, at_least: 2}",
         "{variable: sessions_attended, at_least: 3}")
    changes = differences(old, plan_form(compile_plan(plan_file)), key_of=plan_key)
    assert changes == ["populations[per-protocol].where: - sessions_attended ≥ 2",
                       "populations[per-protocol].where: + sessions_attended ≥ 3"]


def test_run_check_refuses_a_plan_without_a_lock(plan_file):
    stop = stop_of(lambda: lock.require_match(compile_plan(plan_file), plan_file))
    assert stop.exit_code == Exit.LOCK and "not frozen" in stop.problems[0].message


def test_amend_appends_a_chained_entry_with_the_reason(plan_file):
    lock.freeze(plan_file)
    frozen = json.loads(lock.lock_path(plan_file).read_text(encoding="utf-8"))
    edit(plan_file, "confidence: 0.95", "confidence: 0.9")
    report = lock.amend(plan_file, "the steering group asked for 90% intervals",
                        outcome_data_seen=False)
    amended = json.loads(lock.lock_path(plan_file).read_text(encoding="utf-8"))
    entry = amended["amendments"][0]
    assert report.exit_code == Exit.OK
    assert entry["previous"] == frozen["plan"]["sha256"]
    assert entry["new"] == plan_digest(compile_plan(plan_file)) == amended["plan"]["sha256"]
    assert entry["reason"] == "the steering group asked for 90% intervals"
    assert entry["digest_of_previous_entry"] == lock.digest(frozen["freeze"])
    assert "  analyses[primary].confidence: 0.95 → 0.9" in report.lines


def test_amend_without_a_lock_exits_4(plan_file):
    assert stop_of(lambda: lock.amend(plan_file, "why", outcome_data_seen=False)).exit_code == Exit.LOCK


def test_amend_of_an_unchanged_plan_exits_4(plan_file):
    lock.freeze(plan_file)
    stop = stop_of(lambda: lock.amend(plan_file, "why", outcome_data_seen=False))
    assert stop.exit_code == Exit.LOCK and "unchanged" in stop.problems[0].message


def _amended_twice(plan_file) -> Path:
    lock.freeze(plan_file)
    edit(plan_file, "confidence: 0.95", "confidence: 0.9")
    lock.amend(plan_file, "first", outcome_data_seen=False)
    edit(plan_file, "threshold: 0.10", "threshold: 0.2")
    lock.amend(plan_file, "second", outcome_data_seen=True)
    return lock.lock_path(plan_file)


def _rewrite(path: Path, change) -> None:
    document = json.loads(path.read_text(encoding="utf-8"))
    change(document)
    path.write_text(json.dumps(document, indent=2), encoding="utf-8")


def test_an_edited_amendment_reason_breaks_the_chain(plan_file):
    path = _amended_twice(plan_file)
    _rewrite(path, lambda d: d["amendments"][0].update(reason="nothing to see"))
    stop = stop_of(lambda: lock.require_match(compile_plan(plan_file), plan_file))
    assert stop.exit_code == Exit.LOCK
    assert "broken at amendment 2" in stop.problems[0].message


def test_a_removed_amendment_breaks_the_chain(plan_file):
    path = _amended_twice(plan_file)
    _rewrite(path, lambda d: d["amendments"].pop(0))
    stop = stop_of(lambda: lock.require_match(compile_plan(plan_file), plan_file))
    assert "broken at amendment 1" in stop.problems[0].message


def test_an_edited_canonical_plan_in_the_lock_is_caught(plan_file):
    lock.freeze(plan_file)
    _rewrite(lock.lock_path(plan_file),
             lambda d: d["canonical_plan"]["analyses"][0].update(confidence=0.5))
    stop = stop_of(lambda: lock.read_lock(lock.lock_path(plan_file)))
    assert "canonical_plan does not match" in stop.problems[0].message


def test_reindenting_the_lock_does_not_break_it(plan_file):
    path = _amended_twice(plan_file)
    path.write_bytes(canonical_bytes(json.loads(path.read_bytes())))
    assert lock.require_match(compile_plan(plan_file), plan_file).amended_at is not None


def test_freeze_from_the_command_line_exits_0_and_amend_exits_4_when_unchanged(plan_file, capsys):
    assert main(["freeze", str(plan_file)]) == Exit.OK
    assert main(["amend", str(plan_file), "--reason", "none", "--before-unblinding"]) == Exit.LOCK
    assert "nothing to amend" in capsys.readouterr().err


def test_an_edited_last_amendment_is_caught_by_the_head_digest(plan_file):
    path = _amended_twice(plan_file)
    _rewrite(path, lambda d: d["amendments"][1].update(reason="nothing to see"))
    stop = stop_of(lambda: lock.require_match(compile_plan(plan_file), plan_file))
    assert "broken at amendment 2" in stop.problems[0].message


def test_an_edited_freeze_time_is_caught_by_the_head_digest(plan_file):
    lock.freeze(plan_file)
    _rewrite(lock.lock_path(plan_file), lambda d: d["freeze"].update(time="2020-01-01T00:00:00Z"))
    stop = stop_of(lambda: lock.require_match(compile_plan(plan_file), plan_file))
    assert "broken at the freeze record" in stop.problems[0].message


@pytest.mark.parametrize("spoil", ["folder", "nan", "deep"])
def test_a_lock_that_cannot_be_read_as_one_exits_4_naming_it(plan_file, spoil):
    target = lock.lock_path(plan_file)
    if spoil == "folder":
        target.mkdir()
    else:
        lock.freeze(plan_file)
        text = target.read_text(encoding="utf-8")
        spoilt = (text.replace('"amendments": []', '"amendments": [NaN]', 1) if spoil == "nan"
                  else "[" * 100_000 + "]" * 100_000)
        assert spoilt != text
        target.write_text(spoilt, encoding="utf-8")
    for call in (lambda: lock.freeze(plan_file),
                 lambda: lock.require_match(compile_plan(plan_file), plan_file)):
        stop = stop_of(call)
        assert stop.exit_code == Exit.LOCK
        assert stop.problems[0].message.startswith(f"{target}: ")
