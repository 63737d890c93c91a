"""Closed-loop zeros and open-loop poles of a loop, for the pole-zero map.

The closed-loop poles are in :class:`~loopwarden.analysis.results.Stability`; this adds the
zeros of the reference-to-output response and the poles of L, read from the model, so that
renderers draw them without touching the model themselves.
"""

from __future__ import annotations

import numpy as np

from ..design.model import Design, PlantVariant
from .results import PoleZeroMap


def pole_zero_map(design: Design, variant: PlantVariant) -> PoleZeroMap | None:
    """Zeros of r → y and poles of L(s) (or L(z)) of one variant; None for a measured plant.

    Continuous loops: the zeros of C_r·P (C_r the reference path of a 2-DOF pid, else C)
    and the sensor's poles (which become zeros of the
    reference response).  Sampled loops, in z: the controller's zeros and the zeros of the
    sampled plant's first output y(kT) (the plant output, not the measured one), among
    which the sensor's modes appear as they do in continuous time.
    """
    if variant.measured is not None:
        return None
    if design.sampling is not None:
        sampled = design.sampled_loop(variant)
        zeros = np.concatenate([sampled.controller.zeros,
                                sampled.sampled.transfer(output=1).zeros])
    else:
        loop = design.continuous_loop(variant)
        zeros = np.concatenate([loop.reference_forward.zeros, loop.sensor.poles])
    poles = design.loop(variant).rational.poles
    return PoleZeroMap(closed_loop_zeros=tuple(complex(z) for z in zeros),
                       open_loop_poles=tuple(complex(p) for p in poles))
