"""One interface over the loops the analysis reviews: continuous, sampled and measured.

:class:`LoopResponse` is what the frequency-domain figures (margins over every crossing,
sensitivity peaks, bandwidth; :mod:`.loop_figures`) and the analysis pipeline
(:mod:`.pipeline`) read from a loop:

* ``domain`` "s" or "z" and ``kind`` ("continuous", "sampled", "measured");
* ``L`` at real frequencies in rad/s (:meth:`value`); ``ln|L|`` and the continuous phase
  (:meth:`log_magnitude`, :meth:`phase_rad`) and the analysis grid (:meth:`grid`) in the
  loop's own frequency variable ``x = ω·scale`` (``scale`` 1 for s-domain loops and the
  period T for a sampled loop, whose grid and crossings are in ``φ = ωT``, exact at π);
  a thinner plot grid in rad/s;
* the exact end values of |S|, |T| and |S − 1/2| as ω → 0 and ω → ∞ (or the Nyquist
  frequency π/T for a sampled loop; none for a measured loop, known on its range only);
* ``nyquist_rad_s`` and ``period_s`` where sampled;
* ``rational``, the rational model when there is one (``L`` without its delay; the
  sampled loop's ``L(z)``; None for a measured plant), :meth:`closed_loop_roots` where
  they are finitely many (None with a delay or a measured plant), and ``capabilities``:
  what the loop offers to the parts that need more than its frequency response
  ("model": a rational model of every block, "roots": closed-loop roots,
  "time_response": a simulated step, "continuous": continuous time).

The adapters wrap the existing loop objects and carry the few places where the kinds
differ: the grid (:func:`~.frequency_grid.loop_grid`, the unit-circle grid, the measured
points subdivided), the exact crossings at the ends, and a delay loop's phase crossings
that never end.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Protocol, runtime_checkable

import numpy as np

from ..lti import ComplexArray, FloatArray, Loop, Zpk
from ..lti_discrete import DiscreteLoop, unit_circle_log_magnitude, unit_circle_phase_rad
from . import frequency_grid
from .parts import CONTINUOUS, MODEL, ROOTS, TIME_RESPONSE
from .results import PhaseCrossing

__all__ = ["ContinuousResponse", "EndValues", "LoopResponse", "MeasuredResponse",
           "SampledResponse", "response_of", "thin"]

#: ``(|S|, |T|, |S − 1/2|)`` at one end of the frequency range, with its frequency.
EndValues = tuple[float, tuple[float, float, float]]



@runtime_checkable
class LoopResponse(Protocol):
    """What the frequency-domain analysis reads from a loop (module notes)."""

    domain: str
    kind: str
    scale: float
    period_s: float | None
    nyquist_rad_s: float | None
    capabilities: frozenset[str]
    listed_above: float | None

    @property
    def rational(self) -> Zpk | None: ...
    @property
    def gain_is_zero(self) -> bool: ...
    def value(self, w: FloatArray) -> ComplexArray: ...
    def log_magnitude(self, w: FloatArray) -> FloatArray: ...
    def phase_rad(self, w: FloatArray) -> FloatArray: ...
    def valid_steps(self, w: FloatArray) -> FloatArray: ...
    def grid(self) -> FloatArray: ...
    def plot_grid(self) -> FloatArray: ...
    def curve(self, w: FloatArray) -> ComplexArray: ...
    def end_values(self) -> tuple[EndValues, ...]: ...
    def exact_gain_crossings(self) -> FloatArray: ...
    def phase_crossover_frequencies(self, w: FloatArray) -> FloatArray: ...
    def end_phase_crossings(self) -> list[PhaseCrossing]: ...
    def closed_loop_roots(self) -> ComplexArray | None: ...


def thin(w: FloatArray, max_points: int = 2000) -> FloatArray:
    """At most ``max_points`` of the sorted grid ``w``, evenly by index, ends kept."""
    if w.size <= max_points:
        return w
    return w[np.unique(np.linspace(0, w.size - 1, max_points).round().astype(int))]


@dataclass(frozen=True, eq=False)
class ContinuousResponse:
    """``L(jω) = C·P·H·e^{−jωT}`` of a continuous loop (delay exact)."""

    loop: Loop
    domain: str = "s"
    kind: str = "continuous"
    scale: float = 1.0
    period_s: float | None = None
    nyquist_rad_s: float | None = None
    capabilities: frozenset[str] = frozenset({MODEL, ROOTS, TIME_RESPONSE, CONTINUOUS})
    peak_method: str = "golden"

    @property
    def rational(self) -> Zpk:
        return self.loop.rational

    @property
    def listed_above(self) -> float | None:
        # A delay turns L for ever: list only crossings within 60 dB of the upper margin.
        return frequency_grid.NEGLIGIBLE_GAIN if self.loop.has_delay else None

    @property
    def gain_is_zero(self) -> bool:
        return bool(self.rational.gain == 0)

    def value(self, w: FloatArray) -> ComplexArray:
        return frequency_grid.response(self.rational, w) * np.exp(-1j * w * self.loop.delay_s)

    def log_magnitude(self, w: FloatArray) -> FloatArray:
        return frequency_grid.log_magnitude(self.rational, w)

    def phase_rad(self, w: FloatArray) -> FloatArray:
        return frequency_grid.phase(self.rational, w) - w * self.loop.delay_s

    def valid_steps(self, w: FloatArray) -> FloatArray:
        from .margins import valid_steps

        return valid_steps(w, frequency_grid.imaginary_axis_frequencies(self.rational))

    def grid(self) -> FloatArray:
        return frequency_grid.loop_grid(self.loop)

    def plot_grid(self) -> FloatArray:
        return frequency_grid.plot_grid(self.loop)

    def curve(self, w: FloatArray) -> ComplexArray:
        return self.loop.open_loop(w)

    def end_values(self) -> tuple[EndValues, ...]:
        from .sensitivity import end_limits

        zero, high = end_limits(self.loop)
        return (0.0, zero), (math.inf, high)

    def exact_gain_crossings(self) -> FloatArray:
        return np.zeros(0)

    def phase_crossover_frequencies(self, w: FloatArray) -> FloatArray:
        from .margins import phase_crossover_frequencies

        return phase_crossover_frequencies(self.loop, w)

    def end_phase_crossings(self) -> list[PhaseCrossing]:
        from .margins import endpoint_crossings

        return endpoint_crossings(self.loop)

    def closed_loop_roots(self) -> ComplexArray | None:
        """Closed-loop poles in s (every mode kept); None with a delay (infinitely many:
        the stability part certifies those in its search region)."""
        if self.loop.has_delay:
            return None
        from .closed_loop import closed_loop_poles

        return closed_loop_poles(self.loop)


@dataclass(frozen=True, eq=False)
class SampledResponse:
    """``L(e^{jωT})`` of a sampled loop for ω ∈ (0, π/T]; both ends exact."""

    loop: DiscreteLoop
    domain: str = "z"
    kind: str = "sampled"
    capabilities: frozenset[str] = frozenset({MODEL, ROOTS, TIME_RESPONSE})
    listed_above: float | None = None
    peak_method: str = "brent"
    _rat: Zpk = field(init=False, repr=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "_rat", self.loop.rational)

    @property
    def rational(self) -> Zpk:
        return self._rat

    @property
    def period_s(self) -> float:
        return self.loop.period_s

    @property
    def scale(self) -> float:
        return self.loop.period_s

    @property
    def nyquist_rad_s(self) -> float:
        return math.pi / self.loop.period_s

    @property
    def gain_is_zero(self) -> bool:
        return bool(self._rat.gain == 0)

    def value(self, w: FloatArray) -> ComplexArray:
        return self._rat(np.exp(1j * np.asarray(w, dtype=float) * self.loop.period_s))

    def log_magnitude(self, phi: FloatArray) -> FloatArray:
        return unit_circle_log_magnitude(self._rat, phi)

    def phase_rad(self, phi: FloatArray) -> FloatArray:
        return unit_circle_phase_rad(self._rat, phi)

    def valid_steps(self, phi: FloatArray) -> FloatArray:
        from .discrete_margins import on_circle_angles
        from .margins import valid_steps

        return valid_steps(phi, on_circle_angles(self._rat))

    def full_grid(self) -> FloatArray:
        """The unit-circle grid up to and including the Nyquist frequency (rad/s)."""
        from .discrete_margins import unit_circle_grid

        return unit_circle_grid(self._rat) / self.loop.period_s

    def grid(self) -> FloatArray:
        """The unit-circle grid in φ = ωT short of π, which is judged exactly (rad)."""
        from .discrete_margins import interior, unit_circle_grid

        return interior(unit_circle_grid(self._rat))

    def plot_grid(self) -> FloatArray:
        from .discrete_margins import unit_circle_grid

        phi = thin(unit_circle_grid(self._rat, points_per_decade=60, uniform=400))
        return phi / self.loop.period_s

    def curve(self, w: FloatArray) -> ComplexArray:
        return self.loop.open_loop(w)

    def end_values(self) -> tuple[EndValues, ...]:
        from .discrete_margins import end_values

        return (0.0, end_values(self._rat, 1.0)), (self.nyquist_rad_s,
                                                    end_values(self._rat, -1.0))

    def exact_gain_crossings(self) -> FloatArray:
        from .discrete_margins import real_value

        l_pi = real_value(self._rat, -1.0)
        if l_pi is not None and abs(math.log(abs(l_pi))) <= 1e-9:
            return np.array([math.pi])               # |L| = 1 exactly at φ = π
        return np.zeros(0)

    def phase_crossover_frequencies(self, phi: FloatArray) -> FloatArray:
        from .margins import dedupe, phase_crossings_on

        return dedupe(phase_crossings_on(self.phase_rad, phi, self.valid_steps(phi)))

    def end_phase_crossings(self) -> list[PhaseCrossing]:
        """ω = 0 where ``L(1) < 0`` and π/T where ``L(−1) < 0`` (L is real at both)."""
        from .discrete_margins import real_value
        from .margins import phase_crossing

        out = []
        for at, z in ((0.0, 1.0), (self.nyquist_rad_s, -1.0)):
            v = real_value(self._rat, z)
            if v is not None and v < 0:
                out.append(phase_crossing(at, abs(v)))
        return out

    def closed_loop_roots(self) -> ComplexArray:
        """Closed-loop poles in z (eigenvalues of the closed-loop state matrix)."""
        from .discrete_response import discrete_closed_loop

        a = discrete_closed_loop(self.loop).a
        return np.sort_complex(np.linalg.eigvals(a)) if a.size else np.zeros(0, complex)


@dataclass(frozen=True, eq=False)
class MeasuredResponse:
    """``L = C·P_meas·H·e^{−jωτ}`` on the measured range only (nothing extrapolated)."""

    loop: object            # measured.MeasuredLoop (imported lazily: no import cycle)
    domain: str = "s"
    kind: str = "measured"
    scale: float = 1.0
    period_s: float | None = None
    nyquist_rad_s: float | None = None
    capabilities: frozenset[str] = frozenset()
    listed_above: float | None = None
    peak_method: str = "brent"
    rational: Zpk | None = None
    gain_is_zero: bool = False

    def _range(self) -> tuple[float, float]:
        w = self.loop.plant.frequency_rad_s                 # type: ignore[attr-defined]
        return float(w[0]), float(w[-1])

    def value(self, w: FloatArray) -> ComplexArray:
        lo, hi = self._range()
        return self.loop.value(np.clip(w, lo, hi))          # type: ignore[attr-defined]

    def log_magnitude(self, w: FloatArray) -> FloatArray:
        return self.loop.log_magnitude(w)                   # type: ignore[attr-defined]

    def phase_rad(self, w: FloatArray) -> FloatArray:
        return self.loop.phase_rad(w)                       # type: ignore[attr-defined]

    def valid_steps(self, w: FloatArray) -> FloatArray:
        return np.ones(max(w.size - 1, 0), dtype=bool)

    def grid(self) -> FloatArray:
        from .measured import analysis_grid

        return analysis_grid(self.loop)                     # type: ignore[arg-type]

    def plot_grid(self) -> FloatArray:
        return thin(self.grid())

    def curve(self, w: FloatArray) -> ComplexArray:
        return self.loop.value(w)                           # type: ignore[attr-defined]

    def end_values(self) -> tuple[EndValues, ...]:
        return ()

    def exact_gain_crossings(self) -> FloatArray:
        return np.zeros(0)

    def phase_crossover_frequencies(self, w: FloatArray) -> FloatArray:
        from .margins import dedupe, phase_crossings_on

        return dedupe(phase_crossings_on(self.phase_rad, w))

    def end_phase_crossings(self) -> list[PhaseCrossing]:
        return []

    def closed_loop_roots(self) -> ComplexArray | None:
        return None                                 # no model: the Nyquist count only


def response_of(loop: object) -> LoopResponse:
    """The adapter for a continuous, sampled or measured loop object."""
    if isinstance(loop, DiscreteLoop):
        return SampledResponse(loop)
    if isinstance(loop, Loop):
        return ContinuousResponse(loop)
    from .measured import MeasuredLoop

    if isinstance(loop, MeasuredLoop):
        return MeasuredResponse(loop)
    raise TypeError(f"not a loop: {type(loop).__name__}")
