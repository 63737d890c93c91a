"""Measured frequency-response plants: ``[plant] frd = { file = "sweep.csv", ... }``.

The CSV file holds one measured point per row under a header row naming the columns
``frequency``, ``magnitude`` and ``phase`` (any order, case-insensitive; other columns are
ignored).  Lines starting with ``#`` are comments, blank lines are skipped.  The file is
read relative to the design file and must stay inside the design file's folder tree
(symlinks resolved, ``..`` escapes and outside absolute paths refused).

Units, from the ``frd`` table: ``frequency_unit`` ``"hz"`` or ``"rad/s"`` (default: the
design's ``frequency_unit``), ``magnitude_unit`` ``"db"`` or ``"abs"`` and ``phase_unit``
``"deg"`` or ``"rad"`` (both required: a wrong guess would silently move every margin).

Between measured points the response is interpolated in log-frequency: a cubic spline
(not-a-knot) through the magnitude in dB and one through the unwrapped phase, each against
ln ω, exact at every measured point (successive points must differ by less than 180° in
phase, which any sweep dense enough to analyse satisfies).  For a smooth response it errs
far less than straight lines between the points (about 0.007 dB and 0.03° against 0.17 dB
and 0.7° on a sweep of 115 points per decade across a resonance with ζ = 0.05).  Nothing
is extrapolated: outside the measured range the plant is unknown.

Every problem is a :class:`~loopwarden.errors.DesignError` naming the CSV file, the line
and the column.
"""

from __future__ import annotations

import csv
import hashlib
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from numpy.typing import ArrayLike

from ..errors import DesignError
from ..input_files import read_input
from ..lti import ComplexArray, FloatArray
from .forms import TWO_PI, Table

__all__ = ["MIN_POINTS", "MeasuredPlant", "parse_frd_csv", "read_frd"]

#: Fewest measured points accepted: fewer cannot resolve a crossover and its neighbourhood.
MIN_POINTS = 10
_COLUMNS = ("frequency", "magnitude", "phase")
_FRD_KEYS = ("file", "frequency_unit", "magnitude_unit", "phase_unit")


@dataclass(frozen=True, eq=False)
class MeasuredPlant:
    """A plant known only by its measured frequency response on a finite range.

    ``frequency_rad_s`` ascending (rad/s); ``log_magnitude`` is ``ln|P|``; ``phase_rad``
    the unwrapped phase (rad).  ``unstable_poles`` and ``integrators`` are what the design
    declares about the plant (right-half-plane poles and poles at s = 0): a frequency
    response alone cannot tell them.
    """

    file: str                                  # as written in the design
    path: str                                  # as read (inside the design's folder tree)
    sha256: str                                # of the CSV bytes
    frequency_rad_s: FloatArray = field(repr=False)
    log_magnitude: FloatArray = field(repr=False)
    phase_rad: FloatArray = field(repr=False)
    unstable_poles: int = 0
    integrators: int = 0

    def __post_init__(self) -> None:
        u = np.log(self.frequency_rad_s)
        # Imported here: scipy.interpolate costs ~0.25 s and most designs have no sweep.
        from scipy.interpolate import CubicSpline

        object.__setattr__(self, "_splines", (CubicSpline(u, self.log_magnitude),
                                              CubicSpline(u, self.phase_rad)))

    @property
    def frequency_min_rad_s(self) -> float:
        return float(self.frequency_rad_s[0])

    @property
    def frequency_max_rad_s(self) -> float:
        return float(self.frequency_rad_s[-1])

    @property
    def points(self) -> int:
        return int(self.frequency_rad_s.size)

    def interpolate(self, w_rad_s: ArrayLike, *, linear: bool = False
                    ) -> tuple[FloatArray, FloatArray]:
        """``(ln|P|, ∠P)`` at ω inside the measured range (splines in ln ω).

        ``linear`` gives straight lines between the points instead, for judging how much
        the interpolation itself contributes (the two differ where the sweep is coarse).

        Raises
        ------
        ValueError
            For a frequency outside the measured range (nothing is extrapolated).
        """
        w = np.asarray(w_rad_s, dtype=float)
        lo, hi = self.frequency_min_rad_s, self.frequency_max_rad_s
        if w.size and (np.min(w) < lo * (1 - 1e-12) or np.max(w) > hi * (1 + 1e-12)):
            raise ValueError(f"frequency outside the measured range [{lo:g}, {hi:g}] rad/s")
        u = np.log(np.clip(w, lo, hi))
        if linear:
            grid = np.log(self.frequency_rad_s)
            return (np.interp(u, grid, self.log_magnitude), np.interp(u, grid, self.phase_rad))
        lm, ph = self._splines           # type: ignore[attr-defined]
        return lm(u), ph(u)

    def response(self, w_rad_s: ArrayLike) -> ComplexArray:
        """Interpolated ``P(jω)`` inside the measured range."""
        lm, ph = self.interpolate(w_rad_s)
        return np.exp(lm + 1j * ph)


