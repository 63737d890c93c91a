"""Internal stability: cancellations between loop blocks.

Source: the definition of internal stability (no unstable or imaginary-axis pole–zero
cancellation between plant, sensor and controller; e.g. Skogestad & Postlethwaite,
Multivariable Feedback Control, §4.7 [memory]) and, as an independent check, the
closed-loop eigenvalues of the interconnection, which keep every cancelled mode.
"""

from __future__ import annotations

import numpy as np
import pytest

from loopwarden.analysis.internal import CANCEL_RTOL, internal_stability
from loopwarden.analysis.stability import closed_loop_stability
from loopwarden.lti import Loop, Zpk

ONE = Zpk.constant(1.0)


def test_unstable_plant_pole_cancelled_by_controller_zero():
    """P = 1/((s − 1)(s + 2)), C = 4(s − 1)/(s + 5): L = 4/((s+2)(s+5)) looks stable but the
    mode at +1 is hidden; the eigenvalues of the interconnection still hold it."""
    ctrl, plant = Zpk([1.0], [-5.0], 4.0), Zpk([], [1.0, -2.0], 1.0)
    res = internal_stability([("controller[1] tf", ctrl), ("plant", plant)])
    assert not res.internally_stable
    (c,) = res.cancellations
    assert (c.pole, c.zero, c.pole_block, c.zero_block) == (1.0, 1.0, "plant",
                                                            "controller[1] tf")
    poles = closed_loop_stability(Loop(plant=plant, controller=ctrl, sensor=ONE,
                                       stages=(ctrl,))).closed_loop_poles
    assert np.min(np.abs(np.asarray(poles) - 1.0)) < 1e-9


def test_rhp_plant_zero_cancelled_by_controller_pole():
    """The reverse case: a controller pole at the plant's right-half-plane zero 0.5."""
    res = internal_stability([("controller[1] tf", Zpk([], [0.5], 2.0)),
                              ("plant", Zpk([0.5], [-1.0, -3.0], -1.0))])
    assert not res.internally_stable
    (c,) = res.cancellations
    assert c.pole_block == "controller[1] tf" and c.zero_block == "plant"


def test_undamped_mode_cancelled_by_notch_reported_once_per_pair():
    """An undamped plant mode ±3j cancelled by an ideal notch: one entry for the pair."""
    notch = Zpk([3j, -3j], [-3 + 0j, -3 + 0j], 1.0)
    res = internal_stability([("controller[2] notch", notch),
                              ("plant", Zpk([], [3j, -3j, -1.0], 9.0))])
    assert not res.internally_stable
    (c,) = res.cancellations
    assert c.pole == 3j and c.distance == 0.0


def test_integrator_cancelled_by_sensor_zero():
    """A differentiating sensor zero at the origin cancels the plant integrator."""
    res = internal_stability([("controller[1] gain", Zpk.constant(2.0)),
                              ("plant", Zpk([], [0.0, -4.0], 1.0)),
                              ("sensor", Zpk([0.0], [-100.0], 100.0))])
    assert not res.internally_stable
    assert res.cancellations[0].pole == 0 and res.cancellations[0].zero_block == "sensor"


def test_stable_cancellation_is_allowed():
    """A PI zero on a stable plant pole (the usual pole-cancelling PI) is internally
    stable."""
    res = internal_stability([("controller[1] pi", Zpk([-2.0], [0.0], 1.0)),
                              ("plant", Zpk([], [-2.0], 3.0))])
    assert res.internally_stable and res.cancellations == ()


@pytest.mark.parametrize(("offset", "cancelled"), [
    (0.5 * CANCEL_RTOL, True), (2.0 * CANCEL_RTOL, False)])
def test_near_cancellation_relative_tolerance(offset, cancelled):
    """Within CANCEL_RTOL (relative) a zero cancels an unstable pole; beyond it, not."""
    res = internal_stability([("controller[1] lead", Zpk([2.0 * (1 + offset)], [-20.0], 1.0)),
                              ("plant", Zpk([], [2.0, -1.0], 1.0))])
    assert res.internally_stable is not cancelled


def test_double_pole_one_zero_counts_once():
    """A double unstable pole and one cancelling zero: one cancellation, the zero used once."""
    res = internal_stability([("controller[1] tf", Zpk([1.0], [-9.0], 1.0)),
                              ("plant", Zpk([], [1.0, 1.0], 1.0))])
    assert len(res.cancellations) == 1
