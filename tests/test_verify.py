"""verify DIR: every file against the manifest, the manifest against its digest, signatures.

The bundles are real (the demo study through the command line, with the quick report), made
once per module and copied for each test. The forgeries are those of someone who can edit
any file and recompute every digest (``bundlekit.reseal``) but holds no private key; each
must be caught from what the bundle itself holds, without --data and without --key.
"""

from __future__ import annotations

import json
import os

import pytest

from compiler.problems import Exit, Stop
from compiler.verify import verify

import bundlekit
from bundlekit import copy_of, edit_json, reseal, rewrite

ARTIFACTS = ["manifest.json", "plan.lock.json", "plan.yaml", "report.html", "report.pdf",
             "results.json"]


@pytest.fixture(scope="module")
def made(tmp_path_factory):
    """One bundle of each kind, and the key the signed one was signed with."""
    root = tmp_path_factory.mktemp("made")
    key, private, public = bundlekit.key_pair(root)
    return {"unlocked": bundlekit.sealed_bundle(root / "unlocked"),
            "locked": bundlekit.sealed_bundle(root / "locked", kind="locked"),
            "rehearsal": bundlekit.sealed_bundle(root / "rehearsal", kind="rehearsal"),
            "signed": bundlekit.sealed_bundle(root / "signed", sign=private),
            "key": key, "public": public}


@pytest.fixture
def bundle(made, tmp_path):
    return copy_of(made["unlocked"], tmp_path)


@pytest.fixture
def locked(made, tmp_path):
    return copy_of(made["locked"], tmp_path)


@pytest.fixture
def signed(made, tmp_path):
    return copy_of(made["signed"], tmp_path)


def flip_one_byte(path, offset: int = 3) -> None:
    data = bytearray(path.read_bytes())
    data[offset % len(data)] ^= 0x01
    rewrite(path, bytes(data))


def failures(report) -> list[str]:
    return [p.message for p in report.problems]


def caught(report, start: str, *said: str) -> str:
    """The one failure that starts with ``start`` (a file name), holding every ``said``."""
    assert report.exit_code == Exit.NOT_INTACT, report.lines
    found = [m for m in failures(report) if m.startswith(start)]
    assert found, failures(report)
    assert all(s in found[0] for s in said), found[0]
    return found[0]


# ---- an honest bundle ------------------------------------------------------------------------

@pytest.mark.parametrize("kind", ["unlocked", "locked", "rehearsal", "signed"])
def test_an_untouched_bundle_of_each_kind_is_intact(made, kind):
    report = verify(made[kind])
    assert report.exit_code == Exit.OK, failures(report)
    assert "intact" in report.lines[0]


def test_verify_says_what_it_established_without_a_secret(made):
    lines = "\n".join(verify(made["unlocked"]).lines)
    assert "5 verdicts and 1 assumption check re-derived from the stored numbers" in lines
    assert "stamp NOT PRE-REGISTERED agrees with results.json and plan.lock.json" in lines
    assert "not re-derived offline" in lines and "--data" in lines


def test_an_unsigned_bundle_reads_as_self_consistent_only(made):
    report = verify(made["locked"])
    assert report.exit_code == Exit.OK
    assert any(line.startswith("unsigned: self-consistent only") for line in report.lines)


# ---- files against the manifest --------------------------------------------------------------

