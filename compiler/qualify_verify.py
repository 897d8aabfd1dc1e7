"""What `prespec verify` establishes of a qualification bundle's own contents.

Once its files match the manifest (compiler/verify.py): qualification.json is JSON in the
qualification format with every check record's binding keys; each check's ``passed`` follows
from its own value, reference, LRE and tolerance (compiler.qualify_checks.passed), and
``qualified`` from the checks; the manifest's stamp, summary and environment are the
file's. Not re-derivable offline: the values themselves (run `prespec qualify` again) and
the report's content (sealed by its digest).
"""

from __future__ import annotations

from pathlib import Path

from .problems import Problem

REQUIRED = ("qualification.json", "report.html", "report.pdf")
NOT_OFFLINE = ("  not re-derived offline: the checks' values (run prespec qualify again on this "
               "installation), and report.html and report.pdf (sealed by their digests only)")
CHECK_KEYS = ("id", "source", "quantity", "value", "reference", "lre", "tolerance", "passed",
              "rule")


def is_qualification(manifest: dict) -> bool:
    from .qualify import STAMP

    return manifest.get("stamp") == STAMP


def _fail(message: str) -> Problem:
    return Problem(message, code="not-intact", details={"file": "qualification.json"})


def check_contents(folder: Path, manifest: dict) -> tuple[list[Problem], list[str]]:
    from .crosscheck import read_json
    from .qualify import FILE, FORMAT, manifest_about
    from .canonical import canonical_bytes
    from .qualify_checks import passed

    document, why = read_json(folder / FILE)
    if why is None and not isinstance(document, dict):
        why = "it is not a JSON object"
    if why:
        return [_fail(f"{FILE}: unreadable: {why}")], []
    if document.get("format") != FORMAT:
        return [_fail(f"{FILE}: not a qualification document (format "
                      f"{document.get('format')!r}, expected {FORMAT})")], []
    checks = document.get("checks")
    if not isinstance(checks, list) or not checks or not all(
            isinstance(c, dict) and all(k in c for k in CHECK_KEYS) for c in checks):
        return [_fail(f"{FILE}: `checks` is not a list of check records with "
                      f"{', '.join(CHECK_KEYS)}")], []
    problems = []
    try:
        wrong = [c["id"] for c in checks if passed(c) is not c["passed"]]
    except (KeyError, TypeError, ValueError, ArithmeticError) as exc:
        return [_fail(f"{FILE}: a check record cannot be read ({type(exc).__name__}: {exc})")], []
    if wrong:
        problems.append(_fail(f"{FILE}: {len(wrong)} checks say passed where their own value, "
                              f"reference and tolerance say otherwise: {', '.join(wrong[:5])}"))
    if document.get("qualified") is not all(c["passed"] for c in checks):
        problems.append(_fail(f"{FILE}: `qualified` disagrees with its checks"))
    if not isinstance(document.get("environment"), dict):
        problems.append(_fail(f"{FILE}: it records no environment"))
    expected = manifest_about(document, canonical_bytes(document))
    for part in ("qualification", "environment"):
        if manifest.get(part) != expected[part]:
            problems.append(_fail(f"manifest.json: its {part} record is not "
                                  f"{FILE}'s"))
    notes = [f"  qualification.json: {len(checks)} checks, each passed as its own numbers "
             f"say; {'qualified' if document['qualified'] else 'NOT qualified'}"]
    return problems, notes
