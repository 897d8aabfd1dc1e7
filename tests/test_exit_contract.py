"""The exit codes hold where hostile or unlucky input used to end in exit 1 (an internal
fault): a forged lock time is a broken lock (4), a folder that cannot be written is the
command line's (2), a closed pipe ends quietly, a hostile bundle is not intact (5), and an
interrupted run ends with 130 and leaves nothing."""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pytest

from compiler import bundle as bundle_module
from compiler import lock, seal
from compiler.canonical import digest, sha256_hex
from compiler.cli import main
from compiler.problems import Exit

import bundlekit
from clikit import LIMIT, TESTS, prespec
from test_seal import ABOUT, FILES, RUN_AT


@pytest.fixture
def quick(monkeypatch):
    monkeypatch.setattr(bundle_module, "render", bundlekit.quick_render)


@pytest.mark.parametrize("forged", ["not-a-time", 12345, None, "2026-13-40T00:00:00Z"])
def test_a_forged_lock_time_is_a_broken_lock(tmp_path, quick, capsys, forged):
    plan, data = bundlekit.study(tmp_path / "study")
    assert main(["freeze", str(plan)]) == Exit.OK
    target = lock.lock_path(plan)
    document = json.loads(target.read_text(encoding="utf-8"))
    document["freeze"]["time"] = forged
    document["head"] = digest(document["freeze"])  # every digest recomputed: no hand edit shows
    target.write_text(json.dumps(document), encoding="utf-8")
    out = tmp_path / "out"
    assert main(["run", str(plan), "--data", str(data), "--out", str(out)]) == Exit.LOCK
    assert "the freeze record's time" in capsys.readouterr().err
    assert not out.exists()


def test_freeze_in_a_folder_it_cannot_write_is_a_one_line_refusal(tmp_path, monkeypatch,
                                                                    capsys):
    plan, _ = bundlekit.study(tmp_path / "study")

    def refused(path, *args, **kwargs):  # what the system says to a user without the right
        raise PermissionError(13, "Permission denied", str(path))

    monkeypatch.setattr(lock, "open", refused, raising=False)
    assert main(["freeze", str(plan)]) == Exit.PLAN_INVALID
    err = capsys.readouterr().err
    assert err.splitlines()[0] == (f"error: {plan}.lock.json: cannot write the lock: "
                                   "Permission denied")
    assert sorted(p.name for p in plan.parent.iterdir()) == ["dusk-sleep.csv", "dusk-sleep.yaml"]


def _unprivileged() -> list[str] | None:
    """setpriv's command to run as nobody, when this root process can (as in CI)."""
    setpriv = shutil.which("setpriv")
    if os.geteuid() != 0 or setpriv is None:
        return None
    command = [setpriv, "--reuid=65534", "--regid=65534", "--clear-groups"]
    trial = subprocess.run([*command, sys.executable, "-c", "import compiler"],
                           capture_output=True, timeout=LIMIT)
    return command if trial.returncode == 0 else None


@pytest.mark.parametrize("command", ["freeze", "amend"])
def test_freeze_and_amend_as_a_user_who_cannot_write_the_folder(command):
    setpriv = _unprivileged()
    if setpriv is None:
        pytest.skip("needs root and setpriv to run as an unprivileged user")
    folder = Path(tempfile.mkdtemp(prefix="prespec-readonly-"))
    try:
        plan = folder / "dusk-sleep.yaml"
        shutil.copyfile(bundlekit.DEMO_PLAN, plan)
        if command == "amend":
            assert main(["freeze", str(plan)]) == Exit.OK
            bundlekit.edit(plan, "confidence: 0.95", "confidence: 0.9")
        os.chmod(folder, 0o555)
        extra = ["--reason", "a test", "--before-unblinding"] if command == "amend" else []
        done = subprocess.run([*setpriv, sys.executable, "-m", "compiler", command, str(plan),
                               *extra], capture_output=True, text=True, timeout=LIMIT)
        assert done.returncode == 2, done.stderr
        assert "cannot write the lock: Permission denied" in done.stderr
        assert "Traceback" not in done.stderr
    finally:
        os.chmod(folder, 0o755)
        shutil.rmtree(folder)


