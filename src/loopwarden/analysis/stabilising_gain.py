"""Gain margin of a closed-loop unstable loop: the gain change to the nearest stable range.

For a stable loop the gain margin says how much the gain may grow (or, conditionally
stable, shrink) before the loop becomes unstable.  For an unstable loop the figures read
off the phase crossings answer no question: the "smallest upper margin" of a loop that is
already unstable is meaningless.  What the reviewer needs is how far the gain is from a
stable one.

The closed-loop root count of ``k·L`` changes only where ``k·L(jω)`` passes −1, that is at
``k = 1/|L(jω_i)|`` for the phase crossings ω_i.  Between two such values the count is
constant, so one count per interval (the Nyquist count of the scaled loop, or the circle
count in z) tells which gain ranges are stable.  The margin is then the gain change in dB
to the nearest end of the nearest stable range: negative when the gain must be reduced.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable

from ..errors import AnalysisError
from .results import Margins

__all__ = ["MAX_PROBES", "stabilising_margins"]

#: Most gain ranges counted, nearest to the present gain first (the first stable one is
#: the nearest).  A delay loop has a phase crossing every 2π/delay rad/s up to the top of
#: its grid (hundreds), each range one Nyquist count; when none of the nearest MAX_PROBES
#: is stable, only the end ranges (k -> 0, k -> ∞) are counted as well, and a stable one
#: of them is reported instead of a possibly nearer range among those not counted.
MAX_PROBES = 32


def stabilising_margins(margins: Margins, unstable_count: Callable[[float], int]) -> Margins:
    """``margins`` of an unstable loop with the gain margin set to the stabilising change.

    Parameters
    ----------
    margins : Margins
        The margins as read off the crossings (their phase crossings are used).
    unstable_count : callable
        Number of unstable closed-loop roots of the loop with its gain times k > 0.

    Returns
    -------
    Margins
        ``gain_margin_db`` = 20·log10(k*) with k* the end of the nearest stable gain range
        closest to 1 (negative: reduce the gain), ``phase_crossover_rad_s`` where it is
        met, ``gain_margin_lower_db`` None and ``stable_gain_range_db`` the whole range
        (±inf where it reaches k = 0 or ∞).  Unchanged, with ``stable_gain_found`` False,
        when no positive gain is stable (of the ranges counted, see :data:`MAX_PROBES`).
    """
    edges = sorted({(1.0 / pc.magnitude, pc.frequency_rad_s) for pc in margins.phase_crossings
                    if 0.0 < pc.magnitude < math.inf})
    if not edges:
        return dataclasses.replace(margins, stable_gain_found=False)
    ks = [0.0, *(k for k, _ in edges), math.inf]
    freqs = [None, *(w for _, w in edges), None]

    def distance(i: int) -> float:
        # distance (in |log10 k|) from the present gain to the range (ks[i], ks[i + 1])
        near = ks[i + 1] if ks[i + 1] < 1.0 else ks[i]
        return abs(math.log10(near)) if 0.0 < near < math.inf else math.inf

    # Nearest range first: the first stable one is the answer, so a delay loop with
    # hundreds of phase crossings (one Nyquist count each) stops after a few counts.
    # Beyond MAX_PROBES only the two end ranges (k -> 0, k -> inf) are still counted.
    order = sorted(range(len(ks) - 1), key=lambda i: (distance(i), i))
    if len(order) > MAX_PROBES:
        order = order[:MAX_PROBES] + [i for i in (0, len(ks) - 2)
                                      if i not in order[:MAX_PROBES]]
    best: int | None = None
    for i in order:
        lo, hi = ks[i], ks[i + 1]
        probe = hi / 2.0 if lo == 0.0 else 2.0 * lo if hi == math.inf else math.sqrt(lo * hi)
        try:
            if unstable_count(probe) != 0:
                continue
        except AnalysisError:
            continue
        best = i
        break
    if best is None:
        return dataclasses.replace(margins, stable_gain_found=False)
    i = best
    lo, hi = ks[i], ks[i + 1]
    if hi < 1.0:
        near, w, far = hi, freqs[i + 1], lo
    else:
        near, w, far = lo, freqs[i], hi
    def db(k: float) -> float:
        return -math.inf if k == 0.0 else math.inf if k == math.inf else 20.0 * math.log10(k)

    return dataclasses.replace(
        margins, gain_margin_db=db(near), phase_crossover_rad_s=w, gain_margin_lower_db=None,
        stable_gain_found=True, stable_gain_range_db=(db(min(near, far)), db(max(near, far))))
