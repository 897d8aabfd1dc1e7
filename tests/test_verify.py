"""verify DIR: every file against the manifest, the manifest against its digest, signatures."""

from __future__ import annotations

import os

import pytest
from cryptography.hazmat.primitives import serialization
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

from compiler import seal
from compiler.problems import Exit
from compiler.verify import verify

from test_seal import ABOUT, FILES, RUN_AT

ARTIFACTS = sorted(FILES) + ["manifest.json"]


@pytest.fixture
def bundle(tmp_path):
    target = tmp_path / "study"
    seal.seal(target, FILES, ABOUT, run_at=RUN_AT)
    return target


def flip_one_byte(path, offset: int = 3) -> None:
    os.chmod(path, 0o644)
    data = bytearray(path.read_bytes())
    data[offset % len(data)] ^= 0x01
    path.write_bytes(bytes(data))


def failures(report) -> list[str]:
    return [p.message for p in report.problems]


def test_an_untouched_bundle_is_intact(bundle):
    report = verify(bundle)
    assert report.exit_code == Exit.OK and "intact" in report.lines[0]


@pytest.mark.parametrize("name", ARTIFACTS)
def test_one_changed_byte_in_any_artifact_is_caught_and_named(bundle, name):
    flip_one_byte(bundle / name, offset=len((bundle / name).read_bytes()) // 2)
    report = verify(bundle)
    assert report.exit_code == Exit.NOT_INTACT
    assert any(message.startswith(f"{name}:") for message in failures(report))


def test_a_missing_file_is_named(bundle):
    (bundle / "report.pdf").unlink()
    assert failures(verify(bundle)) == ["report.pdf: missing from the bundle"]


def test_an_added_file_is_named(bundle):
    (bundle / "notes.txt").write_text("added later")
    assert failures(verify(bundle)) == ["notes.txt: not listed in the manifest (an added file)"]


def test_a_folder_that_is_not_a_bundle_is_not_intact(tmp_path):
    report = verify(tmp_path / "nothing-here")
    assert report.exit_code == Exit.NOT_INTACT and "not a bundle folder" in failures(report)[0]


def _keys(tmp_path):
    key = Ed25519PrivateKey.generate()
    public = tmp_path / "public.pem"
    public.write_bytes(key.public_key().public_bytes(
        serialization.Encoding.PEM, serialization.PublicFormat.SubjectPublicKeyInfo))
    return key, public


def test_a_signed_bundle_checks_with_its_public_key(tmp_path):
    key, public = _keys(tmp_path)
    seal.seal(tmp_path / "signed", FILES, ABOUT, run_at=RUN_AT, key=key)
    report = verify(tmp_path / "signed", key=public)
    assert report.exit_code == Exit.OK and any("signature checks" in line for line in report.lines)


def test_a_signature_from_another_key_is_caught(tmp_path):
    _, public = _keys(tmp_path)
    seal.seal(tmp_path / "signed", FILES, ABOUT, run_at=RUN_AT, key=Ed25519PrivateKey.generate())
    report = verify(tmp_path / "signed", key=public)
    assert report.exit_code == Exit.NOT_INTACT
    assert "signed with another key" in failures(report)[0]


@pytest.mark.parametrize("with_key", [True, False])
def test_a_removed_signature_is_caught_with_or_without_the_key(tmp_path, with_key):
    key, public = _keys(tmp_path)
    seal.seal(tmp_path / "signed", FILES, ABOUT, run_at=RUN_AT, key=key)
    (tmp_path / "signed" / "manifest.sig").unlink()
    assert failures(verify(tmp_path / "signed", key=public if with_key else None)) == [
        "manifest.sig: missing, but the manifest says the bundle is signed"]


def test_links_and_empty_folders_in_a_bundle_are_named(tmp_path, bundle):
    outside = tmp_path / "outside"
    outside.mkdir()
    (outside / "x.txt").write_text("x")
    (bundle / "linked").symlink_to(outside, target_is_directory=True)
    (bundle / "empty").mkdir()
    copy = tmp_path / "results-copy.json"
    copy.write_bytes((bundle / "results.json").read_bytes())
    (bundle / "results.json").unlink()
    (bundle / "results.json").symlink_to(copy)  # the same bytes, but not sealed here
    assert sorted(failures(verify(bundle))) == [
        "empty: not listed in the manifest (an added, empty folder)",
        "linked: not listed in the manifest (a symbolic link to a folder)",
        "results.json: a symbolic link"]


@pytest.mark.parametrize("content, said", [
    ('{"files":[{"path":5}]}', "`files` is not a list"),
    ("[1, 2]", "not a JSON object"),
    ('{"files":[], "signature":"yes"}', "`signature` is not an object"),
    ('{"files":[], "plan":"text"}', "`plan` is not an object"),
    ('{"files":[], "stamp":null}', "`stamp` is missing"),
    ('{"files":[{"path":"../x","size":1,"sha256":"0"}]}', "outside the bundle folder"),
])
def test_a_manifest_of_the_wrong_shape_is_not_intact(bundle, content, said):
    os.chmod(bundle / "manifest.json", 0o644)
    (bundle / "manifest.json").write_text(content)
    report = verify(bundle)
    assert report.exit_code == Exit.NOT_INTACT
    [message] = failures(report)
    assert message.startswith("manifest.json: not a bundle manifest: ") and said in message


def test_a_key_given_for_an_unsigned_bundle_is_not_intact(tmp_path, bundle):
    _, public = _keys(tmp_path)
    assert verify(bundle, key=public).exit_code == Exit.NOT_INTACT


@pytest.mark.parametrize("content", [None, b"not a key\n"])
def test_a_key_file_that_is_not_a_public_key_is_a_command_line_error(tmp_path, bundle, content):
    from compiler.problems import Stop

    key = tmp_path / "key.pem"
    if content is not None:
        key.write_bytes(content)
    with pytest.raises(Stop) as caught:
        verify(bundle, key=key)
    assert caught.value.exit_code == Exit.PLAN_INVALID
    assert caught.value.problems[0].message.startswith(f"{key}: cannot read the public key")
