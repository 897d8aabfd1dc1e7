"""`prespec rehearse` exits 6 when the rehearsal shows the plan would not decide
(shared/design.md, second round: rehearse exits 0, 2, 3, 6), and still writes the bundle."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

import bundlekit
from compiler import bundle as bundle_module
from compiler.cli import main
from compiler.problems import Exit

DEMO = Path(__file__).resolve().parents[1] / "plans" / "dusk-sleep.yaml"


@pytest.fixture
def quick(monkeypatch):
    monkeypatch.setattr(bundle_module, "render", bundlekit.quick_render)


def _plan(folder: Path, old: str, new: str) -> Path:
    plan = folder / "plan.yaml"
    plan.write_text(DEMO.read_text(encoding="utf-8"), encoding="utf-8")
    bundlekit.edit(plan, old, new)
    return plan


# A tier with a factor of 60 levels on 120 rows: about two rows per level, so with a 0/1
# outcome at p ≈ 0.3 many levels hold only zeros (probability 0.49 each) and the logistic
# fit is quasi-separated: the maximum-likelihood estimates do not exist.
MANY_LEVELS = ("  district:          {kind: categorical, levels: [harbour, hillside, market, "
               "riverside], reference: harbour}\n")
STREETS = "  street: {kind: categorical, levels: [" + ", ".join(
    f"s{k:02d}" for k in range(60)) + "]}\n"


def test_a_tier_that_cannot_be_fitted_exits_6_and_still_writes_the_bundle(tmp_path, quick,
                                                                         capsys):
    plan = _plan(tmp_path, MANY_LEVELS, MANY_LEVELS + STREETS)
    bundlekit.edit(plan, "        add: [latency_w0, age, night_shift]\n",
                   "        add: [latency_w0, age, night_shift, street]\n")
    out = tmp_path / "bundle"
    code = main(["rehearse", str(plan), "--out", str(out), "--rows", "120", "--seed", "1"])
    printed = capsys.readouterr().out
    assert code == Exit.WOULD_NOT_DECIDE == 6
    assert (out / "results.json").is_file() and (out / "manifest.json").is_file()
    assert "analyses[settled].tiers[adjusted]" in printed and "separation" in printed
    assert "S1 undetermined" in printed  # the rule that reads the tier
    assert "would not decide" in printed


def test_a_rule_left_undetermined_exits_6_naming_the_rule(tmp_path, quick, capsys):
    plan = _plan(tmp_path, "    confidence: 0.95\n",
                 "    confidence: 0.95\n    minimum_information: {n: 100000}\n")
    out = tmp_path / "bundle"
    code = main(["rehearse", str(plan), "--out", str(out), "--json"])
    document = json.loads(capsys.readouterr().out)
    assert code == 6 and document["exit_code"] == 6
    assert document["rehearsal"]["ready"] is False
    assert any(item.startswith("H1 undetermined") for item in document["rehearsal"]["to_fix"])
    assert (out / "results.json").is_file()


def test_a_plan_that_decides_everything_exits_0(tmp_path, quick, capsys):
    code = main(["rehearse", str(DEMO), "--out", str(tmp_path / "b"), "--seed", "1"])
    assert code == 0
    assert "every tier fitted, every rule evaluable" in capsys.readouterr().out