# --------------------------------------------------------------------------- reading
def _unit(t: Table, key: str, choices: tuple[str, ...], default: str | None = None) -> str:
    """A unit name, either case (``"dB"``, ``"Hz"``)."""
    written = t.string(key) if default is None else t.string(key, default=default)
    if written.lower() not in choices:
        raise t.error(key, f"unknown unit {written!r}",
                      "allowed values: " + ", ".join(f'"{c}"' for c in choices))
    return written.lower()


def _confined(design_path: str, written: str, t: Table) -> Path:
    """The CSV path, resolved, refused when it leaves the design file's folder tree."""
    if "\0" in written:
        raise t.error("file", "the measurement file name contains a NUL byte",
                      "a file name cannot contain NUL")
    base = Path(design_path).resolve().parent
    candidate = Path(written)
    target = (candidate if candidate.is_absolute() else base / candidate).resolve()
    if not target.is_relative_to(base):
        raise t.error("file", f"the measurement file {written!r} lies outside the design "
                      f"file's folder ({base})",
                      "keep the sweep beside the design file or in a folder below it")
    return target


def read_frd(t: Table, design_path: str, *, unstable_poles: int, integrators: int
             ) -> MeasuredPlant:
    """Read ``frd = { file, frequency_unit, magnitude_unit, phase_unit }`` and its CSV.

    ``t`` is the ``frd`` table; ``design_path`` the design file (the CSV is relative to
    its folder).  Frequencies become rad/s.
    """
    t.check_keys(_FRD_KEYS, required=("file", "magnitude_unit", "phase_unit"))
    written = t.string("file")
    f_unit = _unit(t, "frequency_unit", ("hz", "rad/s"), "hz" if t.hz else "rad/s")
    m_unit = _unit(t, "magnitude_unit", ("db", "abs"))
    p_unit = _unit(t, "phase_unit", ("deg", "rad"))
    path = _confined(design_path, written, t)
    shown = str(Path(design_path).parent / written)
    try:
        raw = read_input(path, DesignError, "measurement file", shown=shown,
                         hint_missing=f"{t.at('file')} is read relative to the design "
                                      "file")
    except DesignError as exc:
        # named as the design file's key, with the CSV it names: "d.toml: plant.frd.file:
        # sweep.csv: is a named pipe ..."
        raise DesignError(f"{exc.file}: {exc.what}" if exc.file else exc.what,
                          file=design_path, where=t.at("file"), hint=exc.hint) from None
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise DesignError(f"not UTF-8 text (byte {exc.start + 1})", file=shown) from None
    w, lm, ph = parse_frd_csv(text, shown, frequency_unit=f_unit, magnitude_unit=m_unit,
                              phase_unit=p_unit)
    return MeasuredPlant(file=written, path=str(path), sha256=hashlib.sha256(raw).hexdigest(),
                         frequency_rad_s=w, log_magnitude=lm, phase_rad=ph,
                         unstable_poles=unstable_poles, integrators=integrators)


