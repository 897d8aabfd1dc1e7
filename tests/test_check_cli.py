"""`prespec check` and the command line's shared behaviour, through compiler.cli.main."""

from __future__ import annotations

import json

import pytest

from compiler import __version__
from compiler.cli import main

DEMO = "plans/dusk-sleep.yaml"
COMMANDS = ["check", "freeze", "amend", "run", "rehearse", "verify"]

BROKEN = """\
prespec: 1
study: {id: trial}
variables:
  y: {kind: continuous}
  arm: {kind: categorical, levels: [a, b]}
  age: {kind: continuous}
analyses:
  - id: main
    outcome: y
    family: gaussian
    exposure: arm
    tiers:
      - name: crude
      - name: adjusted
        add: [agee]
"""


def broken_plan(tmp_path) -> str:
    path = tmp_path / "broken.yaml"
    path.write_text(BROKEN, encoding="utf-8")
    return str(path)


def test_the_demo_plan_passes(capsys):
    assert main(["check", DEMO]) == 0
    assert capsys.readouterr().out.startswith(f"{DEMO}: ok: study dusk-sleep")


def test_explain_shows_the_expanded_design_columns(capsys):
    assert main(["check", "--explain", DEMO]) == 0
    out = capsys.readouterr().out
    assert "guidance: coached vs none" in out
    assert "age^2" in out
    assert ("district: hillside vs harbour; district: market vs harbour;\n"
            "      district: riverside vs harbour") in out


def test_explain_states_the_sample_rule_and_the_nested_tests(capsys):
    main(["check", "--explain", DEMO])
    out = capsys.readouterr().out
    assert ("complete cases over latency_w8, guidance, latency_w0, age, night_shift, district,"
            in out.replace("\n    ", " "))
    assert ("crude → baseline: extra sum of squares test of the 2 added columns, referred "
            "to F") in out
    assert ("crude → adjusted: likelihood ratio test of the 3 added columns, referred "
            "to χ²") in out


def test_an_invalid_plan_exits_2_with_its_place(tmp_path, capsys):
    path = broken_plan(tmp_path)
    assert main(["check", path]) == 2
    err = capsys.readouterr().err
    assert err.splitlines()[0] == (
        f"{path}:15:15: error: unknown variable `agee` (term of analysis `main`)")


def test_the_hint_follows_its_problem(tmp_path, capsys):
    main(["check", broken_plan(tmp_path)])
    assert capsys.readouterr().err.splitlines()[1] == "  hint: did you mean `age`?"


def test_json_lists_every_problem_with_file_line_and_column(tmp_path, capsys):
    path = broken_plan(tmp_path)
    assert main(["check", "--json", path]) == 2
    doc = json.loads(capsys.readouterr().out)
    assert doc["exit_code"] == 2
    assert [(p["file"], p["line"], p["col"], p["code"]) for p in doc["problems"]] == [
        (path, 15, 15, "unknown-variable")]


def test_json_of_a_valid_plan_carries_the_explanation(capsys):
    assert main(["check", "--json", "--explain", DEMO]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["problems"] == []
    primary = doc["explain"]["analyses"][0]
    assert primary["tiers"][0]["columns"] == ["intercept", "guidance: leaflet vs none",
                                              "guidance: coached vs none"]


def test_a_missing_plan_file_exits_2(tmp_path, capsys):
    path = str(tmp_path / "absent.yaml")
    assert main(["check", path]) == 2
    assert capsys.readouterr().err.strip() == (
        f"error: {path}: cannot read the plan: No such file or directory")


def test_version(capsys):
    with pytest.raises(SystemExit) as leaving:
        main(["--version"])
    assert leaving.value.code == 0
    assert capsys.readouterr().out.strip() == f"prespec {__version__}"


@pytest.mark.parametrize("command", [None, *COMMANDS])
def test_help_on_every_command(command, capsys):
    with pytest.raises(SystemExit) as leaving:
        main(([command] if command else []) + ["--help"])
    assert leaving.value.code == 0
    assert capsys.readouterr().out.startswith("usage: prespec")


@pytest.mark.parametrize("argv", [[], ["check"], ["check", "a.yaml", "b.yaml"],
                                  ["check", "--bogus", "a.yaml"], ["nonsense"]])
def test_command_line_errors_exit_2_with_one_line(argv, capsys):
    with pytest.raises(SystemExit) as leaving:
        main(argv)
    assert leaving.value.code == 2
    err = capsys.readouterr().err
    assert len(err.strip().splitlines()) == 1 and err.startswith("prespec: error: ")


def test_the_executable_flushes_its_output_and_keeps_every_exit_code(tmp_path):
    # `prespec` (compiler.cli.command) ends its process with os._exit after main returns:
    # what main printed must still arrive whole through a pipe, with main's exit code.
    import subprocess
    import sys

    def prespec(*args):
        return subprocess.run([sys.executable, "-m", "compiler", *args], capture_output=True,
                              text=True)

    ok = prespec("--json", "check", DEMO)
    assert ok.returncode == 0
    assert json.loads(ok.stdout)["exit_code"] == 0
    broken = tmp_path / "broken.yaml"
    broken.write_text(BROKEN)
    bad = prespec("check", str(broken))
    assert bad.returncode == 2
    assert f"{broken}:15:15: error: unknown variable `agee`" in bad.stderr
    version = prespec("--version")
    assert (version.returncode, version.stdout.strip()) == (0, f"prespec {__version__}")
    usage = prespec("no-such-command")
    assert usage.returncode == 2 and "invalid choice" in usage.stderr


# ---- one-sided rules above 0.025 (issue 21, point 4) ---------------------------------------
# Common confirmatory practice holds a one-sided test at 0.025, half the two-sided level
# (ICH E9, section 5.5; from memory). check warns; the exit code stays 0.

ONE_SIDED = BROKEN.replace("      - name: adjusted\n        add: [agee]\n", "") + """\
decisions:
  - id: S1
    analysis: main
    test: superiority
    direction: higher
    alpha: ALPHA
"""


def _one_sided(tmp_path, alpha: str) -> str:
    path = tmp_path / "one-sided.yaml"
    path.write_text(ONE_SIDED.replace("ALPHA", alpha), encoding="utf-8")
    return str(path)


def test_a_one_sided_rule_above_0025_is_warned_in_the_gnu_form_and_exits_0(tmp_path, capsys):
    plan = _one_sided(tmp_path, "0.05")
    assert main(["check", plan]) == 0
    out = capsys.readouterr().out
    assert f"{plan}:15:5: warning: decision `S1` is a one-sided test at its α = 0.05" in out
    assert "0.025" in out


def test_the_one_sided_warning_is_in_the_json_document(tmp_path, capsys):
    assert main(["check", "--json", _one_sided(tmp_path, "0.05")]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["exit_code"] == 0
    (warning,) = doc["problems"]
    assert (warning["severity"], warning["code"], warning["line"]) == (
        "warning", "one-sided-alpha", 15)


def test_a_one_sided_rule_at_0025_is_not_warned(tmp_path, capsys):
    assert main(["check", _one_sided(tmp_path, "0.025")]) == 0
    assert "warning" not in capsys.readouterr().out
