"""Why a check or figure is missing: one typed answer over the analysis' records.

References: the closed-form critical gain of a third-order lag [derived] for the bound a
truncated sweep gives; the measured-plant reasons come from the pipeline's table of parts.
"""

from __future__ import annotations

import math
from unittest import mock

import numpy as np
import pytest

from loopwarden.analysis import analyze_variant
from loopwarden.analysis.absence import Why, check_absence, figure_absence
from loopwarden.analysis.regression import FIGURE_NAMES, missing_figures
from loopwarden.design.loader import load_design, parse_design
from loopwarden.lti import Zpk


def sweep_design(folder, plant: Zpk, controller: str, w) -> object:
    p = plant.freqresp(w)
    (folder / "s.csv").write_text("frequency,magnitude,phase\n" + "\n".join(
        f"{float(a)!r},{float(20 * np.log10(abs(b)))!r},{float(np.degrees(np.angle(b)))!r}"
        for a, b in zip(w, p, strict=True)) + "\n")
    (folder / "d.toml").write_text(
        '[design]\nname = "m"\n[plant]\nfrd = { file = "s.csv", frequency_unit = "rad/s", '
        f'magnitude_unit = "db", phase_unit = "deg" }}\n{controller}\n')
    d = load_design(folder / "d.toml")
    return analyze_variant(d, d.variants[0])


def test_truncated_sweep_leaves_the_gain_margin_undecided_with_a_true_bound(tmp_path):
    # [derived] L = 100/((s + 1)(s + 5)(s + 10)): the Routh critical gain of
    # (s + a)(s + b)(s + c) is (a + b + c)(ab + bc + ca) − abc = 16·65 − 50 = 990, so
    # GM = 20·log10(990/100) = 19.91 dB at ω = √65 = 8.06 rad/s.  A sweep that stops at
    # 6 rad/s sees no phase crossover: the margin is undecided, but bounded below by
    # −20·log10|L(6j)| (the assumption |L| ≤ |L(ω_max)| above the range holds here).
    plant = Zpk(np.zeros(0, complex), np.array([-1.0, -5.0, -10.0], complex), 100.0)
    a = sweep_design(tmp_path, plant, '[[controller]]\ntype = "gain"\nk = 1.0',
                     np.logspace(-2, math.log10(6.0), 300))
    gone = check_absence(a, "gain_margin")
    assert gone is not None and gone.why is Why.UNDECIDED
    l_top = abs(complex(plant.freqresp(np.array([6.0]))[0]))
    assert gone.bound == pytest.approx(-20 * math.log10(l_top), rel=1e-9)
    assert gone.bound <= 20 * math.log10(990 / 100)
    assert check_absence(a, "phase_margin") is None
    # What a measured plant cannot give is not applicable, with the table's reason.
    step = check_absence(a, "step_settling")
    assert step is not None and step.why is Why.NOT_APPLICABLE
    assert step.reason == "measured plant: the step response needs a model"
    # Type 0: Kp needs the plant's DC gain, which a sweep does not give.
    kp = figure_absence(a, "kp")
    assert kp is not None and kp.why is Why.UNDECIDED
    # [derived] type 0: Kv = Ka = 0, ramp and parabola errors infinite; Kp and the step
    # error need the DC gain: missing, with no placeholder number.
    tr = a.tracking
    assert tr.unknown == ("kp", "step_error") and tr.kp is None and tr.step_error is None
    assert (tr.kv, tr.ka, tr.ramp_error, tr.parabola_error) == (0.0, 0.0, math.inf, math.inf)
    assert "gain_margin_db" in missing_figures(a) and "kp" in missing_figures(a)


def test_a_failed_part_is_not_computed():
    text = ('[design]\nname = "x"\n[plant]\nzpk = { poles = [0.0, -1.0], gain = 1.0 }\n'
            '[[controller]]\ntype = "gain"\nk = 0.5\n')
    d = parse_design(text, "x.toml")
    with mock.patch("loopwarden.analysis.loop_figures.loop_sensitivity",
                    side_effect=FloatingPointError("overflow")):
        a = analyze_variant(d, d.variants[0])
    gone = check_absence(a, "peak_sensitivity")
    assert gone is not None and gone.why is Why.NOT_COMPUTED and "overflow" in gone.reason
    assert figure_absence(a, "peak_sensitivity").why is Why.NOT_COMPUTED
    assert check_absence(a, "gain_margin") is None
    # The sensitivity part decides all three peaks (undecided.PART_CHECKS).
    assert missing_figures(a) == {"peak_sensitivity", "peak_complementary", "disk_margin"}
    assert missing_figures(a) <= set(FIGURE_NAMES)
