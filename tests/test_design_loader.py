"""Loading whole design files: plant forms, variants, sensor, requirements, limits, waivers.

References: python-control ``tf``/``ss``/``zpk`` frequency responses for the plant forms;
hashlib for the file hash; the unit conversion 1 Hz = 2π rad/s [derived].
"""

from __future__ import annotations

import datetime as dt
import hashlib
import math
from pathlib import Path

import control
import numpy as np
import pytest

from loopwarden.design import Design, load_design, parse_design

SAMPLES = Path(__file__).resolve().parent.parent / "sample_designs"
W = np.array([0.02, 0.5, 1.0, 3.3, 12.0, 80.0, 900.0])   # rad/s

FULL = """\
# A complete design using every table.
[design]
name = "Conveyor index axis"
revision = "C"
description = "Belt indexing, 24 V drive"

[plant]
zpk = { zeros = [], poles = [0.0, -2.5, -40.0], gain = 130.0 }
delay = 0.001

[[plant.variants]]
name = "heavy load"
zpk = { zeros = [], poles = [0.0, -1.8, -40.0], gain = 95.0 }
delay = 0.004

[[plant.variants]]
name = "light load"
tf = { num = [160.0], den = [1.0, 43.2, 128.0, 0.0] }

[[controller]]
type = "gain"
k = 1.2

[[controller]]
type = "lead"
zero = 3.0
pole = 30.0

[[controller]]
type = "lag"
zero = 0.1258
pole = 0.01258

[sensor]
tf = { num = [1.0], den = [0.002, 1.0] }
delay = 0.0005

[requirements]
reference_band = 0.05
settling_time = 4.0
settling_band = 0.05
phase_margin = 45.0
crossover_min = 1.0

[limits."margin.phase"]
min = 50.0
warn_min = 55.0

[limits."sens.peak"]
max = 1.8

[[waivers]]
rule = "margin.gain"
variant = "heavy load"
reason = "accepted pending retune"
approved_by = "A. Engineer"
expires = 2027-03-31
"""


def _ref(sys, w=W):
    return np.array([complex(sys(1j * wi)) for wi in w])


@pytest.fixture()
def full(tmp_path) -> tuple[Design, Path]:
    path = tmp_path / "full.toml"
    path.write_text(FULL, encoding="utf-8")
    return load_design(path), path


def test_identity_hash_and_text(full):
    design, path = full
    assert design.name == "Conveyor index axis"
    assert design.revision == "C"
    assert design.description == "Belt indexing, 24 V drive"
    assert design.frequency_unit == "rad/s"
    assert design.path == str(path)
    assert design.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
    assert design.text == FULL


def test_parse_design_matches_load_design(full):
    design, path = full
    parsed = parse_design(FULL, str(path))
    assert parsed.sha256 == design.sha256
    assert [v.name for v in parsed.variants] == [v.name for v in design.variants]


def test_hash_covers_raw_bytes_including_crlf(tmp_path):
    # sha256 of the bytes as stored: CRLF line ends must not be normalised away
    path = tmp_path / "crlf.toml"
    raw = FULL.replace("\n", "\r\n").encode("utf-8")
    path.write_bytes(raw)
    design = load_design(path)
    assert design.sha256 == hashlib.sha256(raw).hexdigest()
    assert design.text == raw.decode("utf-8")


def test_variants_in_order_with_places_and_delays(full):
    design, _ = full
    names = [v.name for v in design.variants]
    assert names == ["nominal", "heavy load", "light load"]
    assert [v.where for v in design.variants] == ["plant", "plant.variants[1]",
                                                  "plant.variants[2]"]
    assert [v.form for v in design.variants] == ["zpk", "zpk", "tf"]
    # the light-load variant gives no delay: it inherits the nominal plant's 1 ms
    assert [v.delay_s for v in design.variants] == [0.001, 0.004, 0.001]


def test_plant_forms_against_python_control(full):
    design, _ = full
    nominal, heavy, light = design.variants
    np.testing.assert_allclose(nominal.model.freqresp(W),
                               _ref(control.zpk([], [0.0, -2.5, -40.0], 130.0)), rtol=1e-12)
    np.testing.assert_allclose(heavy.model.freqresp(W),
                               _ref(control.zpk([], [0.0, -1.8, -40.0], 95.0)), rtol=1e-12)
    np.testing.assert_allclose(light.model.freqresp(W),
                               _ref(control.tf([160.0], [1.0, 43.2, 128.0, 0.0])), rtol=1e-10)
    assert light.model.origin_poles == 1


