"""Review renderers: one small module per output format, listed in :data:`RENDERERS`.

Every renderer module has ``render(review) -> bytes`` and ``SUFFIX``; renderers read the
:class:`~loopwarden.report.review.Review` only — they never recompute or re-filter the
analysis.  The PDF renderer (``report.pdf``) takes embedded files as well and is called
separately by the review command.
"""

from __future__ import annotations

import importlib
from types import ModuleType

#: format name → renderer module (imported on first use).
RENDERERS: dict[str, str] = {
    "json": "loopwarden.report.json_out",
    "junit": "loopwarden.report.junit",
    "markdown": "loopwarden.report.markdown",
    "terminal": "loopwarden.report.terminal",
}

#: The cautions every output carries (DESIGN.md §7).
CAUTIONS = (
    "This review analyses the linear models it was given. It does not replace tests on "
    "the hardware, the applicable functional-safety and industry standards, or the "
    "judgement of a qualified engineer; where a controller can hurt people or damage "
    "equipment, local codes and licensed practice decide."
)


def renderer(name: str) -> ModuleType:
    """The renderer module for a format name (``KeyError`` for an unknown format)."""
    return importlib.import_module(RENDERERS[name])
