"""Model objects read from a design file (frozen; frequencies already in rad/s)."""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType

from ..lti import Loop, Zpk
from ..lti_discrete import DiscreteLoop
from .frd import MeasuredPlant
from .parameters import ParameterSpace, SweepSettings


@dataclass(frozen=True, slots=True, kw_only=True)
class PlantVariant:
    """One plant the loop must satisfy. The first variant of a design is ``nominal``.

    A measured plant (``form = "frd"``) has its frequency response in ``measured``; its
    ``model`` is then only a unity placeholder, never an identified model: code that needs
    a model must check ``measured`` first.
    """

    name: str
    model: Zpk
    delay_s: float = 0.0
    form: str = "zpk"                  # "tf" | "zpk" | "ss" | "frd" as written in the file
    where: str = "plant"               # table it came from, e.g. "plant.variants[1]"
    measured: MeasuredPlant | None = None


@dataclass(frozen=True, slots=True, kw_only=True)
class Stage:
    """One controller stage in signal order.

    ``params`` holds the keys as written (frequencies converted to rad/s; a pid's in the
    ideal form, seconds, see :mod:`.stages`); ``model`` is the stage's transfer function
    from the error (for a pid with setpoint weights, from the measurement with its sign
    reversed); ``reference_model`` is a 2-DOF pid's path from the reference (same poles),
    None when the reference sees ``model``.  ``index`` is 1-based, matching
    ``controller[index]`` in messages; ``title`` is the stage's optional ``name`` key.
    """

    index: int
    type: str
    params: Mapping[str, float | str]
    model: Zpk
    domain: str = "s"                  # "z": the model is in z (a sampled design's stage)
    title: str | None = None
    reference_model: Zpk | None = None
    reference_gap: Zpk | None = None   # model − reference_model, exact (see stages.py)

    @property
    def name(self) -> str:
        """``controller[2] lag``, with the stage's own name in quotes when it has one."""
        base = f"controller[{self.index}] {self.type}"
        return base if self.title is None else f'{base} "{self.title}"'


@dataclass(frozen=True, slots=True, kw_only=True)
class Requirements:
    """Design-specific requirement values used by rules (``[requirements]``)."""

    reference_band_rad_s: float | None = None
    settling_time_s: float | None = None
    settling_band: float | None = None          # fraction, e.g. 0.02
    values: Mapping[str, float] = field(default_factory=lambda: MappingProxyType({}))


@dataclass(frozen=True, slots=True, kw_only=True)
class Sampling:
    """``[sampling]``: the controller runs on a computer every ``period_s`` seconds.

    Continuous controller stages are discretised together by ``method`` ("zoh", "tustin"
    or "matched"; Tustin optionally prewarped at ``prewarp_rad_s``); the plant, sensor and
    transport delays are sampled exactly through a zero-order hold; ``compute_delay_samples``
    whole periods pass between sampling the measurement and updating the output.
    """

    period_s: float
    method: str = "tustin"
    prewarp_rad_s: float | None = None
    compute_delay_samples: int = 0

    @property
    def nyquist_rad_s(self) -> float:
        return math.pi / self.period_s


@dataclass(frozen=True, slots=True, kw_only=True)
class Disturbance:
    """``[disturbance]``: a step load disturbance the loop must reject.

    ``at`` is ``"plant_input"`` (a load added to the actuator signal, after the transport
    delay) or ``"plant_output"`` (added to the plant output); ``size`` is the step height in
    the units of that signal; ``band_rad_s`` the highest frequency of disturbance content
    (``None``: the whole axis) for the |P·S| (|S|) peak.
    """

    at: str = "plant_input"
    size: float = 1.0
    band_rad_s: float | None = None


@dataclass(frozen=True, slots=True, kw_only=True)
class Actuator:
    """``[actuator]``: the actuator's range and slew rate and the controller's anti-windup.

    ``min_value``/``max_value`` bound the controller output u in the units of the model's
    input (deviations from the operating point, so ``min_value ≤ 0 ≤ max_value``);
    ``rate_limit_per_s`` bounds |du/dt| (None: no rate limit).  ``anti_windup`` is
    ``"none"``, ``"clamping"`` or ``"back_calculation"``; ``tracking_time_s`` the
    back-calculation time constant (None: the documented default, see
    :func:`loopwarden.analysis.saturation.tracking_time`).  ``step`` is the height of the
    reference step simulated with these limits.
    """

    min_value: float
    max_value: float
    rate_limit_per_s: float | None = None
    anti_windup: str = "none"
    tracking_time_s: float | None = None
    step: float = 1.0


