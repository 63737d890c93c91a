"""The ranges a design's numbers must lie in, so that the analysis can carry them.

Every number of a design file is checked at load time against a stated range; a value
outside it is a :class:`~loopwarden.errors.DesignError` (exit 2) naming the file, the table
and the key.  The ranges keep the numerics finite and the work bounded, with room to spare
for real loops (README.md, "Input limits", lists them with their reasons):

* every number is finite with magnitude 0 or within [1e-150, 1e150]: products of two such
  numbers stay far from overflow and underflow (no denormals);
* nonzero roots (poles and zeros of every block, lead/lag corners, notch and lowpass
  frequencies, 1/ti, the PID filter pole) within [1e-8, 1e8] rad/s, and within a factor
  1e12 of each other in one loop: the frequency grids span the roots with a few decades
  beside them, and the state-space and polynomial algebra loses about log10(range) digits;
* a block's gain within [1e-150, 1e150], the product of a loop's block gains within
  [1e-200, 1e200];
* a loop of at most :data:`MAX_LOOP_ORDER` poles, :data:`MAX_STAGES` controller stages and
  :data:`MAX_VARIANTS` plant variants (each variant is analysed in full);
* a transport delay whose phase at the fastest root, delay·ω_max, is at most
  :data:`MAX_DELAY_PHASE_RAD`: the exact delay simulation and the Nyquist count cost time
  and memory in proportion to it; and, when nonzero, at least :data:`MIN_DELAY_PHASE_RAD`
  (a shorter delay acts only decades above the loop, where the margin search would follow
  its phase through tens of decades);
* sampled designs: the sample period within [1e-8, 1e8] s, period·ω_max ≤ 1e4 and
  period·Re(p) ≤ 100 for unstable poles (e^(p·T) must stay finite), at most
  :data:`MAX_COMPUTE_DELAY` samples of compute delay and :data:`MAX_DELAY_SAMPLES`
  periods of transport delay (each sample of delay is a state of the loop in z).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence

import numpy as np

from ..errors import DesignError

__all__ = [
    "MAX_COMPUTE_DELAY", "MAX_DELAY_PHASE_RAD", "MAX_DELAY_SAMPLES", "MAX_GAIN",
    "MIN_DELAY_PHASE_RAD",
    "MAX_LOOP_GAIN", "MAX_LOOP_ORDER", "MAX_NUMBER", "MAX_PERIOD_S", "MAX_PERIOD_PHASE",
    "MAX_ROOT_RAD_S", "MAX_ROOT_RANGE", "MAX_STAGES", "MAX_UNSTABLE_PERIOD_PHASE",
    "MAX_VARIANTS", "MIN_NUMBER", "MIN_PERIOD_S", "MIN_ROOT_RAD_S", "Block", "check_gain",
    "check_loop", "check_roots", "highest_crossover_bound", "number_range_error",
]

MIN_NUMBER = 1e-150
MAX_NUMBER = 1e150
MIN_ROOT_RAD_S = 1e-8
MAX_ROOT_RAD_S = 1e8
MAX_ROOT_RANGE = 1e12
MAX_GAIN = 1e150
MAX_LOOP_GAIN = 1e200
MAX_LOOP_ORDER = 500
MAX_STAGES = 32
MAX_VARIANTS = 8
MAX_DELAY_PHASE_RAD = 3000.0
MIN_DELAY_PHASE_RAD = 1e-6
MIN_PERIOD_S = 1e-8
MAX_PERIOD_S = 1e8
MAX_PERIOD_PHASE = 1e4
MAX_UNSTABLE_PERIOD_PHASE = 100.0
MAX_COMPUTE_DELAY = 200
MAX_DELAY_SAMPLES = 200
#: Largest |z| of a root of a stage written in z.
MAX_Z_ROOT = 1e8


def number_range_error(value: float) -> str | None:
    """Why a finite number is out of range, or None when it is in range."""
    a = abs(value)
    if a > MAX_NUMBER:
        return f"expected a number of magnitude at most {MAX_NUMBER:g}, got {value:g}"
    if 0.0 < a < MIN_NUMBER:
        return (f"expected 0 or a number of magnitude at least {MIN_NUMBER:g}, got "
                f"{value:g}")
    return None


def _root_text(r: complex) -> str:
    if r.imag == 0:
        return f"{r.real:g}"
    return f"{r.real:g}{'+' if r.imag > 0 else '-'}j{abs(r.imag):g}"


def check_roots(roots: Iterable[complex], *, file: str, where: str, what: str,
                domain: str = "s", unit_scale: float = 1.0, unit: str = "rad/s") -> None:
    """Every root finite; nonzero |root| within [MIN_ROOT_RAD_S, MAX_ROOT_RAD_S] (s), or
    |z| ≤ MAX_Z_ROOT (z).  ``unit_scale`` converts rad/s to the unit shown."""
    for r in roots:
        r = complex(r)
        if not (math.isfinite(r.real) and math.isfinite(r.imag)):
            raise DesignError(f"{what} could not be computed (not finite)", file=file,
                              where=where, hint="the coefficients are too large or too "
                                                "badly scaled to factor")
        mag = abs(r)
        if domain == "z":
            if mag > MAX_Z_ROOT:
                raise DesignError(f"a {what[:-1] if what.endswith('s') else what} at "
                                  f"z = {_root_text(r)} lies beyond |z| = {MAX_Z_ROOT:g}",
                                  file=file, where=where)
            continue
        if mag == 0.0:
            continue
        if not MIN_ROOT_RAD_S <= mag <= MAX_ROOT_RAD_S:
            shown = mag * unit_scale
            raise DesignError(
                f"{what} at {_root_text(r * unit_scale)} {unit} (|s| = {shown:g} {unit}) lies "
                f"outside {MIN_ROOT_RAD_S * unit_scale:g} .. {MAX_ROOT_RAD_S * unit_scale:g} "
                f"{unit}", file=file, where=where,
                hint="nonzero poles and zeros must lie within 1e-8 .. 1e8 rad/s; write a "
                     "root far below the loop's band as 0 and leave out one far above it")


def check_gain(gain: float, *, file: str, where: str) -> None:
    if not math.isfinite(gain) or gain == 0.0:
        raise DesignError(f"the gain is {gain:g}: expected a finite, nonzero gain",
                          file=file, where=where)
    if not 1.0 / MAX_GAIN <= abs(gain) <= MAX_GAIN:
        raise DesignError(f"the gain {gain:g} lies outside ±{1 / MAX_GAIN:g} .. "
                          f"{MAX_GAIN:g} in magnitude", file=file, where=where,
                          hint="rescale the model (a gain this size overflows the analysis)")


class Block:
    """One block of a loop for the loop-level checks: its place and its model."""

    def __init__(self, where: str, zeros: Sequence[complex], poles: Sequence[complex],
                 gain: float, domain: str = "s") -> None:
        self.where, self.zeros, self.poles = where, list(zeros), list(poles)
        self.gain, self.domain = gain, domain


def check_loop(blocks: Sequence[Block], *, file: str, variant_where: str, delay_s: float,
               delay_where: str, period_s: float | None = None,
               period_where: str = "sampling.period", compute_delay: int = 0,
               measured_max_rad_s: float | None = None, unit_scale: float = 1.0,
               unit: str = "rad/s") -> None:
    """The loop-level ranges: root spread, order, gain product, delay and sampling ratios.

    ``blocks`` are the loop's blocks (controller stages, plant, sensor); ``variant_where``
    names the plant variant the loop is built around.
    """
    s_blocks = [b for b in blocks if b.domain == "s"]
    order = sum(len(b.poles) for b in blocks)
    if order > MAX_LOOP_ORDER:
        raise DesignError(f"the loop around this plant has {order} poles; at most "
                          f"{MAX_LOOP_ORDER} are analysed", file=file, where=variant_where,
                          hint="reduce the model order (balanced truncation keeps the "
                               "response in the loop's band)")
    log_gain = sum(math.log10(abs(b.gain)) for b in blocks if b.gain != 0.0)
    if abs(log_gain) > math.log10(MAX_LOOP_GAIN):
        raise DesignError(f"the product of the loop's block gains is 1e{log_gain:.0f}, "
                          f"outside 1e-200 .. 1e200 in magnitude", file=file,
                          where=variant_where, hint="rescale the blocks' units")
    located = [(abs(complex(r)), b.where) for b in s_blocks for r in (*b.zeros, *b.poles)
               if abs(complex(r)) > 0.0]
    w_max = max((m for m, _ in located), default=None)
    if located:
        lo = min(located)
        hi = max(located)
        if hi[0] / lo[0] > MAX_ROOT_RANGE:
            raise DesignError(
                f"the loop's nonzero poles and zeros span {lo[0] * unit_scale:g} .. "
                f"{hi[0] * unit_scale:g} {unit} (the smallest in {lo[1]}), a range above "
                f"{MAX_ROOT_RANGE:g}", file=file, where=hi[1],
                hint="leave out dynamics many decades above the crossover, or write roots "
                     "far below it as 0")
    if measured_max_rad_s is not None:
        w_max = max(w_max or 0.0, measured_max_rad_s)
    elif period_s is None:
        w_cross = highest_crossover_bound(s_blocks)
        if w_cross is not None:
            w_max = max(w_max or 0.0, w_cross)
    if period_s is None and delay_s > 0.0 and measured_max_rad_s is None:
        n_poles = sum(len(b.poles) for b in s_blocks)
        n_zeros = sum(len(b.zeros) for b in s_blocks)
        if n_poles == n_zeros and log_gain >= 0.0:
            raise DesignError(
                f"with the delay, |L(j∞)| = {10 ** log_gain:.4g} ≥ 1 makes a neutral loop: "
                "the delayed high-frequency gain alone decides stability and the analysis "
                "cannot carry it", file=file, where=variant_where,
                hint="some block must roll off at high frequency (a strictly proper plant, "
                     "sensor or controller stage)")
    if (period_s is None and delay_s > 0.0 and w_max is not None
            and delay_s * w_max < MIN_DELAY_PHASE_RAD):
        raise DesignError(
            f"the delay {delay_s:g} s turns the phase by only {delay_s * w_max:.3g} rad at "
            f"the loop's fastest frequency {w_max * unit_scale:g} {unit}; a nonzero delay "
            f"must turn it by at least {MIN_DELAY_PHASE_RAD:g} rad", file=file,
            where=delay_where, hint="write delay = 0 for a delay this short (its only "
                                    "effect lies decades above the loop's dynamics)")
    if (period_s is None and delay_s > 0.0 and w_max is not None
            and delay_s * w_max > MAX_DELAY_PHASE_RAD):
        raise DesignError(
            f"the delay {delay_s:g} s turns the phase by {delay_s * w_max:.3g} rad at the "
            f"loop's fastest frequency {w_max * unit_scale:g} {unit}; at most "
            f"{MAX_DELAY_PHASE_RAD:g} rad are analysed", file=file, where=delay_where,
            hint="the exact delay simulation costs time in proportion to delay·ω; leave "
                 "out dynamics far above the crossover or check the delay's unit (s)")
    if period_s is None:
        return
    if not MIN_PERIOD_S <= period_s <= MAX_PERIOD_S:
        raise DesignError(f"expected a sample period within {MIN_PERIOD_S:g} .. "
                          f"{MAX_PERIOD_S:g} s, got {period_s:g} s", file=file,
                          where=period_where)
    if compute_delay > MAX_COMPUTE_DELAY:
        raise DesignError(f"expected at most {MAX_COMPUTE_DELAY} samples of compute delay, "
                          f"got {compute_delay}", file=file, where="sampling.compute_delay",
                          hint="each sample of delay is a state of the loop in z")
    if delay_s / period_s > MAX_DELAY_SAMPLES:
        raise DesignError(f"the delay {delay_s:g} s is {delay_s / period_s:.4g} sample "
                          f"periods; at most {MAX_DELAY_SAMPLES} are analysed", file=file,
                          where=delay_where,
                          hint="each period of delay is a state of the loop in z")
    if w_max is not None and w_max * period_s > MAX_PERIOD_PHASE:
        raise DesignError(f"the sample period {period_s:g} s is {w_max * period_s:.3g} "
                          f"times the time constant of the loop's fastest root "
                          f"({w_max * unit_scale:g} {unit}); at most {MAX_PERIOD_PHASE:g}",
                          file=file, where=period_where)
    for b in s_blocks:
        for p in b.poles:
            if complex(p).real * period_s > MAX_UNSTABLE_PERIOD_PHASE:
                raise DesignError(
                    f"the unstable pole {_root_text(complex(p) * unit_scale)} {unit} grows "
                    f"by e^{complex(p).real * period_s:.3g} in one sample period; at most "
                    f"e^{MAX_UNSTABLE_PERIOD_PHASE:g}", file=file, where=b.where,
                    hint="sample much faster than the unstable pole")


def highest_crossover_bound(blocks: Sequence[Block]) -> float | None:
    """The highest frequency (rad/s) on a log grid 1e-10 .. 1e12 where |L(jω)| ≥ 1 (a
    strictly proper loop) or where |L| has not yet come within 1 % of its limit
    |L(j∞)| = |k| < 1 (a biproper loop; the delay grid of the analysis reaches that far).

    Worked in logarithms, so no gain overflows.  None when |L| stays below the level
    everywhere.
    """
    zeros = np.array([complex(r) for b in blocks for r in b.zeros], dtype=complex)
    poles = np.array([complex(r) for b in blocks for r in b.poles], dtype=complex)
    log_k = sum(math.log(abs(b.gain)) for b in blocks if b.gain != 0.0)
    level = 0.0
    if poles.size == zeros.size:
        k = math.exp(min(log_k, 700.0))
        level = math.log(max(min(1.01 * k, 0.5 * (1.0 + k)), 1e-300))
    jw = 1j * np.logspace(-10.0, 12.0, 441)
    with np.errstate(divide="ignore"):
        log_mag = (log_k + np.log(np.abs(jw[:, None] - zeros[None, :])).sum(axis=1)
                   - np.log(np.abs(jw[:, None] - poles[None, :])).sum(axis=1))
    above = np.nonzero(log_mag >= level)[0]
    if above.size == 0:
        return None
    i = int(above[-1])
    return float(jw[min(i + 1, jw.size - 1)].imag)
