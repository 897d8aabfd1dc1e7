"""NIST StRD Longley through the whole command-line path: plan file and CSV in, results.json out.

Certified values: NIST ITL StRD "Longley" (Longley 1967, JASA 62:819–841), quoted in
/work/shared/references.md and held in tests/nist.py. Agreement is NIST's log relative
error (LRE); the issue asks for LRE ≥ 10 on every coefficient, every standard error, R²
and the residual sum of squares.
"""

from __future__ import annotations

import json

import pytest

import compiler.bundle as bundle_module
from compiler.cli import main

import bundlekit
import nist


@pytest.fixture(scope="module")
def certified_tier(tmp_path_factory):
    folder = tmp_path_factory.mktemp("longley")
    plan = nist.write_longley(folder)
    out = folder / "bundle"
    with pytest.MonkeyPatch.context() as patch:
        # The report is not under test here; results.json is built before rendering.
        patch.setattr(bundle_module, "render", bundlekit.quick_render)
        assert main(["run", "--unlocked", str(plan), "--out", str(out)]) == 0
    results = json.loads((out / "results.json").read_text(encoding="utf-8"))
    (analysis,) = results["analyses"]
    return next(t for t in analysis["tiers"] if t["name"] == "certified")


@pytest.mark.parametrize("term", list(nist.CERTIFIED))
def test_longley_coefficient_through_the_cli(certified_tier, term):
    row = next(c for c in certified_tier["columns"] if c["column"] == term)
    certified_estimate, _ = nist.CERTIFIED[term]
    assert nist.lre(row["estimate"], certified_estimate) >= 10


@pytest.mark.parametrize("term", list(nist.CERTIFIED))
def test_longley_standard_error_through_the_cli(certified_tier, term):
    row = next(c for c in certified_tier["columns"] if c["column"] == term)
    _, certified_sd = nist.CERTIFIED[term]
    assert nist.lre(row["standard_error"], certified_sd) >= 10


def test_longley_r_squared_and_residual_ss_through_the_cli(certified_tier):
    assert nist.lre(certified_tier["r_squared"], nist.CERTIFIED_R_SQUARED) >= 10
    assert nist.lre(certified_tier["rss"], nist.CERTIFIED_RESIDUAL_SS) >= 10
    assert certified_tier["residual_df"] == nist.CERTIFIED_RESIDUAL_DF
