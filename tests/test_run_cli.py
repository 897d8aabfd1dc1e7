"""`prespec run`, `rehearse` and `verify` as a user calls them, on the demo study.

One real, pre-registered and amended bundle is made per module (``sealed``); tests that are
about orchestration rather than the report use ``bundlekit.quick_render``.
"""

from __future__ import annotations

import json
from pathlib import Path

import jsonschema
import pytest

from compiler import bundle as bundle_module
from compiler.cli import main
from compiler.problems import Exit
from compiler.resources import schema_path

import bundlekit
from bundlekit import edit, files_of

REASON = "interval level agreed with the data monitoring committee"


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    """A frozen, then amended, demo plan with its data, and one real bundle of it."""
    folder = tmp_path_factory.mktemp("study")
    plan, data = bundlekit.study(folder)
    assert main(["freeze", str(plan)]) == Exit.OK
    edit(plan, "confidence: 0.95", "confidence: 0.9")
    assert main(["amend", str(plan), "--reason", REASON, "--before-unblinding"]) == Exit.OK
    out = folder / "out" / "sealed"
    assert main(["run", str(plan), "--data", str(data), "--out", str(out)]) == Exit.OK
    return plan, data, out


@pytest.fixture
def quick(monkeypatch):
    monkeypatch.setattr(bundle_module, "render", bundlekit.quick_render)


@pytest.fixture
def fresh(tmp_path):
    return bundlekit.study(tmp_path / "fresh")


def run(plan, data, out, *extra) -> int:
    return main(["run", str(plan), "--data", str(data), "--out", str(out), *extra])


def test_the_bundle_holds_exactly_the_six_files(study):
    _, _, out = study
    assert sorted(files_of(out)) == ["manifest.json", "plan.lock.json", "plan.yaml",
                                     "report.html", "report.pdf", "results.json"]


def test_the_bundled_plan_is_the_exact_bytes_run(study):
    plan, _, out = study
    assert (out / "plan.yaml").read_bytes() == plan.read_bytes()


def test_the_results_validate_against_the_published_schema(study):
    schema = json.loads(schema_path("results.schema.json").read_text(encoding="utf-8"))
    document = json.loads((study[2] / "results.json").read_bytes())
    assert [e.message for e in jsonschema.Draft202012Validator(schema).iter_errors(document)] == []


def test_an_amended_plan_runs_and_its_results_carry_the_log(study):
    document = json.loads((study[2] / "results.json").read_bytes())
    assert document["preregistered"] is True
    assert [a["reason"] for a in document["amendments"]] == [REASON]


def test_the_report_shows_the_amendment_and_the_results_digest(study):
    _, _, out = study
    html = (out / "report.html").read_text(encoding="utf-8")
    manifest = json.loads((out / "manifest.json").read_bytes())
    assert REASON in html
    assert manifest["results"]["sha256"][:12] in html


def test_a_second_run_gives_byte_identical_results_and_reports(study, tmp_path):
    import subprocess
    import sys

    plan, data, out = study
    again = tmp_path / "again"  # in a process of its own, with its own hash seed
    subprocess.run([sys.executable, "-m", "compiler", "run", str(plan), "--data", str(data),
                    "--out", str(again)], check=True, capture_output=True)
    first, second = files_of(out), files_of(again)
    for name in ("results.json", "report.html", "report.pdf"):
        assert first[name] == second[name], name


@pytest.mark.parametrize("name", ["results.json", "report.html", "report.pdf", "plan.yaml",
                                  "plan.lock.json", "manifest.json"])
