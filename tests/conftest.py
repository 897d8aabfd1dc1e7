"""Every results document the suite writes follows the published schema.

``compiler.results.to_bytes`` is what turns a results document into results.json's bytes
(the run's and the rehearsal's bundles, and verify --data's re-run), so it is wrapped for the
whole session: a document that departs from schemas/results.schema.json fails the test that
made it. Runs in a process of their own check their results.json with
``schemakit.assert_follows_schema``.
"""

from __future__ import annotations

import pytest
from schemakit import schema_errors

from compiler import results


@pytest.fixture(autouse=True, scope="session")
def _every_results_document_follows_the_schema():
    written = results.to_bytes

    def checked(document: dict) -> bytes:
        errors = schema_errors(document)
        assert errors == [], "results.json departs from its schema:\n" + "\n".join(errors)
        return written(document)

    results.to_bytes = checked
    yield
    results.to_bytes = written
