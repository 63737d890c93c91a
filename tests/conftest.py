"""Session hooks shared by every test module.

Every review JSON a test renders in this process (``json_out.to_dict``, which
``json_out.render`` and the ``review`` and ``batch`` commands go through) is checked
against the shipped JSON Schema as it is made: a test that produces evidence the schema
rejects fails there, with the offending path.  The count is shown at the end of the run.
Reviews made in other processes (batch workers, which start by ``spawn``; commands run as
a subprocess) are not seen here: tests/test_schema.py validates a batch's files itself.
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

import jsonschema
import pytest

from loopwarden import schema
from loopwarden.report import json_out

_VALIDATED = [0]


class SchemaViolation(BaseException):
    """A rendered review JSON that the schema rejects (BaseException: the commands'
    error boundary must not turn it into an exit status)."""


def schema_validator() -> jsonschema.Draft202012Validator:
    return jsonschema.Draft202012Validator(
        schema.load(), format_checker=jsonschema.Draft202012Validator.FORMAT_CHECKER)


@pytest.fixture(autouse=True, scope="session")
def _review_json_matches_the_schema() -> Iterator[None]:
    validator = schema_validator()
    original = json_out.to_dict

    def checked(review: Any) -> dict[str, Any]:
        doc = original(review)
        errors = list(validator.iter_errors(doc))
        if errors:
            where = "; ".join(f"/{'/'.join(map(str, e.absolute_path))}: {e.message[:200]}"
                              for e in errors[:5])
            raise SchemaViolation(f"review JSON does not match the schema: {where}")
        _VALIDATED[0] += 1
        return doc

    json_out.to_dict = checked          # type: ignore[assignment]
    try:
        yield
    finally:
        json_out.to_dict = original     # type: ignore[assignment]


def pytest_terminal_summary(terminalreporter: Any) -> None:
    if _VALIDATED[0]:
        terminalreporter.write_line(
            f"{_VALIDATED[0]} review JSON documents matched the shipped schema")
