"""A run killed part way leaves no bundle: SIGKILL while the sealed folder waits for its rename."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from compiler import bundle as bundle_module
from compiler.cli import main
from compiler.problems import Exit
from compiler.seal import PAUSE_HOOK

import bundlekit

TESTS = Path(__file__).resolve().parent
# The run as a user starts it, with the stand-in report so the test stays quick.
RUNNER = f"""
import sys
sys.path.insert(0, {str(TESTS)!r})
import bundlekit
from compiler import bundle
bundle.render = bundlekit.quick_render
from compiler.cli import main
sys.exit(main(sys.argv[1:]))
"""


def _wait_for_complete_temporary(parent: Path, name: str, process, limit: float = 300) -> Path:
    deadline = time.monotonic() + limit
    while time.monotonic() < deadline:
        for entry in parent.glob(f".{name}.tmp-*") if parent.is_dir() else ():
            if (entry / "manifest.json").exists():
                return entry
        if process.poll() is not None:
            pytest.fail(f"the run ended before sealing: {process.communicate()}")
        time.sleep(0.05)
    process.kill()
    pytest.fail("the run never reached the seal")


@pytest.fixture
def killed_run(tmp_path):
    plan, data = bundlekit.study(tmp_path / "study")
    out = tmp_path / "out" / "dusk-sleep"
    process = subprocess.Popen(
        [sys.executable, "-c", RUNNER, "run", str(plan), "--data", str(data), "--out", str(out),
         "--unlocked"],
        env={**os.environ, PAUSE_HOOK: "120"}, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    leftover = _wait_for_complete_temporary(out.parent, out.name, process)
    process.send_signal(signal.SIGKILL)
    process.wait(timeout=30)
    return plan, data, out, leftover


def test_a_run_killed_before_the_rename_leaves_no_bundle(killed_run):
    plan, data, out, leftover = killed_run
    assert not out.exists()
    assert leftover.name.startswith(f".{out.name}.tmp-")  # hidden, and named for what it is


def test_the_next_run_removes_the_dead_runs_leftover(killed_run, monkeypatch):
    plan, data, out, leftover = killed_run
    monkeypatch.setattr(bundle_module, "render", bundlekit.quick_render)
    assert main(["run", str(plan), "--data", str(data), "--out", str(out), "--unlocked"]) == Exit.OK
    assert sorted(p.name for p in out.parent.iterdir()) == [out.name]
    assert main(["verify", str(out)]) == Exit.OK
