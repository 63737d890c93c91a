"""Parts of an analysis that could not be computed: placeholders and the checks they leave
undecided.

A part of the analysis (closed-loop stability, margins, peaks, tracking, ...) that fails
numerically never stops the review and never passes silently: its result is replaced by a
placeholder of the right type and every check that reads it is listed in
``LoopAnalysis.undecided`` (check name → reason).  The rule evaluation reports those checks
as ``error`` findings (exit 1), the JSON evidence shows their figures as null, and the
reason is in ``LoopAnalysis.errors`` under the part's name.

Placeholders hold no NaN: a stability placeholder says "not stable" (``method``
``"undecided"``), margins say "no crossing" and tracking lists every constant as unknown;
only the ``undecided`` map makes them meaningful.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable, Mapping
from types import MappingProxyType
from typing import Any, TypeVar

import numpy as np

from ..errors import AnalysisError, IllPosedLoopError
from .parts import PARTS
from .results import (
    Curves,
    InternalStability,
    LoopAnalysis,
    Margins,
    Sensitivity,
    Stability,
    TimeSeries,
    Tracking,
)

__all__ = ["ALL_CHECKS", "NUMERIC_ERRORS", "PART_CHECKS", "Recorder", "empty_curves",
           "has_nan", "scrub_nan",
           "undecided_internal", "undecided_margins", "undecided_sensitivity",
           "undecided_stability", "undecided_tracking"]

T = TypeVar("T")

#: What a failing computation raises: our AnalysisError and the numerical libraries' errors
#: (overflow, singular matrices, non-finite arrays, iteration limits).
NUMERIC_ERRORS: tuple[type[BaseException], ...] = (
    AnalysisError, ArithmeticError, ValueError, RuntimeError, np.linalg.LinAlgError)

#: Part of the analysis → the checks that cannot be decided without it (the ``decides``
#: column of the table of parts).
PART_CHECKS: dict[str, tuple[str, ...]] = {p.name: p.decides for p in PARTS if p.decides}
#: Every check that reads the analysis (all but the design-wide ones).
ALL_CHECKS: tuple[str, ...] = tuple(dict.fromkeys(
    c for checks in PART_CHECKS.values() for c in checks))

_TRACKING_FIELDS = ("kp", "kv", "ka", "step_error", "ramp_error", "parabola_error")


class Recorder:
    """Runs the parts of one analysis, recording failures in ``errors`` and ``undecided``."""

    def __init__(self) -> None:
        self.errors: dict[str, str] = {}
        self.undecided: dict[str, str] = {}

    def fail(self, part: str, reason: str) -> None:
        self.errors.setdefault(part, reason)
        for check in PART_CHECKS.get(part, ()):
            self.undecided.setdefault(check, f"the {part.replace('_', ' ')} could not be "
                                             f"computed: {reason}")

    def run(self, part: str, fn: Callable[[], T], placeholder: Callable[[str], T]) -> T:
        """``fn()``, or the placeholder (given the reason) when it fails numerically.

        An ill-posed loop is the design's fault and propagates (it becomes exit 2).
        """
        try:
            with np.errstate(all="ignore"):
                return fn()
        except IllPosedLoopError:
            raise
        except NUMERIC_ERRORS as exc:
            reason = f"{type(exc).__name__}: {exc}"
            self.fail(part, reason)
            return placeholder(reason)


def undecided_stability(reason: str, domain: str = "s") -> Stability:
    return Stability(closed_loop_stable=False, method="undecided", closed_loop_poles=(),
                     open_loop_rhp_poles=0, open_loop_imag_axis_poles=0,
                     rhp_closed_loop_poles=None, clockwise_encirclements=None,
                     note=f"stability could not be decided ({reason})", domain=domain)


def undecided_internal(reason: str) -> InternalStability:
    return InternalStability(internally_stable=False, cancellations=(),
                             note=f"not decided ({reason})")


def undecided_margins(reason: str = "") -> Margins:
    return Margins(gain_margin_db=math.inf, gain_margin_lower_db=None,
                   phase_margin_deg=math.inf, gain_crossover_rad_s=None,
                   phase_crossover_rad_s=None, delay_margin_s=math.inf, gain_crossings=(),
                   phase_crossings=())


def undecided_sensitivity(reason: str = "") -> Sensitivity:
    return Sensitivity(peak_sensitivity=math.inf, peak_sensitivity_rad_s=0.0,
                       peak_complementary=math.inf, peak_complementary_rad_s=0.0,
                       disk_margin=0.0, disk_gain_low=1.0, disk_gain_high=1.0,
                       disk_phase_deg=0.0)


def undecided_tracking(reason: str = "") -> Tracking:
    # No placeholder numbers: every constant is None and named in ``unknown`` (why: the
    # part's entry in LoopAnalysis.errors, read through analysis.absence).
    return Tracking(system_type=0, kp=None, kv=None, ka=None, step_error=None,
                    ramp_error=None, parabola_error=None, unknown=_TRACKING_FIELDS)


def empty_curves() -> Curves:
    empty = np.zeros(0)
    return Curves(frequency_rad_s=empty, open_loop=np.zeros(0, dtype=complex),
                  step=TimeSeries(time_s=empty, value=empty),
                  ramp_error=TimeSeries(time_s=empty, value=empty), improvement={})


# --------------------------------------------------------------------------- NaN guard
def has_nan(x: Any) -> bool:
    """True when a result object holds a NaN anywhere (floats, complex, arrays, nested)."""
    if isinstance(x, float):
        return math.isnan(x)
    if isinstance(x, complex):
        return math.isnan(x.real) or math.isnan(x.imag)
    if isinstance(x, np.ndarray):
        return bool(x.dtype.kind in "fc" and np.isnan(x).any())
    if isinstance(x, np.generic):
        return has_nan(x.item())
    if dataclasses.is_dataclass(x) and not isinstance(x, type):
        return any(has_nan(getattr(x, f.name)) for f in dataclasses.fields(x))
    if isinstance(x, (tuple, list)):
        return any(has_nan(v) for v in x)
    if isinstance(x, Mapping):
        return any(has_nan(v) for v in x.values())
    return False


def scrub_nan(a: LoopAnalysis) -> LoopAnalysis:
    """``a`` with every part that holds a NaN replaced by its placeholder and undecided.

    NaN never appears in a result (results.py); a part that produced one failed without
    saying so, and is treated like a part that raised.
    """
    rec = Recorder()
    rec.errors.update(a.errors)
    rec.undecided.update(a.undecided)
    why = "the computation gave NaN (not a number)"
    changes: dict[str, Any] = {}
    parts: tuple[tuple[str, str, Callable[[str], Any]], ...] = (
        ("stability", "stability",
         lambda r: undecided_stability(r, a.stability.domain)),
        ("internal", "internal_stability", undecided_internal),
        ("margins", "margins", undecided_margins),
        ("sensitivity", "sensitivity", undecided_sensitivity),
        ("tracking", "tracking", undecided_tracking),
        ("boosts", "boost_band", lambda r: ()),
        ("sampling", "sampling", lambda r: None),
    )
    for name, part, placeholder in parts:
        if has_nan(getattr(a, name)):
            rec.errors.pop(part, None)
            rec.fail(part, why)
            changes[name] = placeholder(why)
    for name, part, empty in (("step", "step", None), ("slow_tail", "slow_tail", None),
                              ("integral_alternatives", "integral_alternative", ()),
                              ("pole_zero", "pole_zero", None)):
        if has_nan(getattr(a, name)):
            rec.errors[part] = why
            changes[name] = empty
    if a.curves is not None and has_nan(a.curves):
        rec.errors["curves"] = why
        changes["curves"] = empty_curves()
    if a.coverage is not None and has_nan(a.coverage):
        raise AnalysisError("the measured-range bookkeeping gave NaN (not a number)")
    if not changes:
        return a
    return dataclasses.replace(a, errors=rec.errors,
                               undecided=MappingProxyType(dict(rec.undecided)), **changes)