def test_one_changed_byte_in_a_real_artifact_is_caught(study, tmp_path, name, capsys):
    import shutil

    copy = tmp_path / "copy"
    shutil.copytree(study[2], copy)
    path = copy / name
    path.chmod(0o644)
    data = bytearray(path.read_bytes())
    data[len(data) // 2] ^= 0x20
    path.write_bytes(bytes(data))
    assert main(["verify", str(copy)]) == Exit.NOT_INTACT
    assert f"error: {name}:" in capsys.readouterr().err


def test_verify_with_the_same_data_is_byte_identical(study, capsys):
    _, data, out = study
    assert main(["verify", str(out), "--data", str(data)]) == Exit.OK
    assert "byte-identical" in capsys.readouterr().out


def test_verify_with_changed_data_names_the_values_that_differ(study, tmp_path, capsys):
    _, data, out = study
    rows = data.read_text(encoding="utf-8").splitlines()
    header = rows[0].split(",")
    column = header.index("latency_w8")
    for i in range(1, len(rows)):  # the first row with a value: nudge it by one minute
        cells = rows[i].split(",")
        if cells[column] not in ("", "NA"):
            cells[column] = f"{float(cells[column]) + 1:.1f}"
            rows[i] = ",".join(cells)
            break
    changed = tmp_path / "dusk-sleep.csv"
    changed.write_text("\n".join(rows) + "\n", encoding="utf-8")
    assert main(["verify", str(out), "--data", str(changed)]) == Exit.NOT_INTACT
    err = capsys.readouterr().err
    assert f"data.sha256: {_sha(data)} → {_sha(changed)}" in err
    assert "decisions[H1].numbers.estimate: " in err
    assert "more\n" in err  # the list is bounded
    assert err.count(f"data.sha256: {_sha(data)}") == 1  # each difference once
    assert main(["--json", "verify", str(out), "--data", str(changed)]) == Exit.NOT_INTACT
    found = json.loads(capsys.readouterr().out)["problems"]
    listed = next(p["details"] for p in found if p["code"] == "results-differ")
    assert len(listed["differences"]) == len(set(listed["differences"])) == listed["count"]
    # the values are named by their design columns' labels, as results and report print them
    assert any(line.startswith("analyses[primary].tiers[crude].columns[guidance: coached vs "
                               "none].estimate: ") for line in listed["differences"])
    assert any(line.startswith("analyses[primary].exposure[full, guidance: leaflet vs none]"
                               ".natural.estimate: ") for line in listed["differences"])


def _sha(path: Path) -> str:
    from compiler.canonical import sha256_hex

    return sha256_hex(path.read_bytes())


def test_run_into_an_existing_bundle_is_refused_and_changes_nothing(study, capsys):
    plan, data, out = study
    before = files_of(out)
    assert run(plan, data, out) == Exit.PLAN_INVALID
    assert "never overwritten" in capsys.readouterr().err
    assert files_of(out) == before


def test_a_bundle_under_a_file_is_refused_before_any_work(fresh, tmp_path, capsys, monkeypatch):
    plan, data = fresh
    (tmp_path / "taken").write_text("a file, not a folder\n")
    monkeypatch.setattr("compiler.pipeline.analyse", None)  # reaching the analysis fails
    assert run(plan, data, tmp_path / "taken" / "b", "--unlocked") == Exit.PLAN_INVALID
    err = capsys.readouterr().err
    assert f"{tmp_path / 'taken'} is not a folder" in err and "internal" not in err
    assert (tmp_path / "taken").read_text() == "a file, not a folder\n"


def test_run_without_a_lock_exits_4_and_writes_nothing(fresh, tmp_path, capsys):
    plan, data = fresh
    assert run(plan, data, tmp_path / "out" / "b") == Exit.LOCK
    assert "is not frozen" in capsys.readouterr().err
    assert not (tmp_path / "out").exists()


def test_run_of_a_changed_plan_exits_4_naming_the_change(fresh, tmp_path, capsys):
    plan, data = fresh
    main(["freeze", str(plan)])
    edit(plan, "threshold: 0.10", "threshold: 0.2")
    assert run(plan, data, tmp_path / "out" / "b") == Exit.LOCK
    assert "decisions[C1].threshold: 0.1 → 0.2" in capsys.readouterr().err
    assert not (tmp_path / "out").exists()


def test_an_edited_amendment_log_exits_4(fresh, tmp_path, capsys):
    plan, data = fresh
    main(["freeze", str(plan)])
    edit(plan, "threshold: 0.10", "threshold: 0.2")
    main(["amend", str(plan), "--reason", "agreed", "--before-unblinding"])
    lock = plan.with_name(plan.name + ".lock.json")
    edit(lock, '"reason": "agreed"', '"reason": "agreed long ago"')
    assert run(plan, data, tmp_path / "out" / "b") == Exit.LOCK
    assert "the amendment chain is broken at amendment 1" in capsys.readouterr().err


def test_a_broken_data_contract_exits_3_and_writes_nothing(fresh, tmp_path, quick):
    plan, data = fresh
    first_row = data.read_text(encoding="utf-8").splitlines()[1]
    with open(data, "a", encoding="utf-8") as handle:
        handle.write(first_row + "\n")  # the first participant again: a duplicated identifier
    assert run(plan, data, tmp_path / "out" / "b", "--unlocked") == Exit.DATA_CONTRACT
    assert not (tmp_path / "out").exists()


def test_an_unlocked_run_is_stamped_not_preregistered_with_a_lock_stub(fresh, tmp_path, quick):
    plan, data = fresh
    out = tmp_path / "b"
    assert run(plan, data, out, "--unlocked") == Exit.OK
    stub = json.loads((out / "plan.lock.json").read_bytes())
    manifest = json.loads((out / "manifest.json").read_bytes())
    assert (stub["locked"], manifest["stamp"]) == (False, "NOT PRE-REGISTERED")
    assert json.loads((out / "results.json").read_bytes())["preregistered"] is False


def test_run_json_prints_the_bundle_verdicts_and_digests(fresh, tmp_path, quick, capsys):
    plan, data = fresh
    out = tmp_path / "b"
    assert run(plan, data, out, "--unlocked", "--json") == Exit.OK
    printed = json.loads(capsys.readouterr().out)
    manifest = json.loads((out / "manifest.json").read_bytes())
    assert printed["bundle"] == str(out)
    assert [v["id"] for v in printed["verdicts"]] == ["H1", "H2", "S1", "T1", "C1"]
    assert printed["digests"]["manifest"] == manifest["manifest_sha256"]


def test_run_summary_prints_one_line_per_verdict(fresh, tmp_path, quick, capsys):
    plan, data = fresh
    run(plan, data, tmp_path / "b", "--unlocked")
    lines = capsys.readouterr().out.splitlines()
    assert lines[0] == f"bundle {tmp_path / 'b'}: NOT PRE-REGISTERED"
    assert [line.split(" ")[0] for line in lines[1:6]] == ["H1", "H2", "S1", "T1", "C1"]


def test_a_signed_run_verifies_with_the_public_key(fresh, tmp_path, quick):
    from cryptography.hazmat.primitives import serialization
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

    plan, data = fresh
    key = Ed25519PrivateKey.generate()
    private, public = tmp_path / "key.pem", tmp_path / "key.pub"
    private.write_bytes(key.private_bytes(serialization.Encoding.PEM,
                                          serialization.PrivateFormat.PKCS8,
                                          serialization.NoEncryption()))
    public.write_bytes(key.public_key().public_bytes(
        serialization.Encoding.PEM, serialization.PublicFormat.SubjectPublicKeyInfo))
    assert run(plan, data, tmp_path / "b", "--unlocked", "--sign", str(private)) == Exit.OK
    assert main(["verify", str(tmp_path / "b"), "--key", str(public)]) == Exit.OK


def test_a_rehearsal_is_stamped_and_says_what_to_fix(fresh, tmp_path, quick, capsys,
                                                     monkeypatch):
    plan, _ = fresh
    monkeypatch.chdir(tmp_path)
    assert main(["rehearse", str(plan), "--seed", "1", "--rows", "300"]) == Exit.OK
    out = tmp_path / "out" / "dusk-sleep-rehearsal"
    document = json.loads((out / "results.json").read_bytes())
    printed = capsys.readouterr().out
    assert (document["rehearsal"], document["preregistered"]) == (True, False)
    assert document["rehearsal_note"] == "synthetic data, 300 rows, seed 1"
    assert "rehearsal: " in printed and "REHEARSAL" in printed


def test_a_synthetic_rehearsal_is_made_again_by_verify(fresh, tmp_path, quick):
    plan, data = fresh
    out = tmp_path / "r"
    assert main(["rehearse", str(plan), "--seed", "2", "--rows", "300", "--out", str(out)]) == 0
    assert main(["verify", str(out), "--data", str(data)]) == Exit.OK


def test_rehearse_on_real_data_needs_scramble(fresh, tmp_path, capsys):
    plan, data = fresh
    assert main(["rehearse", str(plan), "--data", str(data), "--out",
                 str(tmp_path / "r")]) == Exit.PLAN_INVALID
    assert "needs --scramble" in capsys.readouterr().err


def test_a_scrambled_rehearsal_is_made_again_by_verify_from_the_same_file(fresh, tmp_path, quick):
    plan, data = fresh
    out = tmp_path / "r"
    assert main(["rehearse", str(plan), "--data", str(data), "--scramble", "guidance",
                 "--seed", "4", "--out", str(out)]) == Exit.OK
    assert json.loads((out / "results.json").read_bytes())["rehearsal_settings"]["scramble"] == "guidance"
    assert main(["verify", str(out), "--data", str(data)]) == Exit.OK


def test_the_report_date_honours_source_date_epoch(monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1700000000")
    assert bundle_module.report_epoch(None) == 1700000000


def test_the_report_date_is_the_freeze_time_without_source_date_epoch(study, monkeypatch):
    from compiler.lock import epoch_of, read_lock

    monkeypatch.delenv("SOURCE_DATE_EPOCH", raising=False)
    state = read_lock(study[2] / "plan.lock.json")
    assert bundle_module.report_epoch(state) == epoch_of(state.amended_at)


def test_the_report_date_of_an_unlocked_run_is_fixed(monkeypatch):
    monkeypatch.delenv("SOURCE_DATE_EPOCH", raising=False)
    assert bundle_module.report_epoch(None) == 0
