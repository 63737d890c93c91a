"""Numbers as the outputs show them (messages, tables, the terminal and JUnit).

One formatting rule for every renderer and for the rule messages the checks compose:
4 significant digits, integers without a decimal point, infinities as ``inf``.  A leaf
module (it imports nothing of loopwarden), so the rule code may use it too.
"""

from __future__ import annotations

import math

__all__ = ["fmt", "root_text"]


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


def root_text(z: complex) -> str:
    """A pole or zero for messages: ``-0.1228`` on the real axis, else ``-1+2j``."""
    if abs(z.imag) < 1e-12:
        return fmt(z.real)
    return f"{z.real:.4g}{'+' if z.imag >= 0 else '-'}{abs(z.imag):.4g}j"
