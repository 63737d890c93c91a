"""The JSON Schema (draft 2020-12) of the review evidence, shipped as package data.

``review.schema.json`` describes what :mod:`loopwarden.report.json_out` writes
(``schema = "loopwarden-review/1"``); ``loopwarden schema`` prints it.
"""

from __future__ import annotations

import importlib.resources
import json
from typing import Any

__all__ = ["FILE", "load", "text"]

FILE = "review.schema.json"


def text() -> str:
    """The schema file exactly as shipped."""
    return importlib.resources.files(__name__).joinpath(FILE).read_text(encoding="utf-8")


def load() -> dict[str, Any]:
    """The schema as a dict (for a validator)."""
    return dict(json.loads(text()))
