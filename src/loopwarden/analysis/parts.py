"""The table of the parts of a loop analysis: what each needs, and which checks it decides.

One row per part (:class:`Part`), in the order :func:`~.pipeline.run_loop` runs them:

* ``needs``: what the part needs from the loop beyond its frequency response, among
  :data:`NEEDS` (a rational model of every block, closed-loop roots, a simulated time
  response, continuous time).  A loop whose ``capabilities`` lack one cannot run the part;
* ``checks``: for each check that then does not apply, what it needs in words (the tail of
  its "not applicable" reason, :func:`~.pipeline.not_applicable`);
* ``decides``: the checks left undecided when the part fails numerically
  (:class:`~.undecided.Recorder`, ``PART_CHECKS``): its own and those that read its result;
* ``absent``: what ``LoopAnalysis.errors`` says when the loop cannot run it (if anything).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

__all__ = ["CONTINUOUS", "MODEL", "NEEDS", "PARTS", "ROOTS", "TIME_RESPONSE", "Part"]

MODEL = "model"
ROOTS = "roots"
TIME_RESPONSE = "time_response"
CONTINUOUS = "continuous"
#: Every need a part may declare.
NEEDS = frozenset({MODEL, ROOTS, TIME_RESPONSE, CONTINUOUS})

_TRACKING = "the tracking constants need a model of the plant's low-frequency behaviour"
_STEP = "the step response needs a model"
_MARGINS = ("gain_margin", "phase_margin", "delay_margin", "crossover_band")
_PEAKS = ("peak_sensitivity", "peak_complementary", "disk_margin")
_STEP_CHECKS = ("step_overshoot", "step_settling", "step_rise")


@dataclass(frozen=True)
class Part:
    """One part of the analysis (module notes)."""

    name: str
    needs: frozenset[str] = frozenset()
    checks: Mapping[str, str] = field(default_factory=dict)
    decides: tuple[str, ...] = ()
    absent: str | None = None


PARTS: tuple[Part, ...] = (
    Part("stability", decides=("closed_loop_stability", *_STEP_CHECKS, "slow_pair_tail",
                               "integral_alternative")),
    Part("internal_stability", frozenset({MODEL}), {
        "internal_stability": "cancellations between the controller and the plant's poles "
                              "and zeros cannot be checked without a model"},
         decides=("internal_stability",)),
    Part("frequency_grid", decides=(*_MARGINS, *_PEAKS, "boost_band", "lag_phase_budget")),
    Part("margins", decides=(*_MARGINS, "lag_phase_budget")),
    Part("stabilising_gain", frozenset({MODEL})),
    Part("sensitivity", decides=_PEAKS),
    Part("tracking", frozenset({MODEL}), {"system_type": _TRACKING,
                                          "error_constant": _TRACKING},
         decides=("system_type", "error_constant")),
    Part("sampling", decides=("sample_rate",)),
    Part("step", frozenset({MODEL, TIME_RESPONSE}), dict.fromkeys(_STEP_CHECKS, _STEP),
         absent="no model to simulate"),
    Part("slow_tail", frozenset({MODEL, ROOTS, TIME_RESPONSE}), {
        "slow_pair_tail": "closed-loop poles and residues need a model"}),
    Part("boost_band", frozenset({MODEL}), {
        "boost_band": "the boost-band analysis is done on models only",
        "lag_phase_budget": "the lag phase budget is priced on models only"},
         decides=("boost_band", "lag_phase_budget", "integral_alternative")),
    Part("integral_alternative", frozenset({MODEL}), {
        "integral_alternative": "the integral-action alternative is re-tuned on models "
                                "only"}),
    Part("curves"),
)
