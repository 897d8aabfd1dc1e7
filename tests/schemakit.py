"""The published results schema (schemas/results.schema.json), for checking documents."""

from __future__ import annotations

import json
from functools import lru_cache
from pathlib import Path

import jsonschema

from compiler.resources import schema_path


@lru_cache(maxsize=1)
def validator() -> jsonschema.Draft202012Validator:
    schema = json.loads(schema_path("results.schema.json").read_text(encoding="utf-8"))
    return jsonschema.Draft202012Validator(schema)


def schema_errors(document: dict) -> list[str]:
    """Each way ``document`` departs from the schema, as "PATH: message"."""
    errors = sorted(validator().iter_errors(document), key=lambda e: list(map(str, e.path)))
    return [f"{'/'.join(map(str, e.path))}: {e.message}" for e in errors]


def assert_follows_schema(path: Path) -> None:
    """A results.json written by another process follows the schema."""
    document = json.loads(Path(path).read_text(encoding="utf-8"))
    assert schema_errors(document) == [], path