def parse_frd_csv(text: str, file: str, *, frequency_unit: str, magnitude_unit: str,
                  phase_unit: str) -> tuple[FloatArray, FloatArray, FloatArray]:
    """``(ω [rad/s], ln|P|, unwrapped ∠P [rad])`` from the CSV text.

    Raises
    ------
    DesignError
        Missing header or column, a cell that is not a finite number, a frequency that is
        not positive or not increasing, a magnitude that is not positive (``abs``), fewer
        than :data:`MIN_POINTS` rows; ``where`` gives the line and column.
    """
    lines = text.splitlines()
    rows = [(i + 1, line) for i, line in enumerate(lines)
            if line.strip() and not line.lstrip().startswith("#")]
    if not rows:
        raise DesignError("no header row and no data", file=file,
                          hint="the first line that is not a # comment names the columns: "
                               "frequency,magnitude,phase")
    header_line, header_text = rows[0]
    header = [h.strip().lower() for h in next(csv.reader([header_text]))]
    cols: dict[str, int] = {}
    for name in _COLUMNS:
        if name not in header:
            raise DesignError(f"missing column '{name}' in the header row", file=file,
                              where=f"line {header_line}",
                              hint="the header must name frequency, magnitude and phase, "
                                   f"got {', '.join(header) or 'nothing'}")
        cols[name] = header.index(name)
    values: dict[str, list[float]] = {name: [] for name in _COLUMNS}
    numbers: list[int] = []
    for line_no, line in rows[1:]:
        cells = next(csv.reader([line]))
        for name in _COLUMNS:
            j = cols[name]
            where = f"line {line_no}, column {j + 1} ({name})"
            if j >= len(cells) or not cells[j].strip():
                raise DesignError(f"missing {name} value", file=file, where=where)
            try:
                x = float(cells[j])
            except ValueError:
                raise DesignError(f"expected a number, got {cells[j].strip()!r}", file=file,
                                  where=where) from None
            if not math.isfinite(x):
                raise DesignError(f"expected a finite number, got {cells[j].strip()!r}",
                                  file=file, where=where,
                                  hint="remove or re-measure the point")
            values[name].append(x)
        numbers.append(line_no)
        _check_row(values, numbers, cols, file, magnitude_unit)
    n = len(numbers)
    if n < MIN_POINTS:
        raise DesignError(f"only {n} measured point{'s' if n != 1 else ''}; at least "
                          f"{MIN_POINTS} are needed", file=file,
                          where=f"line {numbers[-1]}" if numbers else f"line {header_line}",
                          hint="measure more frequencies, densest around the crossover")
    w = np.array(values["frequency"]) * (TWO_PI if frequency_unit == "hz" else 1.0)
    mag = np.array(values["magnitude"])
    lm = mag * (math.log(10.0) / 20.0) if magnitude_unit == "db" else np.log(mag)
    ph = np.array(values["phase"])
    ph = np.radians(ph) if phase_unit == "deg" else ph
    return w, lm, np.unwrap(ph)


def _check_row(values: dict[str, list[float]], numbers: list[int], cols: dict[str, int],
               file: str, magnitude_unit: str) -> None:
    """The newest row: positive, strictly increasing frequency; positive |P| in abs."""
    line_no = numbers[-1]
    f = values["frequency"]

    def where(name: str) -> str:
        return f"line {line_no}, column {cols[name] + 1} ({name})"

    if f[-1] <= 0:
        raise DesignError(f"expected a positive frequency, got {f[-1]:g}", file=file,
                          where=where("frequency"))
    # The input limits (README "Input limits"): frequencies 1e-8 .. 1e8 (in the file's
    # unit), |P| within 1e-150 .. 1e150, phases within ±1e6 (degrees or radians).
    if not 1e-8 <= f[-1] <= 1e8:
        raise DesignError(f"the frequency {f[-1]:g} lies outside 1e-08 .. 1e+08",
                          file=file, where=where("frequency"))

    if len(f) > 1 and not f[-1] > f[-2]:
        raise DesignError(f"frequencies must increase: {f[-1]:g} follows {f[-2]:g} "
                          f"(line {numbers[-2]})", file=file, where=where("frequency"),
                          hint="sort the sweep by frequency and drop repeated points")
    if magnitude_unit == "abs" and values["magnitude"][-1] <= 0:
        raise DesignError(f"expected a positive magnitude, got {values['magnitude'][-1]:g}",
                          file=file, where=where("magnitude"),
                          hint='magnitudes in dB need magnitude_unit = "db"')
    m = values["magnitude"][-1]
    if (abs(m) > 3000.0 if magnitude_unit == "db" else not 1e-150 <= m <= 1e150):
        raise DesignError(f"the magnitude {m:g} lies outside |P| = 1e-150 .. 1e150 "
                          f"(±3000 dB)", file=file, where=where("magnitude"))
    if abs(values["phase"][-1]) > 1e6:
        raise DesignError(f"the phase {values['phase'][-1]:g} lies outside ±1e6",
                          file=file, where=where("phase"))