def default_tracking_time(stages: tuple[Stage, ...]) -> float | None:
    """The back-calculation time constant when ``[actuator]`` gives none.

    Tt = √(ti·td) of the first pid stage with td > 0, else ti of the first pi or pid
    stage [practice: Åström & Hägglund, *PID Controllers: Theory, Design and Tuning*,
    2nd ed., 1995, §3.5 Integrator windup]; None when
    the controller has neither.
    """
    for st in stages:
        if st.type in ("pi", "pid") and st.domain == "s":
            ti = float(st.params["ti"])
            td = float(st.params.get("td", 0.0))
            return math.sqrt(ti * td) if td > 0 else ti
    return None


@dataclass(frozen=True, slots=True, kw_only=True)
class Waiver:
    rule: str
    reason: str
    approved_by: str
    expires: dt.date
    variant: str | None = None


@dataclass(frozen=True, slots=True, kw_only=True)
class Design:
    """A whole design file, validated."""

    name: str
    path: str
    sha256: str
    text: str                                   # the file exactly as read (for embedding)
    revision: str | None = None
    description: str | None = None
    frequency_unit: str = "rad/s"               # "rad/s" | "hz": how the report shows them
    variants: tuple[PlantVariant, ...]          # nominal first
    controller: tuple[Stage, ...]
    sensor: Zpk | None = None
    sensor_delay_s: float = 0.0
    requirements: Requirements = field(default_factory=Requirements)
    rule_limits: Mapping[str, Mapping[str, float]] = field(
        default_factory=lambda: MappingProxyType({}))   # [limits."rule.id"] min = ...
    waivers: tuple[Waiver, ...] = ()
    sampling: Sampling | None = None            # None: a continuous-time controller
    disturbance: Disturbance | None = None      # None: no [disturbance] table
    actuator: Actuator | None = None            # None: no [actuator] table
    # [parameters] / [sweep] (design/parameters.py): None without them; the variants and
    # sensor above then hold the nominal values.
    parameters: ParameterSpace | None = None
    sweep: SweepSettings | None = None

    def loop(self, variant: PlantVariant) -> Loop | DiscreteLoop:
        """The feedback loop of this design around one plant variant.

        Continuous designs give a :class:`~loopwarden.lti.Loop` in s.  A sampled design
        (``sampling`` set) gives the :class:`~loopwarden.lti_discrete.DiscreteLoop` in z:
        the digital controller (continuous stages discretised, compute delay included)
        around the plant sampled through a zero-order hold.  For a measured plant the
        loop's plant is the unity placeholder: use the variant's ``measured`` response.
        """
        if self.sampling is not None:
            return self.sampled_loop(variant)
        return self.continuous_loop(variant)

    def continuous_loop(self, variant: PlantVariant) -> Loop:
        """The continuous-time loop ``C(s)·P(s)·H(s)·e^{−s·delay}`` (s-domain stages only)."""
        ctrl = Zpk.constant(1.0)
        for st in self.controller:
            ctrl = ctrl * st.model
        sensor = self.sensor if self.sensor is not None else Zpk.constant(1.0)
        first = self.controller[0] if self.controller else None
        return Loop(plant=variant.model, controller=ctrl, sensor=sensor,
                    delay_s=variant.delay_s + self.sensor_delay_s,
                    stages=tuple(st.model for st in self.controller),
                    reference_first=None if first is None else first.reference_model,
                    reference_gap=None if first is None else first.reference_gap)

    def sampled_loop(self, variant: PlantVariant) -> DiscreteLoop:
        """The sampled-data loop in z (requires ``sampling``)."""
        from .sampling import discrete_loop

        if self.sampling is None:
            raise ValueError("the design has no [sampling] table")
        return discrete_loop(self.sampling, self.controller, variant.model, self.sensor,
                             variant.delay_s + self.sensor_delay_s)
