"""Every file prespec reads is a regular file of bounded size, checked before it is read:
a FIFO would block the read for ever, a device or a huge file would fill the memory. Each
case runs the executable in a child process with a time limit (clikit.LIMIT)."""

from __future__ import annotations

import os

import pytest

from compiler import files, seal

import bundlekit
from clikit import prespec


@pytest.fixture
def fifo(tmp_path):
    path = tmp_path / "pipe.yaml"
    os.mkfifo(path)
    return path


@pytest.mark.parametrize("command", [["check"], ["check", "--explain"], ["freeze"],
                                     ["run", "--unlocked"]])
def test_a_fifo_as_the_plan_is_refused_not_waited_on(fifo, command):
    done = prespec(command[0], fifo, *command[1:])
    assert done.returncode == 2
    assert f"{fifo}: cannot read the plan: it is a FIFO (named pipe)" in done.stderr


def test_a_device_as_the_plan_is_refused():
    done = prespec("check", "/dev/zero")
    assert done.returncode == 2 and "it is a character device" in done.stderr


@pytest.mark.parametrize("device", ["fifo", "/dev/zero"])
def test_a_signing_key_that_is_not_a_regular_file_is_refused(tmp_path, device):
    plan, data = bundlekit.study(tmp_path / "study")
    key = device
    if device == "fifo":
        key = tmp_path / "key.pem"
        os.mkfifo(key)
    done = prespec("run", plan, "--data", data, "--unlocked", "--out", tmp_path / "out",
                   "--sign", key)
    assert done.returncode == 2, done.stderr
    assert f"{key}: cannot read the signing key: it is a" in done.stderr
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("device", ["fifo", "/dev/zero"])
def test_a_public_key_that_is_not_a_regular_file_is_refused(tmp_path, device):
    from test_seal import ABOUT, FILES, RUN_AT

    bundle = tmp_path / "bundle"
    seal.seal(bundle, FILES, ABOUT, run_at=RUN_AT)
    key = device
    if device == "fifo":
        key = tmp_path / "key.pub"
        os.mkfifo(key)
    done = prespec("verify", bundle, "--key", key)
    assert done.returncode == 2, done.stderr
    assert f"{key}: cannot read the public key: it is a" in done.stderr


def test_a_fifo_as_the_manifest_is_a_bundle_not_intact(tmp_path):
    bundle = tmp_path / "bundle"
    bundle.mkdir()
    os.mkfifo(bundle / "manifest.json")
    done = prespec("verify", bundle)
    assert done.returncode == 5, done.stderr
    assert "manifest.json: cannot be read: it is a FIFO (named pipe)" in done.stderr


def test_a_fifo_or_device_as_the_lock_is_a_broken_lock(tmp_path):
    plan, _ = bundlekit.study(tmp_path / "study")
    os.mkfifo(f"{plan}.lock.json")
    done = prespec("run", plan)
    assert done.returncode == 4, done.stderr
    assert "the lock is broken: it cannot be read (it is a FIFO" in done.stderr


def test_a_file_larger_than_its_limit_is_refused_before_it_is_read(tmp_path, monkeypatch):
    big = tmp_path / "big.pem"
    with open(big, "wb") as handle:  # sparse: 2 GiB of nothing, in no time
        handle.truncate(2 << 30)
    read = []
    monkeypatch.setattr(os, "fdopen", lambda *a, **k: read.append(a))
    with pytest.raises(files.Refused, match="larger than the 64 KiB"):
        files.read_regular(big, 64 * files.KIB)
    assert not read  # refused from its size, not by reading it
    done = prespec("verify", tmp_path, "--key", big)
    assert done.returncode == 2 and "larger than the 64 KiB such a file may be" in done.stderr
