"""A synthetic rehearsal is bounded in size: what cannot be made is refused with exit 2,
by `check` for data.expected_rows and by `rehearse` for --rows, before anything is drawn."""

from __future__ import annotations

import pytest

from compiler import rehearsal_size
from compiler.cli import main
from compiler.problems import Exit

import bundlekit
from clikit import prespec


@pytest.fixture
def demo(tmp_path):
    plan, _ = bundlekit.study(tmp_path / "study")
    return plan


def test_check_refuses_an_expected_rows_no_rehearsal_could_make(demo, capsys):
    bundlekit.edit(demo, "expected_rows: 600", "expected_rows: 2000000000")
    assert main(["check", str(demo)]) == Exit.PLAN_INVALID
    err = capsys.readouterr().err
    assert f"{demo}:" in err and "expected_rows: 2000000000 synthetic rows of 13 variables" in err
    assert f"at most {rehearsal_size.max_rows(13):,} rows" in err


@pytest.mark.parametrize("rows", ["200000000", "9" * 299])
def test_rehearse_refuses_rows_it_cannot_make_quickly_and_with_exit_2(demo, tmp_path, rows):
    done = prespec("rehearse", demo, "--rows", rows, "--out", tmp_path / "r", timeout=60)
    assert done.returncode == 2, done.stderr
    assert "is more than a rehearsal makes" in done.stderr
    assert "MemoryError" not in done.stderr and not (tmp_path / "r").exists()
    if len(rows) > 20:
        assert "(299 digits)" in done.stderr  # not the whole number


def test_the_largest_rehearsal_allowed_is_accepted_by_the_check():
    assert rehearsal_size.too_many(rehearsal_size.max_rows(13), 13) is None
    assert rehearsal_size.too_many(rehearsal_size.max_rows(13) + 1, 13) is not None
