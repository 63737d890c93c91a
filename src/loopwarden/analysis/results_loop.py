"""Frozen results on the loop itself: stability (closed-loop and internal), margins with
every crossing, sensitivity peaks, tracking constants.  Re-exported by :mod:`.results`.
"""

from __future__ import annotations

import typing
from dataclasses import dataclass

if typing.TYPE_CHECKING:  # annotations only: `loopwarden rules` must not load numpy
    pass


# --------------------------------------------------------------------------- stability
@dataclass(frozen=True, slots=True, kw_only=True)
class Stability:
    """Closed-loop stability of one loop.

    ``method`` is ``"poles"`` (rational loop: eigenvalues of the closed-loop state matrix)
    or ``"nyquist"`` (loop with transport delay or measured plant: encirclement count).
    ``domain`` ``"z"`` marks a sampled loop: poles are in z, "right half-plane" counts
    read "outside the unit circle" and "imaginary axis" reads "on the unit circle".
    """

    closed_loop_stable: bool
    method: str
    closed_loop_poles: tuple[complex, ...]        # empty for the Nyquist method
    open_loop_rhp_poles: int                       # P, open-loop poles with Re > 0
    open_loop_imag_axis_poles: int                 # poles on the imaginary axis (indented)
    rhp_closed_loop_poles: int | None              # Z = N + P; None: not finite (neutral)
    clockwise_encirclements: int | None            # N (Nyquist method only)
    marginal: bool = False                         # a closed-loop pole on the boundary
    note: str = ""
    domain: str = "s"                              # "z": sampled loop, poles in z
    # The certificate (see analysis/roots.py): roots polished on the exact characteristic
    # function, and the argument principle's count of roots in each region checked.
    certified: bool = True                         # False: roots and counts disagree
    unstable_roots_counted: int | None = None      # argument principle: Re s > 0 (|z| > 1)
    search_abscissa_rad_s: float | None = None     # delay loops: every root with
                                                   # Re s > −this is in closed_loop_poles
    roots_right_of_search_counted: int | None = None   # argument principle for that line
    slow_abscissa_rad_s: float | None = None       # slow region Re s > −this (z: the
                                                   # circle |z| = e^{−this·T})
    slow_roots_found: int | None = None
    slow_roots_counted: int | None = None          # argument principle for the slow region
    polish_iterations: int = 0


@dataclass(frozen=True, slots=True, kw_only=True)
class Cancellation:
    """An unstable or imaginary-axis pole of one block cancelled by a zero of another."""

    pole: complex
    zero: complex
    pole_block: str                                # "plant", "sensor", "controller[2] lead"
    zero_block: str
    distance: float                                # |pole − zero|, rad/s


@dataclass(frozen=True, slots=True, kw_only=True)
class InternalStability:
    internally_stable: bool
    cancellations: tuple[Cancellation, ...]
    note: str = ""


# --------------------------------------------------------------------------- margins
@dataclass(frozen=True, slots=True, kw_only=True)
class GainCrossing:
    """A frequency where |L(jω)| = 1."""

    frequency_rad_s: float
    phase_margin_deg: float                        # 180° + ∠L, wrapped to (−180, 180]
    delay_margin_s: float                          # extra delay that reaches −1 here


@dataclass(frozen=True, slots=True, kw_only=True)
class PhaseCrossing:
    """A frequency where ∠L(jω) = −180° (mod 360°), ω = 0 and ω = ∞ included."""

    frequency_rad_s: float                         # may be 0.0 or math.inf
    magnitude: float                               # |L| there
    gain_margin_db: float                          # −20·log10|L|; > 0 upper, < 0 lower


@dataclass(frozen=True, slots=True, kw_only=True)
class Margins:
    gain_margin_db: float                          # smallest upper margin; inf if none
    gain_margin_lower_db: float | None             # gain-reduction margin (≤ 0 dB) or None
    phase_margin_deg: float                        # smallest over all crossings; inf if none
    gain_crossover_rad_s: float | None             # where phase_margin_deg is measured
    phase_crossover_rad_s: float | None            # where gain_margin_db is measured
    delay_margin_s: float                          # min over crossings; inf if none
    gain_crossings: tuple[GainCrossing, ...]
    phase_crossings: tuple[PhaseCrossing, ...]
    delay_margin_samples: float | None = None      # sampled loop: delay margin / period
    # Closed-loop unstable loop (see analysis/stabilising_gain.py): gain_margin_db is then
    # the gain change to the nearest stable gain range (negative: reduce the gain).
    stable_gain_found: bool | None = None          # None: the loop is stable
    stable_gain_range_db: tuple[float, float] | None = None


@dataclass(frozen=True, slots=True, kw_only=True)
class Sensitivity:
    peak_sensitivity: float                        # Ms = max |S(jω)|, ω ∈ [0, ∞]
    peak_sensitivity_rad_s: float                  # where (0.0 or math.inf allowed)
    peak_complementary: float                      # Mt = max |T(jω)|
    peak_complementary_rad_s: float
    disk_margin: float                             # balanced α = 1 / max |S − 1/2|
    disk_gain_low: float                           # guaranteed gain range (factor)
    disk_gain_high: float                          # math.inf when α ≥ 2
    disk_phase_deg: float                          # guaranteed ± phase


# --------------------------------------------------------------------------- tracking
@dataclass(frozen=True, slots=True, kw_only=True)
class Tracking:
    """Error constants of the loop L (error e = r − H·y)."""

    system_type: int                               # net poles of L at s = 0
    kp: float | None                               # position constant; inf for type ≥ 1
    kv: float | None                               # velocity constant (1/s)
    ka: float | None                               # acceleration constant (1/s²)
    step_error: float | None                       # 1/(1 + Kp)
    ramp_error: float | None                       # 1/Kv (per unit ramp slope); inf type 0
    parabola_error: float | None                   # 1/Ka
    # Fields the data do not decide (a measured plant: the constant of the loop's own type
    # needs the plant's DC gain): None, shown as null; why: analysis.absence.
    # (A tracking part that failed keeps 0.0 placeholders, listed here too, because the
    # step plots read ramp_error as a number whenever a step response exists.)
    unknown: tuple[str, ...] = ()
