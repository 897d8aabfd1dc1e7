"""Issue 22's minor points: stale bundle folders of any name, a null key, a condition's hint."""

from __future__ import annotations

import subprocess
import sys

import pytest

from compiler import seal
from compiler.cli import main
from compiler.problems import Exit

import bundlekit
from test_seal import ABOUT, FILES, RUN_AT


def _dead_pid() -> int:
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()
    return child.pid


def test_a_seal_removes_dead_runs_leftovers_of_any_bundle_name(tmp_path):
    parent = tmp_path / "out"
    parent.mkdir()
    dead = _dead_pid()
    stale = [parent / f".other-study.tmp-{dead}-0123abcd", parent / f".x.tmp-{dead}-deadbeef"]
    for folder in stale:
        folder.mkdir()
        (folder / "results.json").write_bytes(b"{}")
    alive = parent / f".busy.tmp-{__import__('os').getpid()}-0123abcd"  # a live run's
    alive.mkdir()
    kept = parent / "notes.tmp-1-0123abcd"  # not one of ours: no leading dot
    kept.mkdir()
    seal.seal(parent / "study", FILES, ABOUT, run_at=RUN_AT)
    assert sorted(p.name for p in parent.iterdir()) == sorted(["study", alive.name, kept.name])


@pytest.mark.parametrize("key", ["~", "null", "NULL"])
def test_a_null_key_is_not_a_variable_name(tmp_path, capsys, key):
    plan, _ = bundlekit.study(tmp_path / "study")
    bundlekit.edit(plan, "variables:\n", f"variables:\n  {key}: {{kind: continuous}}\n")
    assert main(["check", str(plan)]) == Exit.PLAN_INVALID
    err = capsys.readouterr().err
    assert f":14:3: error: the key `{key}` is null in YAML, not a name" in err
    assert f'quote it ("{key}")' in err


def test_a_quoted_tilde_key_is_a_name(tmp_path, capsys):
    plan, _ = bundlekit.study(tmp_path / "study")
    bundlekit.edit(plan, "variables:\n", 'variables:\n  "~": {kind: continuous}\n')
    assert main(["check", str(plan)]) == Exit.OK


def test_a_code_like_condition_gets_a_hint_about_conditions(tmp_path, capsys):
    plan, _ = bundlekit.study(tmp_path / "study")
    text = plan.read_text(encoding="utf-8")
    start = text.index("{variable: ", text.index("populations:"))
    name = text[start + len("{variable: "):].split(",")[0]
    plan.write_text(text[:start] + text[start:].replace(name, f'"{name} > 18"', 1),
                    encoding="utf-8")
    assert main(["check", str(plan)]) == Exit.PLAN_INVALID
    err = capsys.readouterr().err
    assert f"unknown variable `{name} > 18`" in err
    assert "a condition names one declared variable" in err and "term" not in err
