"""The README tells a newcomer what they need: how to reach `prespec` after `make demo`, what
the install does to the machine, every meaning of every exit code, and how to make a signing
key. Where the README states a behaviour, the test checks the behaviour too."""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import pytest

import bundlekit
from compiler import bundle
from compiler.cli import main
from compiler.problems import Exit

ROOT = Path(__file__).resolve().parent.parent
README = (ROOT / "README.md").read_text(encoding="utf-8")
MAKEFILE = (ROOT / "Makefile").read_text(encoding="utf-8")


def _exit_table() -> list[tuple[int, str]]:
    """(exit code, meaning) for each row of the README's exit-code table."""
    section = README[README.index("### Exit codes"):]
    section = section[:section.index("\n#", 1)]
    return [(int(m[1]), m[2]) for m in re.finditer(r"^\| (\d) \| (.+) \|$", section, re.M)]


def test_the_readme_opens_with_the_job_then_exactly_two_set_up_commands():
    first_block = README.split("```sh\n", 1)[1].split("```", 1)[0]
    commands = [line.split("#")[0].strip() for line in first_block.splitlines()]
    assert [c for c in commands if c] == ["make demo", "make test"]
    opening = README.split("\n\n")[1]
    assert "compiler for that analysis plan" in opening


def test_it_says_how_to_reach_prespec_after_make_demo():
    assert ". .venv/bin/activate" in README
    assert ".venv/bin/prespec" in README
    assert "PATH" in README


def test_it_says_the_makefile_may_use_apt_get_as_root_and_what_to_do_without():
    assert "apt-get" in README and "root" in README
    skip = re.search(r"make demo (\w+)=1", README)
    assert skip, "the README names no way to skip the system libraries"
    assert f"ifeq ($({skip[1]})," in MAKEFILE  # the Makefile honours the setting it names
    packages = re.search(r"PANGO_PACKAGES := (.+)", MAKEFILE)[1].split()
    assert all(p in README for p in packages)


def _stamp_recipe() -> list[str]:
    recipe = MAKEFILE.split("$(STAMP): pyproject.toml", 1)[1].split("\n\n", 1)[0]
    return [line.strip() for line in recipe.splitlines()[1:]]


def test_the_install_says_what_it_is_doing_at_each_step():
    lines = _stamp_recipe()
    for at, line in enumerate(lines):
        if line.startswith(("$(PYTHON) -m venv", "$(BIN)/pip install")):
            assert lines[at - 1].startswith("@echo"), f"no progress line before {line}"
    (main_install,) = [line for line in lines if "-e '.[test]'" in line]
    assert " -q" not in main_install  # pip lists what it collects and installs


def test_every_exit_code_has_its_meanings_listed():
    listed = {code for code, _ in _exit_table()}
    assert {int(e) for e in Exit} <= listed


@pytest.fixture
def study(tmp_path, monkeypatch):
    monkeypatch.setattr(bundle, "render", bundlekit.quick_render)
    return bundlekit.study(tmp_path)


def _listed_exit(words: str) -> int:
    (code,) = {code for code, meaning in _exit_table() if words in meaning}
    return code


def test_an_existing_bundle_exits_as_the_readme_says(study, tmp_path):
    plan, data = study
    (tmp_path / "old").mkdir()
    got = main(["run", str(plan), "--data", str(data), "--out", str(tmp_path / "old"),
                "--unlocked"])
    assert got == _listed_exit("already exists") == Exit.PLAN_INVALID


def test_a_data_file_not_found_exits_as_the_readme_says(study, tmp_path):
    plan, _ = study
    got = main(["run", str(plan), "--data", str(tmp_path / "absent.csv"), "--out",
                str(tmp_path / "b"), "--unlocked"])
    assert got == _listed_exit("data file is not found") == Exit.DATA_CONTRACT


@pytest.mark.skipif(shutil.which("openssl") is None, reason="openssl is not installed")
def test_the_readme_key_commands_make_a_key_pair_that_signs_and_verifies(study, tmp_path):
    plan, data = study
    block = README[README.index("### Signing a bundle"):].split("```sh\n", 1)[1].split("```")[0]
    for line in block.splitlines():
        if line.startswith("openssl "):
            subprocess.run(line.split("#")[0].split(), cwd=tmp_path, check=True,
                           capture_output=True)
    private, public = tmp_path / "signing-key.pem", tmp_path / "signing-key.pub.pem"
    out = tmp_path / "signed"
    assert main(["run", str(plan), "--data", str(data), "--out", str(out), "--unlocked",
                 "--sign", str(private)]) == Exit.OK
    assert main(["verify", str(out), "--key", str(public)]) == Exit.OK
