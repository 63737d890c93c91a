"""One error hierarchy for loopwarden.

User errors (bad design files, bad rule sets, bad arguments) carry *where* the problem is
and a *hint*; the CLI maps them to exit status 2. Anything else that escapes is an internal
error (exit 3).
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable


class LoopwardenError(Exception):
    """Base of every error loopwarden raises on purpose."""

    exit_code = 3


class UserError(LoopwardenError):
    """Bad input from the user: a file, a table, a key or an argument.

    Parameters
    ----------
    what : str
        What is wrong, as a sentence fragment ("expected a positive number, got -2").
    file : str, optional
        Path of the offending file.
    where : str, optional
        Table and key inside the file, e.g. ``controller[2].zero``.
    hint : str, optional
        What to do about it (a did-you-mean, the allowed values).
    """

    exit_code = 2

    def __init__(
        self, what: str, *, file: str | None = None, where: str | None = None,
        hint: str | None = None,
    ) -> None:
        super().__init__(what)
        self.what = what
        self.file = file
        self.where = where
        self.hint = hint

    def __str__(self) -> str:
        place = ": ".join(p for p in (self.file, self.where) if p)
        text = f"{place}: {self.what}" if place else self.what
        if self.hint:
            text += f" ({self.hint})"
        return text


class DesignError(UserError, ValueError):
    """A design file that cannot be read or does not describe a valid loop."""


class RuleSetError(UserError, ValueError):
    """A rule-set file that cannot be read or names unknown checks."""


class UsageError(UserError):
    """Bad command-line arguments or an output path that cannot be used."""


class SigningError(UserError):
    """A key that cannot be loaded or a PDF that cannot be signed."""


class AnalysisError(LoopwardenError, ArithmeticError):
    """A computation that could not be completed (reported as an ``error`` finding)."""


class IllPosedLoopError(AnalysisError):
    """1 + L vanishes at infinity (or identically): the loop equations have no solution.

    It is the design's fault, not the tool's: :func:`loopwarden.analysis.analyze_variant`
    turns it into a :class:`DesignError` naming the plant variant.
    """


def did_you_mean(word: str, choices: Iterable[str]) -> str | None:
    """Return ``"did you mean 'x'?"`` for the closest choice, or None when nothing is close."""
    match = difflib.get_close_matches(word, list(choices), n=1, cutoff=0.6)
    return f"did you mean '{match[0]}'?" if match else None
