"""Reading checked values and transfer-function forms (tf / zpk / ss) from TOML tables.

Every value read from a design file goes through :class:`Table`, which knows the file, the
table's place in it (``controller[2]``) and whether frequencies are written in hertz.  Each
check raises :class:`~loopwarden.errors.DesignError` naming the exact key, what was expected
and, where possible, a hint.

Forms
-----
``tf = { num = [...], den = [...] }``
    Polynomial coefficients in descending powers of the Laplace variable s (rad/s), never
    converted, whatever the design's frequency unit.
``zpk = { zeros = [...], poles = [...], gain = k }``
    ``k · Π(s − z) / Π(s − p)``.  A real root is a number; a complex pair is written once as
    ``[re, im]`` with ``im > 0`` and stands for ``re ± j·im``.  With ``frequency_unit = "hz"``
    every root is multiplied by 2π on reading; ``gain`` still multiplies the monic factors of
    the converted roots.  ``zeros`` may be omitted when there are none.
``ss = { a = [[...]], b = [[...]], c = [[...]], d = ... }``
    Single-input single-output state space in s (rad/s), never converted: ``a`` is n×n,
    ``b`` n×1, ``c`` 1×n, ``d`` a number or ``[[d]]``.

Positions inside arrays are 1-based in messages (``plant.zpk.poles[2]``), like
``controller[2]``.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import DesignError, did_you_mean
from ..lti import Zpk
from .bounds import (
    MAX_ROOT_RAD_S,
    MIN_ROOT_RAD_S,
    check_gain,
    check_roots,
    number_range_error,
)

TWO_PI = 2.0 * math.pi

#: The transfer-function forms a plant, variant or sensor may use (exactly one of them).
FORMS = ("tf", "zpk", "ss")

_MISSING: Any = object()


def _kind(value: Any) -> str:
    """A short, engineer-readable name for the TOML type of ``value``."""
    if isinstance(value, bool):
        return f"a boolean ({str(value).lower()})"
    if isinstance(value, str):
        return f"a string ({value!r})"
    if isinstance(value, dict):
        return "a table"
    if isinstance(value, list):
        return "an array"
    if isinstance(value, (int, float)):
        return f"the number {value!r}"
    return f"a {type(value).__name__} ({value})"


def _count(n: int, one: str, many: str | None = None) -> str:
    return f"{n} {one if n == 1 else (many or one + 's')}"


@dataclass(frozen=True)
class Table:
    """A TOML table being validated: its data, its place in the file and the file's unit.

    Parameters
    ----------
    data : Mapping
        The table as parsed by tomllib.
    where : str
        Its place in the file (``""`` for the top level, ``controller[2]``, ``plant.zpk``).
    file : str
        Path of the design file, for messages.
    hz : bool
        True when the design's ``frequency_unit`` is ``"hz"``: frequencies read through
        :meth:`frequency` and roots read through :func:`read_form` are multiplied by 2π.
    """

    data: Mapping[str, Any]
    where: str
    file: str
    hz: bool = False

    # ------------------------------------------------------------------ places and errors
    def at(self, key: str | int) -> str:
        """The place of ``key`` (a key name, or a 0-based array index shown 1-based)."""
        if isinstance(key, int):
            return f"{self.where}[{key + 1}]"
        return f"{self.where}.{key}" if self.where else key

    def error(self, key: str | int | None, what: str, hint: str | None = None) -> DesignError:
        where = self.where if key is None else self.at(key)
        return DesignError(what, file=self.file, where=where or None, hint=hint)

    @property
    def unit(self) -> str:
        """How frequencies are written in this file, for messages."""
        return "Hz" if self.hz else "rad/s"

    def sub(self, key: str, data: Mapping[str, Any]) -> Table:
        return Table(data, self.at(key), self.file, self.hz)

    def has(self, key: str) -> bool:
        return key in self.data

    # ------------------------------------------------------------------ keys
    def check_keys(self, allowed: Iterable[str], required: Iterable[str] = (),
                   hints: Mapping[str, str] | None = None) -> None:
        """Reject unknown keys (with a did-you-mean) and report the first missing one.

        ``hints`` gives a special hint for a known-wrong key (e.g. ``frd``); the key is still
        rejected.
        """
        allowed = tuple(allowed)
        hints = hints or {}
        for key in self.data:
            if key in allowed:
                continue
            if key in hints:
                raise self.error(key, f"'{key}' is not allowed here", hints[key])
            hint = did_you_mean(key, allowed) or (
                "allowed keys: " + ", ".join(allowed) if allowed else "this table takes no keys")
            noun = "table" if isinstance(self.data[key], dict) else "key"
            raise self.error(key, f"unknown {noun} '{key}'", hint)
        for key in required:
            if key not in self.data:
                raise self.error(key, f"missing required key '{key}'")

    # ------------------------------------------------------------------ scalars
    def number(self, key: str, *, default: Any = _MISSING, minimum: float | None = None,
               above: float | None = None, below: float | None = None,
               maximum: float | None = None, nonzero: bool = False, unit: str = "") -> float:
        """A finite real number, optionally bounded.

        ``minimum``/``maximum`` are inclusive bounds, ``above``/``below`` exclusive ones.
        ``unit`` is only used in messages.
        """
        if key not in self.data:
            if default is _MISSING:
                raise self.error(key, f"missing required key '{key}'")
            return default
        value = check_number(self.data[key], self.file, self.at(key))
        u = f" {unit}" if unit else ""
        if above is not None and not value > above:
            words = "a positive number" if above == 0 else f"a number above {above:g}{u}"
            raise self.error(key, f"expected {words}, got {value:g}{u}")
        if minimum is not None and value < minimum:
            words = "a number ≥ 0" if minimum == 0 else f"a number ≥ {minimum:g}{u}"
            raise self.error(key, f"expected {words}, got {value:g}{u}")
        if below is not None and not value < below:
            raise self.error(key, f"expected a number below {below:g}{u}, got {value:g}{u}")
        if maximum is not None and value > maximum:
            raise self.error(key, f"expected a number ≤ {maximum:g}{u}, got {value:g}{u}")
        if nonzero and value == 0:
            raise self.error(key, "expected a nonzero number, got 0")
        return value

    def frequency(self, key: str, *, default: Any = _MISSING) -> float:
        """A positive frequency, returned in rad/s (converted from Hz when the file says so)."""
        if key not in self.data and default is not _MISSING:
            return default
        value = self.number(key, above=0.0, unit=self.unit)
        w = value * TWO_PI if self.hz else value
        if not MIN_ROOT_RAD_S <= w <= MAX_ROOT_RAD_S:
            scale = 1.0 / TWO_PI if self.hz else 1.0
            raise self.error(key, f"expected a frequency within {MIN_ROOT_RAD_S * scale:g} .. "
                             f"{MAX_ROOT_RAD_S * scale:g} {self.unit}, got {value:g} "
                             f"{self.unit}", "README.md lists the ranges the analysis can "
                                             "carry")
        return w

    def integer(self, key: str, *, choices: tuple[int, ...], default: int) -> int:
        if key not in self.data:
            return default
        value = self.data[key]
        if isinstance(value, bool) or not isinstance(value, int):
            raise self.error(key, f"expected an integer, got {_kind(value)}",
                             "allowed values: " + ", ".join(map(str, choices)))
        if value not in choices:
            raise self.error(key, f"expected one of {', '.join(map(str, choices))}, got {value}")
        return value

    def string(self, key: str, *, default: Any = _MISSING, nonempty: bool = True) -> str:
        if key not in self.data:
            if default is _MISSING:
                raise self.error(key, f"missing required key '{key}'")
            return default
        value = self.data[key]
        if not isinstance(value, str):
            raise self.error(key, f"expected a string, got {_kind(value)}",
                             'write text in double quotes, e.g. name = "heavy load"')
        if nonempty and not value.strip():
            raise self.error(key, "expected a non-empty string")
        return value

    def choice(self, key: str, choices: tuple[str, ...], *, default: Any = _MISSING) -> str:
        value = self.string(key, default=default)
        if value not in choices:
            hint = did_you_mean(value, choices) or "allowed values: " + ", ".join(
                f'"{c}"' for c in choices)
            raise self.error(key, f"unknown value {value!r}", hint)
        return value

    def table(self, key: str) -> Table:
        value = self.data[key]
        if not isinstance(value, dict):
            raise self.error(key, f"expected a table, got {_kind(value)}")
        return self.sub(key, value)


# ---------------------------------------------------------------------- free-standing checks
def check_number(value: Any, file: str, where: str) -> float:
    """``value`` as a finite float, or a DesignError at ``where``."""
    if isinstance(value, bool):
        raise DesignError(f"expected a number, got {_kind(value)}", file=file, where=where)
    if isinstance(value, str):
        raise DesignError(f"expected a number, got {_kind(value)}", file=file, where=where,
                          hint="write numbers without quotes")
    if not isinstance(value, (int, float)):
        raise DesignError(f"expected a number, got {_kind(value)}", file=file, where=where)
    try:
        out = float(value)
    except OverflowError:               # an integer beyond any float
        out = math.inf
    if not math.isfinite(out):
        raise DesignError(f"expected a finite number, got {value!r}", file=file, where=where,
                          hint="inf and nan are valid TOML but not valid model data")
    why = number_range_error(out)
    if why is not None:
        raise DesignError(why, file=file, where=where,
                          hint="README.md lists the ranges the analysis can carry")
    return out


def _array(t: Table, key: str) -> list[Any]:
    value = t.data[key]
    if not isinstance(value, list):
        raise t.error(key, f"expected an array, got {_kind(value)}")
    return value


def read_roots(t: Table, key: str) -> list[complex]:
    """Roots as written (a number, or ``[re, im]`` with im > 0 for a pair), in rad/s."""
    scale = TWO_PI if t.hz else 1.0
    out: list[complex] = []
    arr = t.sub(key, {})
    for i, item in enumerate(_array(t, key)):
        where = arr.at(i)
        if isinstance(item, list):
            if len(item) != 2:
                raise DesignError(
                    f"expected a complex pair [re, im], got an array of {len(item)} entries",
                    file=t.file, where=where,
                    hint="a real root is a plain number; a pair re ± j·im is [re, im]")
            re = check_number(item[0], t.file, f"{where}[1]")
            im = check_number(item[1], t.file, f"{where}[2]")
            if im <= 0:
                hint = ("write a real root as a plain number" if im == 0
                        else "write each pair once, with im > 0")
                raise DesignError(f"expected im > 0 in the pair [re, im], got im = {im:g}",
                                  file=t.file, where=where, hint=hint)
            out.extend([complex(re, im) * scale, complex(re, -im) * scale])
        else:
            out.append(complex(check_number(item, t.file, where)) * scale)
        check_roots(out[-1:], file=t.file, where=where, what="a root",
                    unit_scale=1.0 / scale, unit=t.unit)
    return out


def read_poly(t: Table, key: str) -> np.ndarray:
    """Polynomial coefficients (descending powers of s), leading zeros dropped."""
    arr = t.sub(key, {})
    items = _array(t, key)
    coeffs = np.array([check_number(v, t.file, arr.at(i)) for i, v in enumerate(items)],
                      dtype=float)
    if coeffs.size == 0:
        raise t.error(key, "expected at least one coefficient, got an empty array")
    coeffs = np.trim_zeros(coeffs, "f")
    if coeffs.size == 0:
        raise t.error(key, "every coefficient is zero", "the polynomial must not vanish")
    return coeffs


def read_matrix(t: Table, key: str) -> np.ndarray:
    """A matrix written as an array of rows (all rows the same length)."""
    items = _array(t, key)
    arr = t.sub(key, {})
    if not items:
        raise t.error(key, "expected a matrix (an array of rows), got an empty array")
    rows: list[list[float]] = []
    for i, row in enumerate(items):
        if not isinstance(row, list):
            raise DesignError(f"expected a row (an array of numbers), got {_kind(row)}",
                              file=t.file, where=arr.at(i),
                              hint="write matrices as arrays of rows, e.g. [[0, 1], [-2, -3]]")
        rows.append([check_number(v, t.file, f"{arr.at(i)}[{j + 1}]")
                     for j, v in enumerate(row)])
        if len(rows[-1]) != len(rows[0]):
            raise DesignError(f"row {i + 1} has {_count(len(rows[-1]), 'entry', 'entries')} "
                              f"but row 1 has {len(rows[0])}", file=t.file, where=arr.at(i))
    if not rows[0]:
        raise t.error(key, "expected a matrix with at least one column, got empty rows")
    return np.array(rows, dtype=float)


# ---------------------------------------------------------------------- the three forms
def _tf(t: Table) -> Zpk:
    t.check_keys(("num", "den"), required=("num", "den"))
    num = read_poly(t, "num")
    den = read_poly(t, "den")
    if num.size > den.size:
        raise t.error(None, f"improper: numerator degree {num.size - 1} exceeds denominator "
                      f"degree {den.size - 1}", "a physical block must be proper")
    model = _factored(t, "den", lambda: Zpk.from_tf(num, den))
    check_roots(model.poles, file=t.file, where=t.at("den"), what="a pole")
    check_roots(model.zeros, file=t.file, where=t.at("num"), what="a zero")
    check_gain(model.gain, file=t.file, where=t.at("num"))
    return model


def _factored(t: Table, key: str, build: Callable[[], Zpk]) -> Zpk:
    """``build()``, with a numerical failure to factor reported at ``key``."""
    try:
        with np.errstate(all="ignore"):
            return build()
    except (ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:
        raise t.error(key, f"cannot factor the model ({exc})",
                      "the coefficients are too large or too badly scaled") from None


def _zpk(t: Table) -> Zpk:
    t.check_keys(("zeros", "poles", "gain"), required=("poles", "gain"))
    zeros = read_roots(t, "zeros") if t.has("zeros") else []
    poles = read_roots(t, "poles")
    gain = t.number("gain", nonzero=True)
    if len(zeros) > len(poles):
        raise t.error(None, f"improper: {_count(len(zeros), 'zero')} but only "
                      f"{_count(len(poles), 'pole')}, a complex pair counting twice",
                      "a physical block must be proper")
    check_gain(gain, file=t.file, where=t.at("gain"))
    return Zpk(np.array(zeros, dtype=complex), np.array(poles, dtype=complex), gain)


def _ss(t: Table) -> Zpk:
    t.check_keys(("a", "b", "c", "d"), required=("a", "b", "c", "d"))
    a = read_matrix(t, "a")
    n = a.shape[0]
    if a.shape != (n, n):
        raise t.error("a", f"expected a square matrix, got {a.shape[0]}×{a.shape[1]}")
    b = read_matrix(t, "b")
    if b.shape[0] != n:
        raise t.error("b", f"expected {n} rows (one per state), got {b.shape[0]}")
    if b.shape[1] != 1:
        raise t.error("b", f"expected one column (single input), got {b.shape[1]}",
                      "write b as a column, e.g. [[0], [1]]")
    c = read_matrix(t, "c")
    if c.shape[0] != 1:
        raise t.error("c", f"expected one row (single output), got {c.shape[0]}",
                      "write c as one row, e.g. [[1, 0]]")
    if c.shape[1] != n:
        raise t.error("c", f"expected {n} columns (one per state), got {c.shape[1]}")
    if isinstance(t.data["d"], list):
        d_mat = read_matrix(t, "d")
        if d_mat.shape != (1, 1):
            raise t.error("d", f"expected a 1×1 matrix or a number, got "
                          f"{d_mat.shape[0]}×{d_mat.shape[1]}")
        d = float(d_mat[0, 0])
    else:
        d = t.number("d")
    model = _factored(t, "a", lambda: Zpk.from_ss(a, b, c, d))
    if model.gain == 0:
        raise t.error(None, "the state-space model has a zero transfer function",
                      "check b and c: the input does not reach the output")
    check_roots(model.poles, file=t.file, where=t.at("a"), what="a pole")
    check_roots(model.zeros, file=t.file, where=t.at("a"), what="a zero")
    check_gain(model.gain, file=t.file, where=t.at("c"))
    return model


_READERS = {"tf": _tf, "zpk": _zpk, "ss": _ss}


def read_form(t: Table, label: str) -> tuple[Zpk, str]:
    """Read the one transfer-function form of a plant, variant or sensor table.

    Returns the model (labelled ``label``) and the form's name.  The table's other keys are
    checked by the caller.
    """
    present = [f for f in FORMS if t.has(f)]
    if not present:
        raise t.error(None, "no transfer function given",
                      "give exactly one of tf = {...}, zpk = {...} or ss = {...}")
    if len(present) > 1:
        raise t.error(present[1], f"both '{present[0]}' and '{present[1]}' are given",
                      "give exactly one of tf, zpk or ss")
    form = present[0]
    model = _READERS[form](t.table(form))
    return Zpk(model.zeros, model.poles, model.gain, label), form


def read_direct_form(t: Table, form: str, label: str) -> Zpk:
    """A tf or zpk whose keys sit directly in ``t`` (controller stages of type tf / zpk)."""
    model = _READERS[form](t)
    return Zpk(model.zeros, model.poles, model.gain, label)
