"""`prespec rehearse` end to end, through the command line, on the demo plan."""

from __future__ import annotations

import hashlib
import importlib.util
import json
import math
from pathlib import Path

import pytest

import bundlekit
from compiler import bundle as bundle_module
from compiler.cli import main

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "plans" / "dusk-sleep.yaml"


def rehearse(*args: str) -> int:
    return main(["rehearse", *args])


def results(folder: Path) -> dict:
    return json.loads((folder / "results.json").read_bytes())


@pytest.fixture
def quick(monkeypatch):
    """results.json does not depend on the rendered report, so the PDF is skipped here
    (test_run_cli checks a rehearsal's REHEARSAL stamp)."""
    monkeypatch.setattr(bundle_module, "render", bundlekit.quick_render)


def test_a_synthetic_rehearsal_exits_0_stamped_as_a_rehearsal(tmp_path, quick):
    out = tmp_path / "seed-1"
    assert rehearse(str(DEMO), "--out", str(out), "--seed", "1") == 0
    document = results(out)
    assert document["rehearsal"] is True and document["preregistered"] is False
    assert document["data"]["rows_read"] == 600  # the demo plan's data.expected_rows


def test_the_same_seed_gives_the_same_results_bytes(tmp_path, quick):
    first, again = tmp_path / "first", tmp_path / "again"
    assert rehearse(str(DEMO), "--out", str(first), "--seed", "1", "--effect", "primary=0.4") == 0
    assert rehearse(str(DEMO), "--out", str(again), "--seed", "1", "--effect", "primary=0.4") == 0
    assert (again / "results.json").read_bytes() == (first / "results.json").read_bytes()


def test_another_seed_runs_on_other_data(tmp_path, quick):
    one, other = tmp_path / "one", tmp_path / "other"
    assert rehearse(str(DEMO), "--out", str(one), "--seed", "1", "--rows", "300") == 0
    assert rehearse(str(DEMO), "--out", str(other), "--seed", "2", "--rows", "300") == 0
    assert results(other)["data"]["sha256"] != results(one)["data"]["sha256"]
    assert results(other)["data"]["rows_read"] == 300


def _demo_data(folder: Path) -> Path:
    spec = importlib.util.spec_from_file_location("make_demo_data", ROOT / "plans" / "make_demo_data.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)  # type: ignore[union-attr]
    records = module.generate(400, 5)
    path = folder / "blinded.csv"
    lines = [",".join(records[0])] + [",".join(r.values()) for r in records]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def test_a_scrambled_rehearsal_keeps_the_real_files_digest(tmp_path, quick):
    data = _demo_data(tmp_path)
    out = tmp_path / "scrambled"
    assert rehearse(str(DEMO), "--data", str(data), "--scramble", "guidance", "--seed", "3",
                    "--out", str(out)) == 0
    document = results(out)
    assert document["rehearsal"] is True and document["preregistered"] is False
    assert document["data"]["sha256"] == hashlib.sha256(data.read_bytes()).hexdigest()


def test_scrambling_an_undeclared_column_exits_2_naming_it(tmp_path, capsys):
    data = _demo_data(tmp_path)
    code = rehearse(str(DEMO), "--data", str(data), "--scramble", "shoe_size",
                    "--out", str(tmp_path / "never"))
    assert code == 2 and "shoe_size" in capsys.readouterr().err
    assert not (tmp_path / "never").exists()


def test_a_population_no_row_can_meet_exits_2_at_its_condition(tmp_path, capsys):
    text = DEMO.read_text(encoding="utf-8")
    rule = "      - {variable: sessions_attended, at_least: 2}\n"
    assert rule in text
    impossible = "      - {variable: age, below: 17}\n"
    text = text.replace(rule, rule + impossible)
    plan = tmp_path / "impossible.yaml"
    plan.write_text(text, encoding="utf-8")
    line = text.splitlines().index(impossible.rstrip("\n")) + 1
    code = rehearse(str(plan), "--out", str(tmp_path / "never"))
    err = capsys.readouterr().err
    assert code == 2
    assert f"{plan}:{line}:" in err and "age < 17" in err
    assert not (tmp_path / "never").exists()


# --- planted effects, per analysis and level, on the natural scale --------------------------

def test_effects_are_planted_per_analysis_and_level_on_the_natural_scale(tmp_path, quick):
    out = tmp_path / "planted"
    assert rehearse(str(DEMO), "--out", str(out), "--seed", "4", "--rows", "2000",
                    "--effect", "primary=-4", "--effect", "primary:coached=-12",
                    "--effect", "awakenings=0.5") == 0
    document = results(out)
    assert document["rehearsal_settings"]["effects"] == [
        {"analysis": "primary", "level": None, "scale": "difference", "value": -4.0},
        {"analysis": "primary", "level": "coached", "scale": "difference", "value": -12.0},
        {"analysis": "awakenings", "level": None, "scale": "rate ratio", "value": 0.5}]
    exposure = {(a["id"], row["column"]): row for a in document["analyses"]
                for row in a["exposure"] if row["tier"] == a["tiers"][-1]["name"]}
    # each estimate lies within 4 standard errors of what was planted (on the model scale: a
    # difference, or the ratio's logarithm; a miss has probability 6e-5 per estimate under the
    # normal approximation); settled got no effect planted (odds ratio 1)
    leaflet, coached = "guidance: leaflet vs none", "guidance: coached vs none"
    planted = {("primary", leaflet): -4.0, ("primary", coached): -12.0,
               ("awakenings", leaflet): math.log(0.5), ("awakenings", coached): math.log(0.5),
               ("settled", leaflet): 0.0, ("settled", coached): 0.0}
    for key, value in planted.items():
        row = exposure[key]
        assert abs(row["estimate"] - value) < 4 * row["standard_error"], (key, row)
    assert "planted effects primary difference -4.0" in document["rehearsal_note"]


@pytest.mark.parametrize("spec, said", [
    ("-3", "a bare value is ambiguous in a plan with 3 analyses"),
    ("awakenings=-3", "analysis awakenings is poisson: its effect is a rate ratio, which must be above 0"),
    ("primary:none=-3", "'none' is the reference level of guidance"),
    ("primary:coachd=-3", "'coachd' is not a level of guidance"),
    ("primry=-3", "no analysis is called 'primry'"),
    ("primary=lots", "'lots' is not a finite number")])
def test_an_effect_that_cannot_be_planted_exits_2_saying_why(tmp_path, capsys, spec, said):
    code = rehearse(str(DEMO), "--out", str(tmp_path / "never"), "--effect", spec)
    err = capsys.readouterr().err
    assert code == 2 and f"--effect {spec}: {said}" in err, err
    assert not (tmp_path / "never").exists()


def test_a_bare_effect_is_refused_with_the_named_form_as_hint(tmp_path, capsys):
    assert rehearse(str(DEMO), "--out", str(tmp_path / "never"), "--effect", "-3") == 2
    assert "hint: name the analysis, on its natural scale: --effect primary=-3" in \
        capsys.readouterr().err


def test_an_effect_with_scramble_is_refused(tmp_path, capsys):
    data = _demo_data(tmp_path)
    code = rehearse(str(DEMO), "--data", str(data), "--scramble", "guidance",
                    "--effect", "primary=-5", "--out", str(tmp_path / "never"))
    err = capsys.readouterr().err
    assert code == 2 and "cannot be planted in scrambled real data" in err
    assert not (tmp_path / "never").exists()