def test_stages_sensor_and_loop(full):
    design, _ = full
    assert [st.type for st in design.controller] == ["gain", "lead", "lag"]
    assert [st.index for st in design.controller] == [1, 2, 3]
    assert design.controller[2].name == "controller[3] lag"
    np.testing.assert_allclose(design.sensor.freqresp(W), _ref(control.tf([1.0], [0.002, 1.0])),
                               rtol=1e-12)
    assert design.sensor_delay_s == 0.0005
    loop = design.loop(design.variants[1])
    assert loop.delay_s == pytest.approx(0.0045)
    # L = C·P·H evaluated independently with python-control
    s = control.tf("s")
    ref = (1.2 * 10.0 * (s + 3) / (s + 30) * (s + 0.1258) / (s + 0.01258)
           * control.zpk([], [0.0, -1.8, -40.0], 95.0) / (0.002 * s + 1))
    np.testing.assert_allclose(loop.rational.freqresp(W), _ref(ref), rtol=1e-9)


def test_requirements_limits_waivers(full):
    design, _ = full
    req = design.requirements
    assert req.reference_band_rad_s == 0.05
    assert req.settling_time_s == 4.0
    assert req.settling_band == 0.05
    assert dict(req.values) == {"reference_band": 0.05, "settling_time": 4.0,
                                "settling_band": 0.05, "phase_margin": 45.0,
                                "crossover_min": 1.0}
    assert {k: dict(v) for k, v in design.rule_limits.items()} == {
        "margin.phase": {"min": 50.0, "warn_min": 55.0}, "sens.peak": {"max": 1.8}}
    (w,) = design.waivers
    assert (w.rule, w.variant, w.approved_by) == ("margin.gain", "heavy load", "A. Engineer")
    assert w.expires == dt.date(2027, 3, 31)


def test_minimal_design_defaults():
    design = parse_design('[design]\nname = "m"\n[plant]\ntf = { num = [1], den = [1, 1] }\n'
                          '[[controller]]\ntype = "gain"\nk = 2\n', "m.toml")
    assert design.frequency_unit == "rad/s"
    assert design.revision is None and design.description is None
    assert design.sensor is None and design.sensor_delay_s == 0.0
    assert design.requirements.settling_band is None
    assert dict(design.requirements.values) == {}
    assert dict(design.rule_limits) == {} and design.waivers == ()
    assert len(design.variants) == 1 and design.variants[0].delay_s == 0.0


def test_numeric_revision_is_kept_as_text():
    design = parse_design('[design]\nname = "m"\nrevision = 3\n[plant]\n'
                          'tf = { num = [1], den = [1, 1] }\n[[controller]]\ntype = "gain"\n'
                          'k = 2\n', "m.toml")
    assert design.revision == "3"


# ---------------------------------------------------------------------- state space
SS_A = [[0.0, 1.0, 0.0, 0.0], [-4.0, -0.4, 2.0, 0.0], [0.0, 0.0, 0.0, 1.0],
        [1.0, 0.0, -900.0, -1.2]]
SS_B = [[0.0], [1.0], [0.0], [0.5]]
SS_C = [[1.0, 0.0, 0.3, 0.0]]


@pytest.mark.parametrize("d_text,d", [("0.0", 0.0), ("[[0.02]]", 0.02)])
def test_ss_plant_round_trip(d_text, d):
    # reference: python-control ss(a, b, c, d) frequency response (a lightly damped 30 rad/s
    # mode coupled to a slow one)
    text = (f'[design]\nname = "ss"\n[plant]\nss = {{ a = {SS_A}, b = {SS_B}, c = {SS_C}, '
            f'd = {d_text} }}\n[[controller]]\ntype = "gain"\nk = 1.0\n')
    design = parse_design(text, "ss.toml")
    plant = design.variants[0]
    assert plant.form == "ss"
    ref = control.ss(SS_A, SS_B, SS_C, [[d]])
    w = np.concatenate([W, [29.0, 30.0, 31.0]])
    np.testing.assert_allclose(plant.model.freqresp(w), _ref(ref, w), rtol=1e-8)
    np.testing.assert_allclose(np.sort_complex(plant.model.poles),
                               np.sort_complex(np.linalg.eigvals(np.array(SS_A))), rtol=1e-10)


