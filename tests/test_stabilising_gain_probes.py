"""The stabilising gain search of an unstable loop counts the nearest gain ranges first.

A loop k·e^{-sτ}/(s+1)-like: its phase crossings lie every ~2π/τ rad/s, so the
thresholds k_i = 1/|L(jω_i)| are hundreds; the closed loop is stable only for
0 < k < k_1 (the first crossing) [derived: the root count changes only where k·L(jω)
passes −1, and for this family only the first passage is stabilising].  The search must
give the range (0, k_1) with few counts, the same answer as counting every range.
"""

from __future__ import annotations

import math

from loopwarden.analysis.results import Margins, PhaseCrossing
from loopwarden.analysis.stabilising_gain import MAX_PROBES, stabilising_margins


def _margins(magnitudes: list[float]) -> Margins:
    crossings = tuple(PhaseCrossing(frequency_rad_s=0.2 * (i + 1), magnitude=m,
                                    gain_margin_db=-20.0 * math.log10(m))
                      for i, m in enumerate(magnitudes))
    return Margins(gain_margin_db=-20.0, gain_margin_lower_db=None, phase_margin_deg=-10.0,
                   gain_crossover_rad_s=1.0, phase_crossover_rad_s=0.2,
                   delay_margin_s=math.inf, gain_crossings=(), phase_crossings=crossings)


def test_delay_loop_with_hundreds_of_crossings_counts_few_ranges() -> None:
    # |L(jω_i)| = 10/(i+1): thresholds k_i = (i+1)/10, the present gain k = 1 unstable.
    mags = [10.0 / (i + 1) for i in range(700)]
    k1 = 1.0 / mags[0]
    calls: list[float] = []

    def unstable(k: float) -> int:
        calls.append(k)
        return 0 if k < k1 else 2

    out = stabilising_margins(_margins(mags), unstable)
    assert len(calls) <= MAX_PROBES + 2
    assert out.stable_gain_found is True
    assert math.isclose(out.gain_margin_db, 20.0 * math.log10(k1))      # -20 dB
    assert out.stable_gain_range_db == (-math.inf, out.gain_margin_db)
    assert out.phase_crossover_rad_s == 0.2


def test_nearest_stable_range_is_the_one_every_count_would_give() -> None:
    # stable only in (k_3, k_4) = (0.8, 1.6) and (0, k_1): the nearest is (0.8, 1.6)
    # whose near end 0.8 lies 1.94 dB below the present gain.
    mags = [1 / 0.2, 1 / 0.4, 1 / 0.8, 1 / 1.6, 1 / 3.2, 1 / 6.4]

    def unstable(k: float) -> int:
        return 0 if k < 0.2 or 0.8 < k < 1.6 else 2

    out = stabilising_margins(_margins(mags), unstable)
    assert out.stable_gain_found is True
    assert math.isclose(out.gain_margin_db, 20.0 * math.log10(0.8))