@pytest.mark.parametrize("name", ARTIFACTS)
def test_one_changed_byte_in_any_artifact_is_caught_and_named(bundle, name):
    flip_one_byte(bundle / name, offset=len((bundle / name).read_bytes()) // 2)
    caught(verify(bundle), f"{name}:")


def test_a_missing_file_is_named(bundle):
    (bundle / "report.pdf").unlink()
    assert failures(verify(bundle)) == ["report.pdf: missing from the bundle"]


def test_an_added_file_is_named(bundle):
    (bundle / "notes.txt").write_text("added later")
    assert failures(verify(bundle)) == ["notes.txt: not listed in the manifest (an added file)"]


def test_a_folder_that_is_not_a_bundle_is_not_intact(tmp_path):
    report = verify(tmp_path / "nothing-here")
    assert report.exit_code == Exit.NOT_INTACT and "not a bundle folder" in failures(report)[0]


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
    rewrite(bundle / "manifest.json", content.encode())
    report = verify(bundle)
    assert report.exit_code == Exit.NOT_INTACT
    [message] = failures(report)
    assert message.startswith("manifest.json: not a bundle manifest: ") and said in message


# ---- 1. the stamp against results.json and the lock ------------------------------------------

def test_a_forged_stamp_on_an_unlocked_bundle_is_caught(bundle, made, tmp_path):
    reseal(bundle, lambda m: m.update(stamp="PRE-REGISTERED"))
    caught(verify(bundle), "manifest.json:", "stamp PRE-REGISTERED",
           "results.json says NOT PRE-REGISTERED")
    data = tmp_path / "data.csv"  # with --data too: the re-run is never reached
    data.write_bytes((made["unlocked"].parent / "study" / "dusk-sleep.csv").read_bytes())
    report = verify(bundle, data=data)
    assert report.exit_code == Exit.NOT_INTACT and report.payload["rerun"] is None


def test_results_claiming_preregistration_over_a_lock_stub_are_caught(bundle):
    edit_json(bundle / "results.json", lambda d: d.update(preregistered=True))
    reseal(bundle, lambda m: m.update(stamp="PRE-REGISTERED"))
    caught(verify(bundle), "plan.lock.json:", "a stub", "preregistered: true")


def test_a_real_lock_under_a_not_preregistered_stamp_is_caught(locked):
    edit_json(locked / "results.json", lambda d: d.update(preregistered=False, lock=None,
                                                           amendments=[]))
    reseal(locked, lambda m: m.update(stamp="NOT PRE-REGISTERED"))
    caught(verify(locked), "plan.lock.json:", "a real lock", "preregistered: false")


def test_a_rehearsal_restamped_as_a_run_is_caught(made, tmp_path):
    rehearsal = copy_of(made["rehearsal"], tmp_path)
    reseal(rehearsal, lambda m: m.update(stamp="NOT PRE-REGISTERED"))
    caught(verify(rehearsal), "manifest.json:", "stamp NOT PRE-REGISTERED", "REHEARSAL")


def test_an_edited_lock_stub_is_caught(bundle):
    edit_json(bundle / "plan.lock.json", lambda d: d.update(why="frozen elsewhere"))
    reseal(bundle)
    caught(verify(bundle), "plan.lock.json:", "not the stub")


def test_an_edited_lock_is_caught_by_its_own_chain(locked):
    edit_json(locked / "plan.lock.json", lambda d: d["freeze"].update(time="2020-01-01T00:00:00Z"))
    reseal(locked)
    caught(verify(locked), "plan.lock.json:", "head digest")


def test_a_lock_digest_in_the_results_that_is_not_the_bundled_lock_is_caught(locked):
    edit_json(locked / "results.json", lambda d: d["lock"].update(sha256="0" * 64))
    reseal(locked)
    caught(verify(locked), "results.json:", "lock.sha256")


# ---- 2. the plan's canonical digest, from the bundled bytes ----------------------------------

def test_an_edited_plan_with_its_entry_updated_is_caught(bundle):
    text = (bundle / "plan.yaml").read_text(encoding="utf-8")
    assert "alpha: 0.025" in text
    rewrite(bundle / "plan.yaml", text.replace("alpha: 0.025", "alpha: 0.04", 1).encode())
    reseal(bundle)
    message = caught(verify(bundle), "plan.yaml:", "canonical digest")
    assert "manifest.json" in message and "results.json" in message


def test_an_edited_plan_under_a_lock_is_caught_against_the_lock(locked):
    text = (locked / "plan.yaml").read_text(encoding="utf-8")
    rewrite(locked / "plan.yaml", text.replace("alpha: 0.025", "alpha: 0.04", 1).encode())
    reseal(locked)
    caught(verify(locked), "plan.yaml:", "plan.lock.json")


def test_a_bundled_plan_that_does_not_compile_is_caught(bundle):
    rewrite(bundle / "plan.yaml", b"prespec: 1\nstudy: {}\n")
    reseal(bundle)
    caught(verify(bundle), "plan.yaml:", "is not a valid plan")


def test_a_manifest_whose_data_digest_is_not_the_results_is_caught(bundle):
    reseal(bundle, lambda m: m["data"].update(sha256="0" * 64))
    caught(verify(bundle), "manifest.json:", "data")


# ---- 3. every bundle holds its five files ----------------------------------------------------

@pytest.mark.parametrize("name", ["report.pdf", "report.html", "results.json", "plan.yaml",
                                  "plan.lock.json"])
def test_a_required_file_removed_with_its_entry_is_caught(bundle, name):
    (bundle / name).unlink()
    reseal(bundle)
    assert caught(verify(bundle), f"{name}:") == (
        f"{name}: missing: every bundle holds it, and the manifest does not list it")


def test_a_removed_results_file_is_not_intact_with_data_either(bundle, made):
    (bundle / "results.json").unlink()
    reseal(bundle)
    data = made["unlocked"].parent / "study" / "dusk-sleep.csv"
    assert verify(bundle, data=data).exit_code == Exit.NOT_INTACT


# ---- 4. results.json: its schema, and every verdict re-derived --------------------------------

def _first_decision(change):
    return lambda d: change(d["decisions"][0])


def test_a_flipped_verdict_is_caught(bundle):
    edit_json(bundle / "results.json", _first_decision(lambda v: v.update(verdict="not supported")))
    reseal(bundle)
    caught(verify(bundle), "results.json:", "decisions[H1].verdict: not supported → supported")


def test_a_verdict_flipped_with_its_reason_and_p_value_is_caught(bundle):
    def flip(v):
        v.update(verdict="not supported", reason="two-sided p = 0.3 is not below α = 0.025")
        v["numbers"]["p_value"] = 0.3
    edit_json(bundle / "results.json", _first_decision(flip))
    reseal(bundle)
    caught(verify(bundle), "results.json:", "decisions[H1].numbers.p_value: 0.3 → ")


def test_a_changed_assumption_outcome_is_caught(bundle):
    edit_json(bundle / "results.json", lambda d: d["assumptions"][0].update(triggered=True))
    reseal(bundle)
    caught(verify(bundle), "results.json:", "assumptions[A1].triggered")


def test_a_removed_decision_is_caught(bundle):
    edit_json(bundle / "results.json", lambda d: d["decisions"].pop())
    reseal(bundle)
    caught(verify(bundle), "results.json:", "decisions: + C1")


@pytest.mark.parametrize("change, said", [
    (lambda d: d["decisions"][0].update(verdict="proven"), "decisions/0/verdict"),
    (lambda d: d.update(extra=1), "extra"),
    (lambda d: d.pop("analyses"), "analyses"),
])
def test_results_that_break_their_schema_are_caught(bundle, change, said):
    edit_json(bundle / "results.json", change)
    reseal(bundle)
    caught(verify(bundle), "results.json:", "does not follow its schema", said)


def test_results_of_another_plan_shape_are_caught_without_a_traceback(bundle):
    edit_json(bundle / "results.json", lambda d: d["analyses"][0]["tiers"].pop())
    reseal(bundle)
    caught(verify(bundle), "results.json:")


# ---- 5. signatures, checked with the public key the manifest carries -------------------------

def test_a_signed_bundle_checks_with_its_public_key(signed, made):
    report = verify(signed, key=made["public"])
    assert report.exit_code == Exit.OK
    assert any("signature checks with" in line for line in report.lines)


def test_a_signed_bundle_without_key_says_which_key_and_what_is_not_established(signed):
    manifest = json.loads((signed / "manifest.json").read_bytes())
    digest = manifest["signature"]["public_key_sha256"]
    report = verify(signed)
    assert report.exit_code == Exit.OK
    line = next(line for line in report.lines if line.startswith("signed by key"))
    assert digest[:12] in line and "give --key" in line and "yours" in line


def test_an_edited_manifest_whose_signature_no_longer_matches_is_caught_without_key(signed):
    reseal(signed, lambda m: m.update(run_at="2030-01-01T00:00:00Z"))
    caught(verify(signed), "manifest.sig:", "does not check")


def test_a_signature_replaced_by_another_keys_is_caught_without_key(signed, tmp_path):
    other, _, _ = bundlekit.key_pair(tmp_path, "other")
    rewrite(signed / "manifest.sig", other.sign((signed / "manifest.json").read_bytes()))
    caught(verify(signed), "manifest.sig:", "does not check")


def test_a_bundle_resigned_by_another_key_is_caught_with_the_right_key(signed, made, tmp_path):
    from compiler.seal import public_key_sha256

    other, _, _ = bundlekit.key_pair(tmp_path, "other")
    public = other.public_key()

    def declare(manifest):
        manifest["signature"].update(public_key=_raw_hex(public),
                                     public_key_sha256=public_key_sha256(public))
    reseal(signed, declare, sign_with=other)
    without = verify(signed)  # self-consistent: only the key's digest can be named
    assert without.exit_code == Exit.OK
    assert any(public_key_sha256(public)[:12] in line for line in without.lines)
    caught(verify(signed, key=made["public"]), "manifest.sig:", "another key")


def _raw_hex(public) -> str:
    from cryptography.hazmat.primitives import serialization

    return public.public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw).hex()


