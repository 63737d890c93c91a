"""Numbers as the outputs show them (messages, tables, the terminal and JUnit).

One formatting rule for every renderer and for the rule messages the checks compose:
4 significant digits, integers without a decimal point, infinities as ``inf``.
"""

from __future__ import annotations

import math

__all__ = ["fmt"]


def fmt(value: float | str | None, unit: str = "") -> str:
    """Format a measured value for messages and tables (4 significant digits)."""
    if value is None:
        return "n/a"
    if isinstance(value, str):
        return value
    if isinstance(value, bool):
        return str(value).lower()
    if math.isinf(value):
        text = "inf" if value > 0 else "-inf"
    elif isinstance(value, int) or float(value).is_integer() and abs(value) < 1e6:
        text = str(int(value))
    else:
        text = f"{value:.4g}"
    if unit in ("", "x", "%"):
        return text + unit
    return f"{text}°" if unit == "deg" else f"{text} {unit}"
