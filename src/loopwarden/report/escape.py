"""Text from the inputs made safe for each output format.

Names, messages and ids come from files the user (or someone else) wrote: a design named
``"\\x1b[2J"`` must not clear the reviewer's terminal, one named ``"<script>"`` must not
run in a Markdown viewer, and a control character must not make the JUnit XML unreadable.

- :func:`for_terminal`: ANSI/VT escape sequences and every other C0/C1 control (except
  newline and tab) and the bidirectional-override characters are shown as visible
  escapes (``\\x1b``, ``\\u202e``), never sent raw.
- :func:`for_xml`: characters XML 1.0 forbids (C0 controls other than tab, newline and
  carriage return; lone surrogates; U+FFFE, U+FFFF), and DEL, C1 controls and bidi
  overrides (allowed, but terminal controls where CI prints them), are shown the same
  visible way, so the document always parses.
- :func:`for_markdown`: as for the terminal, then the characters Markdown or embedded HTML
  would interpret are backslash-escaped or written as entities.
"""

from __future__ import annotations

import re

__all__ = ["for_markdown", "for_terminal", "for_xml"]

#: C0 controls except tab and newline, DEL, C1 controls; the bidi embeddings, overrides and
#: isolates (text that displays in another order than it reads); line/paragraph separators.
_TERMINAL_UNSAFE = re.compile("[\x00-\x08\x0b-\x1f\x7f-\x9f\u2028\u2029\u202a-\u202e"
                              "\u2066-\u2069]")
#: Not allowed anywhere in an XML 1.0 document.
#: Not allowed anywhere in an XML 1.0 document, or (DEL, C1) allowed but "discouraged" and
#: control sequences to a terminal that shows the text; bidi overrides as for the terminal.
_XML_UNSAFE = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f\u202a-\u202e\u2066-\u2069"
                         "\ud800-\udfff\ufffe\uffff]")
#: Markdown/HTML syntax characters that change how a table cell or heading renders.
#: ``_`` only where it could start or end emphasis (CommonMark ignores it inside a word).
_MARKDOWN_SPECIAL = re.compile(r"([\\`*\[\]~]|(?<![A-Za-z0-9])_|_(?![A-Za-z0-9]))")
_HTML = {"&": "&amp;", "<": "&lt;", ">": "&gt;"}


def _visible(match: re.Match[str]) -> str:
    code = ord(match.group(0))
    return f"\\x{code:02x}" if code < 0x100 else f"\\u{code:04x}"


def for_terminal(text: str) -> str:
    """``text`` with every control character (but newline and tab) shown as an escape."""
    return _TERMINAL_UNSAFE.sub(_visible, text)


def for_xml(text: str) -> str:
    """``text`` with every character XML 1.0 forbids shown as an escape (always parses)."""
    return _XML_UNSAFE.sub(_visible, text)


def for_markdown(text: str, *, cell: bool = True) -> str:
    """``text`` for a Markdown table cell (or, ``cell=False``, a line): syntax escaped.

    ``<``, ``>`` and ``&`` become HTML entities (raw HTML never passes through);
    emphasis, code, link and strike-through punctuation gets a backslash, and so does
    ``|`` in a table cell; a newline becomes a space (one cell, one line).
    """
    text = for_terminal(text).replace("\r", " ").replace("\n", " ").replace("\t", " ")
    text = _MARKDOWN_SPECIAL.sub(r"\\\1", text)
    if cell:
        text = text.replace("|", "\\|")
    return "".join(_HTML.get(c, c) for c in text)
