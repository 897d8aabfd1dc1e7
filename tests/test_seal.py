"""Sealing: the manifest, read-only files, one rename, no overwrite, optional signature."""

from __future__ import annotations

import json
import stat

import pytest
from cryptography.hazmat.primitives import serialization
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

from compiler import seal
from compiler.canonical import canonical_bytes, sha256_hex
from compiler.problems import Exit, Stop

FILES = {"results.json": b'{"format":"prespec-results/1"}\n', "report.html": b"<p>x</p>",
         "report.pdf": b"%PDF-1.7 x", "plan.yaml": b"prespec: 1\n", "plan.lock.json": b"{}\n"}
ABOUT = {"stamp": "PRE-REGISTERED", "plan": {"sha256": "0" * 64, "file_sha256": sha256_hex(FILES["plan.yaml"])},
         "data": {"sha256": "1" * 64}, "results": {"sha256": sha256_hex(FILES["results.json"])},
         "environment": {"prespec": "0.1.0"}}
RUN_AT = "2026-01-02T03:04:05Z"


def sealed(tmp_path, key=None):
    target = tmp_path / "out" / "study"
    return target, seal.seal(target, FILES, ABOUT, run_at=RUN_AT, key=key)


def test_the_manifest_lists_every_other_file_with_size_and_sha256(tmp_path):
    target, manifest = sealed(tmp_path)
    listed = {e["path"]: (e["size"], e["sha256"]) for e in manifest["files"]}
    assert listed == {name: (len(data), sha256_hex(data)) for name, data in FILES.items()}


def test_the_manifest_digest_covers_everything_but_itself(tmp_path):
    target, manifest = sealed(tmp_path)
    on_disk = json.loads((target / "manifest.json").read_bytes())
    without = {k: v for k, v in on_disk.items() if k != "manifest_sha256"}
    assert on_disk["manifest_sha256"] == sha256_hex(canonical_bytes(without))


def test_the_manifest_is_written_in_canonical_bytes(tmp_path):
    target, manifest = sealed(tmp_path)
    raw = (target / "manifest.json").read_bytes()
    assert raw == canonical_bytes(json.loads(raw)) and raw.endswith(b"}\n")


def test_the_run_time_lives_in_the_manifest(tmp_path):
    target, manifest = sealed(tmp_path)
    assert manifest["run_at"] == RUN_AT and manifest["stamp"] == "PRE-REGISTERED"


def test_every_file_is_read_only(tmp_path):
    target, _ = sealed(tmp_path)
    modes = {p.name: stat.S_IMODE(p.stat().st_mode) for p in target.iterdir()}
    assert set(modes) == set(FILES) | {"manifest.json"}
    assert set(modes.values()) == {0o444}


def test_nothing_but_the_bundle_is_left_in_the_parent(tmp_path):
    target, _ = sealed(tmp_path)
    assert [p.name for p in target.parent.iterdir()] == ["study"]


def test_an_existing_bundle_is_refused_and_left_unchanged(tmp_path):
    target, _ = sealed(tmp_path)
    before = {p.name: p.read_bytes() for p in target.iterdir()}
    with pytest.raises(Stop) as caught:
        seal.seal(target, {"results.json": b"other"}, ABOUT, run_at=RUN_AT)
    assert caught.value.exit_code == Exit.PLAN_INVALID
    assert "never overwritten" in caught.value.problems[0].message
    assert {p.name: p.read_bytes() for p in target.iterdir()} == before


def test_a_failure_while_writing_leaves_no_bundle_and_no_temporary_folder(tmp_path):
    target = tmp_path / "out" / "study"
    with pytest.raises(TypeError):
        seal.seal(target, {"results.json": b"ok", "report.pdf": "not bytes"}, ABOUT, run_at=RUN_AT)
    assert list((tmp_path / "out").iterdir()) == []


def test_a_stale_temporary_folder_of_a_dead_run_is_removed(tmp_path):
    parent = tmp_path / "out"
    parent.mkdir()
    dead_pid = 2**22 + 12345  # above Linux's default pid_max (4194304), so no such process
    stale = parent / f".study.tmp-{dead_pid}-abcd1234"
    stale.mkdir()
    (stale / "results.json").write_bytes(b"half")
    sealed(tmp_path)
    assert sorted(p.name for p in parent.iterdir()) == ["study"]


def test_a_signing_key_writes_a_signature_of_the_manifest_bytes(tmp_path):
    key = Ed25519PrivateKey.generate()
    target, manifest = sealed(tmp_path, key)
    signature = (target / "manifest.sig").read_bytes()
    key.public_key().verify(signature, (target / "manifest.json").read_bytes())  # raises if bad
    assert manifest["signature"]["algorithm"] == "Ed25519"


def test_a_key_that_is_not_ed25519_is_refused(tmp_path):
    from cryptography.hazmat.primitives.asymmetric import ec

    path = tmp_path / "ec.pem"
    path.write_bytes(ec.generate_private_key(ec.SECP256R1()).private_bytes(
        serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8,
        serialization.NoEncryption()))
    with pytest.raises(Stop) as caught:
        seal.load_signing_key(path)
    assert "not an Ed25519 key" in caught.value.problems[0].message



def test_a_target_under_a_file_or_a_folder_not_writable_is_refused(tmp_path, monkeypatch):
    (tmp_path / "taken").write_text("x")
    with pytest.raises(Stop) as caught:
        seal.check_target(tmp_path / "taken" / "deeper" / "study")
    assert caught.value.exit_code == Exit.PLAN_INVALID
    assert f"{tmp_path / 'taken'} is not a folder" in caught.value.problems[0].message
    # a folder this process may not write into (faked: the tests may run as root)
    monkeypatch.setattr(seal.os, "access", lambda path, mode: False)
    with pytest.raises(Stop) as caught:
        seal.check_target(tmp_path / "new" / "study")
    assert f"the folder {tmp_path} is not writable" in caught.value.problems[0].message


def test_a_target_whose_folders_are_yet_to_be_made_is_accepted(tmp_path):
    seal.check_target(tmp_path / "a" / "b" / "study")
    assert not (tmp_path / "a").exists()  # the check makes nothing


def test_an_empty_out_is_refused_not_taken_for_the_default(tmp_path):
    assert seal.target_folder(None, tmp_path / "default") == tmp_path / "default"
    with pytest.raises(Stop) as caught:
        seal.target_folder("  ", tmp_path / "default")
    assert caught.value.exit_code == Exit.PLAN_INVALID and "--out is empty" in str(caught.value)


@pytest.mark.parametrize("length", [240, 300])
def test_a_name_too_long_for_the_bundle_or_its_temporary_folder_is_refused(tmp_path, length):
    # 240 bytes fit a file name (255 on common file systems), not with ".tmp-PID-HEX" added
    with pytest.raises(Stop) as caught:
        seal.check_target(tmp_path / ("x" * length))
    assert caught.value.exit_code == Exit.PLAN_INVALID
    assert "cannot be written" in caught.value.problems[0].message


def test_a_failed_write_is_a_clear_error_and_leaves_nothing(tmp_path, monkeypatch):
    import errno

    def full(path, data):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(seal, "_write", full)
    with pytest.raises(Stop) as caught:
        sealed(tmp_path)
    assert "No space left on device" in caught.value.problems[0].message
    assert list((tmp_path / "out").iterdir()) == []
