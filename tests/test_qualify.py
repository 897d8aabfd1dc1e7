"""`prespec qualify`: the reference problems through the run pipeline, sealed as a bundle that
verify checks. Reference values: NIST StRD certified values (public domain; data and values
in reference/nist_strd_lls.json, checked in tests/test_qualify_reference.py), 50-digit
mpmath reference fits and published values (reference/glm_fits.json), Holm (1979)'s worked
example, handbook F, t and χ² quantiles (references.md)."""

from __future__ import annotations

import json
import math

import pytest

import bundlekit
from compiler import qualify_problems
from compiler.canonical import canonical_bytes, sha256_hex
from compiler.cli import main
from compiler.qualify import qualification_document
from compiler.qualify_checks import lre, rounded_tolerance

BINDING = {"id", "source", "quantity", "value", "reference", "lre", "tolerance", "passed"}


@pytest.fixture(scope="module")
def bundle(tmp_path_factory):
    out = tmp_path_factory.mktemp("qualify") / "q"
    assert main(["qualify", "--out", str(out)]) == 0
    return out


@pytest.fixture(scope="module")
def document(bundle):
    return json.loads((bundle / "qualification.json").read_text(encoding="utf-8"))


def test_qualify_seals_its_evidence_as_a_bundle(bundle):
    names = sorted(p.name for p in bundle.iterdir())
    assert names == ["manifest.json", "qualification.json", "report.html", "report.pdf"]


def test_every_check_record_has_the_binding_keys(document):
    assert document["format"] == "prespec-qualification/1" and document["qualified"] is True
    assert len(document["checks"]) > 100
    for check in document["checks"]:
        assert BINDING <= set(check), check["id"]
        assert isinstance(check["passed"], bool) and isinstance(check["source"], str)


def test_the_environment_names_libraries_blas_and_cpu(document):
    environment = document["environment"]
    assert environment["libraries"]["numpy"] and environment["libraries"]["prespec"]
    assert any(b.get("user_api") == "blas" for b in environment["blas"])
    assert set(environment["cpu"]) == {"model", "machine", "logical_cores"}


def test_every_problem_of_the_issue_is_checked_or_listed_as_not_expressible(document):
    checked = {c["id"].split(".")[0] for c in document["checks"]}
    for name in ("norris", "pontius", "longley", "filip", *(f"wampler{k}" for k in range(1, 6))):
        assert f"nist-{name}" in checked
    assert {"spector-logit", "dobson-poisson", "holm", "quantile"} <= checked
    waiting = {n["id"] for n in document["not_yet_expressible"]}
    assert waiting == {"nist-noint1", "nist-noint2", "gamma-fit", "cox-fit"}


def test_longley_reaches_lre_10_through_the_pipeline(document):
    # NIST StRD Longley, certified values; references.md: a careful QR reaches ≥ 10.9
    longley = [c for c in document["checks"] if c["id"].startswith("nist-longley.")]
    assert len(longley) == 16 and min(c["lre"] for c in longley) >= 10


def test_an_exact_fit_expects_null_standard_errors(document):
    # NIST StRD Wampler1: certified standard deviations 0 (an exact fit)
    check = next(c for c in document["checks"] if c["id"] == "nist-wampler1.standard_error.0")
    assert check["rule"] == "null" and check["value"] is None and check["passed"]
    assert "exact fit" in check["note"]


def test_verify_says_a_qualification_bundle_is_intact(bundle, capsys):
    assert main(["verify", "--json", str(bundle)]) == 0
    assert json.loads(capsys.readouterr().out)["intact"] is True


def test_verify_catches_a_forged_check(bundle, tmp_path, capsys):
    copy = bundlekit.copy_of(bundle, tmp_path)

    def forge(document):
        check = next(c for c in document["checks"] if c["id"] == "nist-longley.coefficient.0")
        check["lre"] = 3.0  # a missed check still saying passed

    bundlekit.edit_json(copy / "qualification.json", forge)
    bundlekit.reseal(copy, lambda m: m["qualification"].update(
        sha256=sha256_hex((copy / "qualification.json").read_bytes())))
    for path in copy.iterdir():
        path.chmod(0o444)
    assert main(["verify", str(copy)]) == 5
    assert "say passed where their own value" in capsys.readouterr().err


def test_verify_data_is_refused_for_a_qualification_bundle(bundle, tmp_path):
    assert main(["verify", str(bundle), "--data", str(tmp_path / "x.csv")]) == 2


def test_qualification_is_byte_reproducible(document):
    # apart from the manifest's time: the same installation gives the same qualification.json
    assert canonical_bytes(qualification_document()) == canonical_bytes(document)


def test_a_tightened_tolerance_makes_qualify_exit_7(tmp_path, monkeypatch, capsys):
    # beyond what double precision can reach on Longley-class problems (15.9 = exact)
    monkeypatch.setattr(qualify_problems, "LRE_LINEAR", 15.95)
    out = tmp_path / "q"
    assert main(["qualify", "--out", str(out)]) == 7
    said = capsys.readouterr().out
    assert "missed: nist-norris." in said
    found = json.loads((out / "qualification.json").read_text())
    assert found["qualified"] is False
    assert main(["verify", str(out)]) == 0  # a qualification that failed is still sealed evidence


def test_an_existing_bundle_is_never_overwritten(bundle):
    assert main(["qualify", "--out", str(bundle)]) == 2


def test_lre_is_relative_or_absolute_for_a_zero_reference():
    assert lre(1.0 + 1e-10, 1.0)[0] == pytest.approx(10.0, abs=1e-3)
    assert lre(1e-12, 0.0) == (pytest.approx(12.0), "absolute")
    assert lre(2.0, 2.0)[0] == 15.9


def test_a_rounded_reference_allows_half_a_unit_of_its_last_digit():
    # F₀.₉₅(1,10) = 4.96 in the tables (references.md): half a unit is 0.005
    assert rounded_tolerance("4.96") == pytest.approx(-math.log10(0.005 / 4.96))