@pytest.mark.parametrize("with_key", [True, False])
def test_a_removed_signature_is_caught_with_or_without_the_key(signed, made, with_key):
    (signed / "manifest.sig").unlink()
    assert failures(verify(signed, key=made["public"] if with_key else None)) == [
        "manifest.sig: missing, but the manifest says the bundle is signed"]


def test_a_stripped_declaration_reads_as_unsigned(signed, made):
    (signed / "manifest.sig").unlink()
    reseal(signed, lambda m: m.update(signature=None))
    report = verify(signed)
    assert report.exit_code == Exit.OK
    assert any(line.startswith("unsigned: self-consistent only") for line in report.lines)
    caught(verify(signed, key=made["public"]), "manifest.json:", "not signed")


def test_a_declaration_stripped_of_its_public_key_is_caught(signed):
    reseal(signed, lambda m: m["signature"].pop("public_key"))
    caught(verify(signed), "manifest.json:", "public key")


def test_a_key_given_for_an_unsigned_bundle_is_not_intact(made):
    assert verify(made["unlocked"], key=made["public"]).exit_code == Exit.NOT_INTACT


@pytest.mark.parametrize("content", [None, b"not a key\n"])
def test_a_key_file_that_is_not_a_public_key_is_a_command_line_error(tmp_path, made, content):
    key = tmp_path / "key.pem"
    if content is not None:
        key.write_bytes(content)
    with pytest.raises(Stop) as stopped:
        verify(made["unlocked"], key=key)
    assert stopped.value.exit_code == Exit.PLAN_INVALID
    assert stopped.value.problems[0].message.startswith(f"{key}: cannot read the public key")


# ---- 6. file modes ---------------------------------------------------------------------------

def test_files_others_may_write_are_not_intact(bundle):
    for path in bundle.iterdir():
        os.chmod(path, 0o666)
    report = verify(bundle)
    caught(report, "report.pdf:", "mode 0666", "0444")
    assert len(failures(report)) == 6


def test_files_only_their_owner_may_write_are_noted(bundle):
    for path in bundle.iterdir():
        os.chmod(path, 0o644)  # as a checkout from version control leaves them
    report = verify(bundle)
    assert report.exit_code == Exit.OK
    assert any("writable by their owner" in line for line in report.lines)
