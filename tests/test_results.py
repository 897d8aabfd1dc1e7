"""The results document: its schema, its canonical bytes, and no NaN ever written."""

from __future__ import annotations

import json
import math
from dataclasses import replace
from pathlib import Path

import jsonschema
import pytest

from compiler import results
from compiler.canonical import canonical_bytes
from compiler.environment import environment
from compiler.pipeline import Analysed, Stamp, analyse, compile_plan
from compiler.rehearse import synthetic_table
from compiler.resources import schema_path

DEMO = Path(__file__).resolve().parent.parent / "plans" / "dusk-sleep.yaml"


@pytest.fixture(scope="module")
def analysed() -> Analysed:
    plan = compile_plan(DEMO)
    table = replace(synthetic_table(plan, rows=300, seed=3), path="/somewhere/private/final.csv")
    return analyse(plan, None, table=table)


def build(analysed, stamp=Stamp(preregistered=True), **changes) -> dict:
    return results.build(analysed, stamp=stamp, plan_file_sha256="ab" * 32,
                         environment=environment(), **changes)


def validator():
    schema = json.loads(schema_path("results.schema.json").read_text(encoding="utf-8"))
    return jsonschema.Draft202012Validator(schema)


def test_the_schema_is_valid_json_schema_2020_12():
    schema = json.loads(schema_path("results.schema.json").read_text(encoding="utf-8"))
    jsonschema.Draft202012Validator.check_schema(schema)


def test_a_run_document_validates_against_the_schema(analysed):
    errors = sorted(validator().iter_errors(build(analysed)), key=lambda e: list(e.path))
    assert [f"{list(e.path)}: {e.message}" for e in errors] == []


def test_a_rehearsal_document_validates_and_says_so(analysed):
    stamp = Stamp(preregistered=False, rehearsal=True, note="synthetic data, 300 rows, seed 3")
    settings = {"source": "synthetic", "seed": 3, "rows": 300, "effect": None, "scramble": None,
                "effects": [{"analysis": "primary", "level": None, "scale": "difference",
                             "value": -5.0}]}
    document = build(analysed, stamp, rehearsal_settings=settings)
    assert list(validator().iter_errors(document)) == []
    assert (document["rehearsal"], document["preregistered"]) == (True, False)
    assert document["rehearsal_note"] == "synthetic data, 300 rows, seed 3"


def test_every_property_of_the_schema_carries_a_description():
    schema = json.loads(schema_path("results.schema.json").read_text(encoding="utf-8"))
    missing = []

    def walk(node, path):
        if isinstance(node, dict):
            for name, sub in (node.get("properties") or {}).items():
                if "description" not in sub:
                    missing.append(f"{path}.{name}")
            for key, sub in node.items():
                walk(sub, f"{path}.{key}")
        elif isinstance(node, list):
            for i, sub in enumerate(node):
                walk(sub, f"{path}[{i}]")

    walk(schema, "")
    assert missing == []


def test_the_bytes_are_canonical_sorted_compact_with_one_trailing_newline(analysed):
    data = results.to_bytes(build(analysed))
    parsed = json.loads(data)
    assert data == (json.dumps(parsed, sort_keys=True, separators=(",", ":"),
                               ensure_ascii=False) + "\n").encode("utf-8")


def test_the_same_inputs_give_the_same_bytes(analysed):
    assert results.to_bytes(build(analysed)) == results.to_bytes(build(analysed))


def test_each_analysis_names_its_exposure_variable_beside_the_exposure_rows(analysed):
    # the results core uses `exposure` for the rows across tiers, so the variable needs its own key
    for analysis, section in zip(analysed.plan.analyses, build(analysed)["analyses"]):
        assert section["exposure_variable"] == analysis.exposure
        assert {row["tier"] for row in section["exposure"]} == {t.name for t in analysis.tiers}


def test_the_data_file_is_named_without_its_folder(analysed):
    document = build(analysed)
    assert document["data"]["file"] == "final.csv"
    assert "/somewhere/private" not in results.to_bytes(document).decode("utf-8")


def test_a_non_finite_estimate_becomes_null_with_a_reason(analysed):
    fit = analysed.fits[0]
    tier = fit.tiers[0]
    broken = replace(tier.columns[0], estimate=math.nan, reason=None)
    tiers = (replace(tier, columns=(broken, *tier.columns[1:])), *fit.tiers[1:])
    spoilt = replace(analysed, fits=(replace(fit, tiers=tiers), *analysed.fits[1:]))
    written = build(spoilt)["analyses"][0]["tiers"][0]["columns"][0]
    assert written["estimate"] is None and written["reason"] == results.NOT_FINITE


def test_an_infinite_number_behind_a_verdict_becomes_null(analysed):
    verdict = replace(analysed.verdicts[0], numbers={"test_value": math.inf, "p": 0.5})
    spoilt = replace(analysed, verdicts=(verdict, *analysed.verdicts[1:]))
    assert build(spoilt)["decisions"][0]["numbers"] == {"test_value": None, "p": 0.5}


def test_canonical_bytes_refuse_nan_outright():
    with pytest.raises(ValueError):
        canonical_bytes({"estimate": math.nan})


def test_no_lock_means_a_null_lock_and_no_amendments(analysed):
    document = build(analysed, Stamp(preregistered=False))
    assert (document["lock"], document["amendments"], document["preregistered"]) == (None, [], False)
