"""Find the shipped schemas and templates, from a checkout or from an installed wheel.

In a wheel they are package data at ``compiler/schemas`` and ``compiler/templates``; in a
checkout (or an editable install) they are the top-level ``schemas/`` and ``templates/``.
"""

from __future__ import annotations

from pathlib import Path

_PACKAGE = Path(__file__).resolve().parent


def _folder(name: str) -> Path:
    installed = _PACKAGE / name
    return installed if installed.is_dir() else _PACKAGE.parent / name


def schema_path(name: str) -> Path:
    return _folder("schemas") / name


def templates_dir() -> Path:
    return _folder("templates")


def reference_path(name: str) -> Path:
    """A file of the shipped reference data (`prespec qualify`'s certified problems)."""
    return _folder("reference") / name