# ---------------------------------------------------------------------- hz
HZ = """\
[design]
name = "hz design"
frequency_unit = "hz"

[plant]
zpk = { zeros = [-3.0], poles = [0.0, [-0.5, 40.0]], gain = 2.0 }

[[plant.variants]]
name = "stiff"
zpk = { poles = [0.0, -1.0], gain = 5.0 }

[[plant.variants]]
name = "as tf"
tf = { num = [1.0], den = [1.0, 2.0] }

[[controller]]
type = "lead"
zero = 2.0
pole = 8.0

[[controller]]
type = "notch"
freq = 40.0
depth_db = 20.0

[sensor]
zpk = { poles = [-100.0], gain = 628.3185307179587 }

[requirements]
reference_band = 0.5
crossover_min = 1.0
crossover_max = 10.0
settling_time = 0.8
"""


def test_hz_converts_every_frequency():
    d = parse_design(HZ, "hz.toml")
    f = 2 * math.pi
    assert d.frequency_unit == "hz"
    # plant zpk roots ×2π, gain multiplying the monic factors of the converted roots
    ref = control.zpk([-3 * f], [0.0, complex(-0.5 * f, 40 * f), complex(-0.5 * f, -40 * f)],
                      2.0)
    np.testing.assert_allclose(d.variants[0].model.freqresp(W), _ref(ref), rtol=1e-10)
    np.testing.assert_allclose(d.variants[1].model.poles, [-f, 0.0], atol=1e-12)
    assert d.variants[1].model.gain == 5.0
    # tf coefficients are in s (rad/s) and are not converted
    np.testing.assert_allclose(d.variants[2].model.poles, [-2.0])
    assert d.controller[0].params["zero"] == pytest.approx(2 * f)
    assert d.controller[0].params["pole"] == pytest.approx(8 * f)
    assert d.controller[1].params["freq"] == pytest.approx(40 * f)
    # the notch sits on the plant's mode at 40 Hz: −20 dB there
    assert abs(d.controller[1].model.freqresp([40 * f])[0]) == pytest.approx(0.1, rel=1e-9)
    np.testing.assert_allclose(d.sensor.poles, [-100 * f])
    assert d.sensor.low_frequency_coefficient() == pytest.approx(1.0, rel=1e-12)
    req = d.requirements
    assert req.reference_band_rad_s == pytest.approx(0.5 * f)
    assert req.values["crossover_min"] == pytest.approx(f)
    assert req.values["crossover_max"] == pytest.approx(10 * f)
    assert req.settling_time_s == 0.8            # seconds: not converted


def test_hz_and_rad_s_files_give_the_same_loop():
    f = 2 * math.pi
    rad = parse_design(f"""
[design]
name = "same in rad/s"
[plant]
zpk = {{ zeros = [{-3 * f}], poles = [0.0, [{-0.5 * f}, {40 * f}]], gain = 2.0 }}
[[controller]]
type = "lead"
zero = {2 * f}
pole = {8 * f}
[[controller]]
type = "notch"
freq = {40 * f}
depth_db = 20.0
""", "rad.toml")
    hz = parse_design(HZ, "hz.toml")
    a = rad.loop(rad.variants[0]).rational.freqresp(W)
    b = hz.loop(hz.variants[0]).controller * hz.variants[0].model
    np.testing.assert_allclose(b.freqresp(W), a, rtol=1e-10)


def test_stage_inline_form_equals_direct_keys():
    base = '[design]\nname = "x"\n[plant]\ntf = { num = [1], den = [1, 1] }\n[[controller]]\n'
    direct = parse_design(base + 'type = "tf"\nnum = [2.0, 1.0]\nden = [1.0, 5.0]\n', "a.toml")
    inline = parse_design(base + 'type = "tf"\ntf = { num = [2.0, 1.0], den = [1.0, 5.0] }\n',
                          "b.toml")
    np.testing.assert_allclose(inline.controller[0].model.freqresp(W),
                               direct.controller[0].model.freqresp(W), rtol=1e-14)
    assert dict(inline.controller[0].params) == dict(direct.controller[0].params)


