"""Model objects read from a design file (frozen; frequencies already in rad/s)."""

from __future__ import annotations

import datetime as dt
from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType

from ..lti import Loop, Zpk


@dataclass(frozen=True, slots=True, kw_only=True)
class PlantVariant:
    """One plant the loop must satisfy. The first variant of a design is ``nominal``."""

    name: str
    model: Zpk
    delay_s: float = 0.0
    form: str = "zpk"                  # "tf" | "zpk" | "ss" as written in the file
    where: str = "plant"               # table it came from, e.g. "plant.variants[1]"


@dataclass(frozen=True, slots=True, kw_only=True)
class Stage:
    """One controller stage in signal order.

    ``params`` holds the keys as written (frequencies converted to rad/s); ``model`` is the
    stage's transfer function.  ``index`` is 1-based, matching ``controller[index]`` in
    messages.
    """

    index: int
    type: str
    params: Mapping[str, float | str]
    model: Zpk

    @property
    def name(self) -> str:
        return f"controller[{self.index}] {self.type}"


@dataclass(frozen=True, slots=True, kw_only=True)
class Requirements:
    """Design-specific requirement values used by rules (``[requirements]``)."""

    reference_band_rad_s: float | None = None
    settling_time_s: float | None = None
    settling_band: float | None = None          # fraction, e.g. 0.02
    values: Mapping[str, float] = field(default_factory=lambda: MappingProxyType({}))


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

    def loop(self, variant: PlantVariant) -> Loop:
        """The feedback loop of this design around one plant variant."""
        ctrl = Zpk.constant(1.0)
        for st in self.controller:
            ctrl = ctrl * st.model
        sensor = self.sensor if self.sensor is not None else Zpk.constant(1.0)
        return Loop(plant=variant.model, controller=ctrl, sensor=sensor,
                    delay_s=variant.delay_s + self.sensor_delay_s,
                    stages=tuple(st.model for st in self.controller))
