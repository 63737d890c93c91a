"""What differs by kind of loop, behind one shape for :func:`~.pipeline.run_loop`.

A :class:`LoopKind` holds the loop's :class:`~.loop_response.LoopResponse` and the few
computations that are not a function of the frequency response alone: closed-loop
stability (roots in s, roots in z, or the Nyquist count on measured data), internal
stability, the tracking constants, the step response and the slow-pole tail, the boost
stages, and what a sampled or measured loop adds (sampling figures, frequency coverage).
Margins and peaks go through :mod:`.loop_figures` for every kind; a measured loop then
raises a figure to the bound that holds outside its range (:mod:`.measured`).
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from . import loop_figures
from .loop_response import ContinuousResponse, LoopResponse, MeasuredResponse, SampledResponse
from .results import (
    Boost,
    FrequencyCoverage,
    InternalStability,
    Margins,
    SampledInfo,
    Sensitivity,
    Stability,
    Tracking,
)

if TYPE_CHECKING:  # pragma: no cover
    from ..design.model import Design, PlantVariant
    from ..lti import FloatArray

__all__ = ["ContinuousKind", "LoopKind", "MeasuredKind", "SampledKind", "loop_kind"]


@dataclass(frozen=True, eq=False)
class LoopKind(ABC):
    """The computations shared by the kinds with a model (continuous and sampled)."""

    design: Design
    variant: PlantVariant
    response: LoopResponse
    #: Why the loop lacks what it lacks (the head of a "not applicable" reason).
    lacks: str = ""

    @property
    def loop(self) -> Any:
        return self.response.loop                 # type: ignore[attr-defined]

    def margins(self, x: FloatArray) -> Margins:
        return loop_figures.loop_margins(self.response, x)

    def sensitivity(self, x: FloatArray) -> Sensitivity:
        return loop_figures.loop_sensitivity(self.response, x)

    def slow_tail(self, step: Any, band: float, roots: np.ndarray) -> Any:
        from .slow_pairs import slow_tail

        return slow_tail(self.loop, step, band, roots=roots)

    def boosts(self, marg: Margins) -> tuple[Boost, ...]:
        from .boost_band import find_boosts

        d = self.design
        return find_boosts(self.loop, d.controller, marg, d.requirements.reference_band_rad_s,
                           d.sampling)

    def improvement(self, stage: int, grid: FloatArray) -> FloatArray:
        from .boost_band import improvement

        return improvement(self.loop, self.design.controller, stage, grid, self.design.sampling)

    def sampling_info(self) -> SampledInfo | None:
        return None

    def coverage(self) -> FrequencyCoverage | None:
        return None

    # The kind-specific parts: every kind below defines them (abstract here).
    @abstractmethod
    def stability(self) -> Stability: ...

    @abstractmethod
    def internal(self) -> InternalStability: ...

    @abstractmethod
    def stabilising_margins(self, marg: Margins) -> Margins: ...

    @abstractmethod
    def tracking(self) -> Tracking: ...

    @abstractmethod
    def step(self, band: float) -> Any: ...


class ContinuousKind(LoopKind):
    """A continuous loop ``C·P·H·e^{−sT}``: roots (or the Nyquist count with a delay)."""

    def stability(self) -> Stability:
        from . import stability

        return stability.closed_loop_stability(self.loop)

    def internal(self) -> InternalStability:
        from . import internal

        d, v = self.design, self.variant
        blocks = [(st.name, st.model) for st in d.controller]
        blocks.append(("plant" if v.name == "nominal" else f"plant ({v.name})", v.model))
        if d.sensor is not None:
            blocks.append(("sensor", d.sensor))
        return internal.internal_stability(blocks)

    def stabilising_margins(self, marg: Margins) -> Margins:
        """Gain margin of an unstable loop: the change to a stable gain range."""
        from .stabilising_gain import stabilising_margins
        from .stability import nyquist_count

        loop = self.loop
        return stabilising_margins(marg, lambda k: nyquist_count(loop.scaled(k))
                                   .rhp_closed_loop_poles)

    def tracking(self) -> Tracking:
        from . import tracking

        return tracking.compute_tracking(self.loop)

    def step(self, band: float) -> Any:
        from . import time_response

        return time_response.step_response(self.loop, band)


class SampledKind(LoopKind):
    """A sampled loop ``C(z)·P_d(z)·z^{−n}``: roots in z, exact at the instants."""

    def stability(self) -> Stability:
        from .discrete_response import discrete_stability

        return discrete_stability(self.loop)

    def internal(self) -> InternalStability:
        from .discrete_loop import sampled_blocks
        from .discrete_response import discrete_internal_stability

        return discrete_internal_stability(sampled_blocks(self.design, self.loop))

    def stabilising_margins(self, marg: Margins) -> Margins:
        from .discrete_loop import stabilising

        return stabilising(self.loop, marg)

    def tracking(self) -> Tracking:
        from .discrete_response import discrete_tracking

        return discrete_tracking(self.loop)

    def step(self, band: float) -> Any:
        from .discrete_response import discrete_step_response

        return discrete_step_response(self.loop, band)

    def sampling_info(self) -> SampledInfo | None:
        from .discrete_loop import sampled_info

        return sampled_info(self.design, self.variant, self.loop)


class MeasuredKind(LoopKind):
    """A measured plant: every figure from the data on its range (see :mod:`.measured`).

    The figures are computed together (the coverage decides what the stability count and
    the margins may claim) when the kind is made; the parts read them.
    """

    figures: Any

    def __init__(self, design: Design, variant: PlantVariant) -> None:
        from .measured import measured_figures, measured_loop

        loop = measured_loop(design, variant)
        super().__init__(design, variant, MeasuredResponse(loop), lacks="measured plant")
        object.__setattr__(self, "figures", measured_figures(design, loop))

    def stability(self) -> Stability:
        return self.figures.stability

    def internal(self) -> InternalStability:
        return self.figures.internal

    def margins(self, x: FloatArray) -> Margins:
        return self.figures.margins

    def sensitivity(self, x: FloatArray) -> Sensitivity:
        return self.figures.sensitivity

    def tracking(self) -> Tracking:
        return self.figures.tracking

    # The parts table (parts.py) gives neither part to a loop without a model; were it
    # asked, a measurement has no gain range to search and no time response.
    def stabilising_margins(self, marg: Margins) -> Margins:
        return marg

    def step(self, band: float) -> None:
        return None

    def coverage(self) -> FrequencyCoverage | None:
        return self.figures.coverage


def loop_kind(design: Design, variant: PlantVariant) -> LoopKind:
    """The kind of the design's loop around ``variant``: sampled, measured or continuous."""
    if design.sampling is not None:
        return SampledKind(design, variant, SampledResponse(design.sampled_loop(variant)))
    if variant.measured is not None:
        return MeasuredKind(design, variant)
    return ContinuousKind(design, variant, ContinuousResponse(design.continuous_loop(variant)))