# ---------------------------------------------------------------------- sample designs
EXPECTED_SAMPLES = {
    # file: (variant names, stage types, frequency unit)
    "conveyor_axis.toml": (("nominal", "heavy load", "light load"),
                           ("gain", "lead", "lag"), "rad/s"),
    "tank_level.toml": (("nominal", "slow valve", "high level"), ("pi",), "rad/s"),
    "gimbal_rate.toml": (("nominal", "stiff mount"), ("pi", "notch"), "hz"),
    "levitation_lead.toml": (("nominal", "light ball"), ("gain", "lead"), "rad/s"),
    "hoist_lag_tail.toml": (("nominal",), ("gain", "lag"), "rad/s"),
    "pump_pressure.toml": (("nominal", "long delivery line", "two pumps"), ("tf", "lowpass"),
                           "hz"),
    "spindle_sweep.toml": (("nominal", "identified model"), ("pi",), "hz"),
    "dancer_tension.toml": (("nominal",), ("pid",), "rad/s"),
}


def test_every_sample_design_is_expected():
    assert sorted(p.name for p in SAMPLES.glob("*.toml")) == sorted(EXPECTED_SAMPLES)


@pytest.mark.parametrize("name", sorted(EXPECTED_SAMPLES))
def test_sample_design_parses(name):
    design = load_design(SAMPLES / name)
    variants, stages, unit = EXPECTED_SAMPLES[name]
    assert tuple(v.name for v in design.variants) == variants
    assert tuple(st.type for st in design.controller) == stages
    assert design.frequency_unit == unit
    assert design.requirements.settling_time_s is not None


def _rational_feedback(design: Design, variant):
    """Reference → output closed loop C·P/(1 + C·P·H) built in python-control (no delay)."""
    loop = design.loop(variant)
    def sys(z):
        return control.zpk(z.zeros, z.poles, z.gain)
    return sys(loop.rational), control.feedback(sys(loop.forward), sys(loop.sensor))


@pytest.mark.parametrize(("name", "crossings", "rhp_open_loop"), [
    ("conveyor_axis.toml", 1, 0),
    ("gimbal_rate.toml", 3, 0),          # the 52 Hz peak crosses 0 dB twice more
    ("levitation_lead.toml", 1, 1),      # one open-loop pole at +30 rad/s
    ("hoist_lag_tail.toml", 1, 0),
])
def test_rational_samples_keep_their_character(name, crossings, rhp_open_loop):
    # reference: python-control closed-loop poles and stability_margins(returnall=True);
    # the samples' comments quote these properties, and the delay-free variants are checked
    design = load_design(SAMPLES / name)
    for variant in design.variants:
        if variant.delay_s or design.sensor_delay_s:
            continue
        L, T = _rational_feedback(design, variant)
        assert np.all(T.poles().real < 0), variant.name
        assert int(np.sum(L.poles().real > 0)) == rhp_open_loop
        _, pm, _, _, wgc, _ = control.stability_margins(L, returnall=True)
        assert len(wgc) == crossings, (variant.name, wgc)
        assert np.min(pm) > 45.0, (variant.name, pm)


def test_tank_level_reproduces_simc_robustness_figures():
    # Skogestad, J. Process Control 13 (2003), SIMC with τc = θ [memory]: L = e^(−θs)/(2θs),
    # GM 3.14, PM 61.4°, Ms 1.59 (REFERENCE_VALUES.md). L(jω) from python-control times the
    # exact delay, on a fine grid; the crossings are where this grid puts them.
    design = load_design(SAMPLES / "tank_level.toml")
    nominal = design.variants[0]
    assert nominal.delay_s == 8.0
    L, _ = _rational_feedback(design, nominal)
    w = np.linspace(0.01, 0.4, 390001)
    lw = np.array(L(1j * w)).ravel() * np.exp(-1j * w * nominal.delay_s)
    i_gc = np.argmin(np.abs(np.abs(lw) - 1.0))
    pm_deg = 180.0 + math.degrees(np.angle(lw[i_gc]))
    # first phase crossing (∠L = −180°, i.e. ∠(−L) = 0) is at π/(2θ) ≈ 0.196 rad/s
    i_pc = np.argmin(np.where(w < 0.3, np.abs(np.angle(-lw)), np.inf))
    assert w[i_pc] == pytest.approx(math.pi / 16, rel=1e-4)
    assert w[i_gc] == pytest.approx(1 / 16, rel=1e-4)          # 1/(2θ)
    assert pm_deg == pytest.approx(61.4, abs=0.05)
    assert 1 / abs(lw[i_pc]) == pytest.approx(3.14, abs=0.005)
    assert np.max(np.abs(1 / (1 + lw))) == pytest.approx(1.59, abs=0.005)