def test_a_closed_stdout_ends_quietly():
    plan = bundlekit.DEMO_PLAN
    reader = subprocess.Popen([sys.executable, "-m", "compiler", "check", "--explain",
                               str(plan)], stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    reader.stdout.close()  # as `| true` does: nobody reads the output
    _, err = reader.communicate(timeout=LIMIT)
    assert reader.returncode == 0
    assert err == b""


@pytest.fixture
def bundle_of(tmp_path):
    """A bundle sealed with these results.json bytes, its manifest's digests all matching."""

    def make(results: bytes) -> Path:
        target = tmp_path / "bundle"
        about = {**ABOUT, "results": {"sha256": sha256_hex(results)}}
        seal.seal(target, {**FILES, "results.json": results}, about, run_at=RUN_AT)
        return target

    return make


@pytest.mark.parametrize("results", [b"not json", b"[]", b'{"preregistered": true}',
                                     b'{"preregistered":false,"rehearsal":true,'
                                     b'"rehearsal_note":"x","rehearsal_settings":'
                                     b'{"source":"synthetic","seed":0,"rows":10000000000000,'
                                     b'"effect":0,"scramble":null}}',
                                     b"[" * 200_000 + b"]" * 200_000])
def test_hostile_results_are_not_intact_when_re_run(bundle_of, tmp_path, capsys, results):
    bundle = bundle_of(results)
    data = tmp_path / "data.csv"
    data.write_text("a\n1\n")
    assert main(["verify", str(bundle), "--data", str(data)]) == Exit.NOT_INTACT
    assert "internal error" not in capsys.readouterr().err


@pytest.mark.parametrize("manifest, said", [
    (b"[" * 200_000 + b"]" * 200_000, "nested too deeply"),
    (b'{"files": [], "stamp": NaN}', "NaN is not a JSON number"),
    (b"[" * 100 + b"]" * 100, "nested more than 64 levels deep"),
    (b'{"files": [], "stamp": "x", "n": 1' + b"0" * 5000 + b"}", "not valid JSON"),
])
def test_a_hostile_manifest_is_not_intact(tmp_path, capsys, manifest, said):
    target = tmp_path / "bundle"
    seal.seal(target, FILES, ABOUT, run_at=RUN_AT)
    os.chmod(target / "manifest.json", 0o644)
    (target / "manifest.json").write_bytes(manifest)
    assert main(["verify", str(target)]) == Exit.NOT_INTACT
    assert said in capsys.readouterr().err


def test_unreadable_files_and_folders_in_a_bundle_are_not_intact(tmp_path, monkeypatch, capsys):
    target = tmp_path / "bundle"
    seal.seal(target, FILES, ABOUT, run_at=RUN_AT)
    (target / "extra").mkdir()
    real_open, real_scandir, real_listdir = open, os.scandir, os.listdir

    def refused(path, *args, **kwargs):  # as root every file is readable: the refusal faked
        if Path(path).name in ("report.pdf",):
            raise PermissionError(13, "Permission denied", str(path))
        return real_open(path, *args, **kwargs)

    def refused_listing(real):
        def listing(path="."):
            if Path(path).name == "extra":
                raise PermissionError(13, "Permission denied", str(path))
            return real(path)
        return listing

    import compiler.verify as verify_module
    monkeypatch.setattr(verify_module, "open", refused, raising=False)
    monkeypatch.setattr(os, "scandir", refused_listing(real_scandir))
    monkeypatch.setattr(os, "listdir", refused_listing(real_listdir))
    assert main(["verify", str(target)]) == Exit.NOT_INTACT
    err = capsys.readouterr().err
    assert "report.pdf: cannot be read: Permission denied" in err
    assert "extra: not listed in the manifest (an added folder that cannot be read" in err


RUNNER = f"""
import sys
sys.path.insert(0, {str(TESTS)!r})
import bundlekit
from compiler import bundle
bundle.render = bundlekit.quick_render
from compiler.cli import command
sys.argv[0] = "prespec"
command()
"""


@pytest.mark.parametrize("signum", [signal.SIGINT, signal.SIGTERM])
def test_an_interrupted_run_exits_130_and_leaves_nothing(tmp_path, signum):
    """The run is started as a shell script starts a background command, with SIGINT
    ignored: `kill -INT` must still stop it before it seals."""
    plan, data = bundlekit.study(tmp_path / "study")
    out = tmp_path / "out" / "dusk-sleep"
    process = subprocess.Popen(
        [sys.executable, "-c", RUNNER, "run", str(plan), "--data", str(data), "--out", str(out),
         "--unlocked"], env={**os.environ, seal.PAUSE_HOOK: "120"},
        stdout=subprocess.PIPE, stderr=subprocess.PIPE,
        preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_IGN))
    deadline = time.monotonic() + LIMIT * 3
    while not list(out.parent.glob(f".{out.name}.tmp-*/manifest.json")):
        assert process.poll() is None, process.communicate()
        assert time.monotonic() < deadline, "the run never reached the seal"
        time.sleep(0.05)
    process.send_signal(signum)
    _, err = process.communicate(timeout=LIMIT)
    assert process.returncode == 130, err
    assert b"interrupted" in err
    assert list(out.parent.iterdir()) == []
