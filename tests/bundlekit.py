"""A demo study in a temporary folder, for the run, verify and kill tests.

The plan is plans/dusk-sleep.yaml, the data come from plans/make_demo_data.py (seeded, so
the same bytes every time). ``quick_render`` stands in for the report where a test is about
the bundle's orchestration rather than its report; the determinism and report tests use the
real one.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

from compiler.canonical import canonical_bytes, sha256_hex

ROOT = Path(__file__).resolve().parent.parent
DEMO_PLAN = ROOT / "plans" / "dusk-sleep.yaml"
MAKE_DATA = ROOT / "plans" / "make_demo_data.py"
ROWS = 240


def study(folder: Path) -> tuple[Path, Path]:
    """Copy the demo plan into ``folder`` and write its data; return (plan, data)."""
    folder.mkdir(parents=True, exist_ok=True)
    plan = folder / "dusk-sleep.yaml"
    shutil.copyfile(DEMO_PLAN, plan)
    data = folder / "dusk-sleep.csv"
    subprocess.run([sys.executable, str(MAKE_DATA), str(data), "--rows", str(ROWS)],
                   check=True, capture_output=True)
    return plan, data


def edit(path: Path, old: str, new: str) -> None:
    text = path.read_text(encoding="utf-8")
    assert old in text, old
    path.write_text(text.replace(old, new, 1), encoding="utf-8")


def quick_render(document: dict, results_bytes: bytes, fits, epoch: int,
                 renderer=None) -> tuple[bytes, bytes]:
    """A deterministic stand-in for report.html and report.pdf."""
    html = canonical_bytes({"report of": sha256_hex(results_bytes), "epoch": epoch})
    return html, b"%PDF-stand-in " + html


def files_of(bundle: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(bundle.iterdir())}
