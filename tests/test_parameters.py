"""Uncertain parameters: ``[parameters]`` and ``[sweep]`` read, substituted and checked.

Every bad case is a complete design differing from a valid one in one place; the error
must name the file's place (``parameters.K.min``) and the problem.  References: the
substituted models are compared with the same design written with plain numbers
[derived] (substitution is the identity on the model).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from loopwarden.design.loader import design_at, parse_design
from loopwarden.errors import DesignError

HEAD = '[design]\nname = "uncertain axis"\n'
PARAMS = """[parameters]
K  = { nominal = 130.0, min = 100.0, max = 160.0 }
p1 = { nominal = -2.5, min = -3.0, max = -2.0 }
Td = { nominal = 0.004, min = 0.002, max = 0.008 }
"""
PLANT = """[plant]
zpk = { zeros = [], poles = [0.0, "p1", -40.0], gain = "K" }
delay = "Td"
"""
CTRL = """[[controller]]
type = "gain"
k = 6.0

[[controller]]
type = "lead"
zero = 3.0
pole = 30.0
"""


def doc(*, params: str = PARAMS, plant: str = PLANT, extra: str = "") -> str:
    return "\n".join(p for p in (HEAD, params, plant, CTRL, extra) if p)


def test_nominal_values_replace_the_names() -> None:
    # [derived] the nominal design equals the same file written with the nominal numbers.
    d = parse_design(doc(), "axis.toml")
    plain = parse_design(doc(params="", plant="[plant]\nzpk = { zeros = [], poles = "
                                               "[0.0, -2.5, -40.0], gain = 130.0 }\n"
                                               "delay = 0.004\n"), "plain.toml")
    a, b = d.variants[0], plain.variants[0]
    np.testing.assert_array_equal(a.model.poles, b.model.poles)
    assert a.model.gain == b.model.gain and a.delay_s == b.delay_s
    assert d.parameters is not None and plain.parameters is None
    assert d.parameters.uses["K"] == ("plant.zpk.gain",)
    assert d.sweep is None


def test_design_at_a_point_and_inherited_delay() -> None:
    text = doc(extra="") .replace("[[controller]]", '[[plant.variants]]\nname = "light"\n'
                                  'zpk = { poles = [0.0, -3.2, -40.0], gain = "K" }\n\n'
                                  "[[controller]]", 1)
    d = parse_design(text, "axis.toml")
    at = design_at(d, {"K": 100.0, "p1": -3.0, "Td": 0.008})
    assert at.variants[0].model.gain == 100.0
    assert -3.0 in at.variants[0].model.poles.real
    # The variant gives no delay: it inherits the plant's, the parameter Td.
    assert at.variants[1].delay_s == 0.008 and at.variants[1].model.gain == 100.0


def test_hz_file_scales_named_roots() -> None:
    text = doc().replace('name = "uncertain axis"', 'name = "x"\nfrequency_unit = "hz"')
    d = parse_design(text, "hz.toml")
    assert -2.5 * 2.0 * math.pi in d.variants[0].model.poles.real


def test_complex_pair_of_names_and_sweep_table() -> None:
    params = PARAMS + 'wr = { nominal = 40.0, min = 34.0, max = 46.0, ' \
                      'distribution = "normal", sigma = 2.0 }\n'
    plant = ('[plant]\nzpk = { zeros = [], poles = [0.0, "p1", [-2.0, "wr"]], gain = "K" }\n'
             'delay = "Td"\n')
    d = parse_design(doc(params=params, plant=plant,
                         extra="[sweep]\nsamples = 64\nseed = 3\ncorners = false\n"),
                     "pair.toml")
    assert sorted(d.variants[0].model.poles.imag) == [-40.0, 0.0, 0.0, 40.0]
    assert d.sweep is not None and (d.sweep.samples, d.sweep.seed, d.sweep.corners,
                                    d.sweep.worst_case) == (64, 3, False, True)


BAD = [
    ("unknown-name", doc(plant=PLANT.replace('"K"', '"Kx"')), "plant.zpk.gain",
     "unknown parameter 'Kx'"),
    ("unused-name", doc(params=PARAMS + "q = { nominal = 1.0, min = 0.5, max = 2.0 }\n"),
     "parameters.q", "is not used"),
    ("nominal-outside", doc(params=PARAMS.replace("nominal = -2.5", "nominal = -3.5")),
     "parameters.p1.nominal", "outside the range"),
    ("min-not-below-max", doc(params=PARAMS.replace("min = 100.0", "min = 170.0")),
     "parameters.K.max", "expected max above min"),
    ("gain-range-holds-zero", doc(params=PARAMS.replace("min = 100.0", "min = -100.0")),
     "parameters.K", "contains 0"),
    ("improper-tf", doc(params=PARAMS + "a = { nominal = 1.0, min = -1.0, max = 2.0 }\n",
                        plant='[plant]\ntf = { num = ["K", 1.0], den = ["a", "p1", 2.0] }\n'
                              'delay = "Td"\n'),
     "parameters.a", "improper"),
    ("bad-distribution", doc(params=PARAMS.replace("max = 0.008 }",
                                                   'max = 0.008, distribution = "gauss" }')),
     "parameters.Td.distribution", "unknown value"),
    ("normal-without-sigma", doc(params=PARAMS.replace(
        "max = 0.008 }", 'max = 0.008, distribution = "normal" }')),
     "parameters.Td.sigma", "standard deviation"),
    ("sigma-not-normal", doc(params=PARAMS.replace("max = 0.008 }", "max = 0.008, sigma = 1 }")),
     "parameters.Td.sigma", "applies only"),
    ("log-uniform-through-zero", doc(params=PARAMS.replace(
        "p1 = { nominal = -2.5, min = -3.0, max = -2.0 }",
        'p1 = { nominal = -2.5, min = -3.0, max = 2.0, distribution = "log-uniform" }')),
     "parameters.p1.min", "must not contain 0"),
    ("negative-delay-at-min", doc(params=PARAMS.replace("min = 0.002", "min = -0.002")),
     "parameters.Td.min", "with Td = -0.002"),
    ("pair-im-through-zero", doc(
        params=PARAMS + "w = { nominal = 4.0, min = -1.0, max = 5.0 }\n",
        plant='[plant]\nzpk = { poles = [0.0, "p1", [-1.0, "w"]], gain = "K" }\n'
              'delay = "Td"\n'), "parameters.w.min", "im > 0"),
    ("name-in-controller", doc().replace("k = 6.0", 'k = "K"'), "controller[1].k",
     "expected a number, got a string"),
    ("sweep-without-parameters", doc(params="", plant="[plant]\nzpk = { poles = [-1.0], "
                                                      "gain = 1.0 }\n",
                                     extra="[sweep]\nsamples = 10\n"), "sweep",
     "needs uncertain parameters"),
    ("bad-sweep-key", doc(extra="[sweep]\nsample = 10\n"), "sweep.sample",
     "did you mean 'samples'?"),
    ("bad-sweep-count", doc(extra="[sweep]\nsamples = 0\n"), "sweep.samples",
     "within 1 .. 1000000"),
    ("bad-sweep-flag", doc(extra='[sweep]\ncorners = "yes"\n'), "sweep.corners",
     "true or false"),
]


@pytest.mark.parametrize(("text", "where", "fragment"), [c[1:] for c in BAD],
                         ids=[c[0] for c in BAD])
def test_bad_parameters(text: str, where: str, fragment: str) -> None:
    with pytest.raises(DesignError) as info:
        parse_design(text, "bad.toml")
    err = info.value
    assert err.file == "bad.toml"
    assert err.where == where, str(err)
    assert fragment in str(err)
    assert err.exit_code == 2


def test_distributions_map_the_unit_interval() -> None:
    from scipy.stats import truncnorm

    from loopwarden.design.parameters import Parameter

    u = np.array([0.0, 0.1, 0.5, 0.9, 1.0])
    uni = Parameter(name="a", nominal=1.0, min=0.0, max=4.0)
    np.testing.assert_allclose(uni.from_unit(u), 4.0 * u)
    # [derived] log-uniform: ln x uniform, so the median is the geometric mean, the ends
    # are the ends; a negative range keeps the map increasing.
    log = Parameter(name="b", nominal=10.0, min=1.0, max=100.0, distribution="log-uniform")
    np.testing.assert_allclose(log.from_unit(u), 10.0 ** (2.0 * u))
    neg = Parameter(name="c", nominal=-10.0, min=-100.0, max=-1.0,
                    distribution="log-uniform")
    assert np.all(np.diff(neg.from_unit(u)) > 0) and neg.from_unit(np.array([0.5]))[0] == \
        pytest.approx(-10.0)
    # [reference library] scipy.stats.truncnorm: the truncated normal's quantiles.
    nor = Parameter(name="d", nominal=40.0, min=34.0, max=46.0, distribution="normal",
                    sigma=2.0)
    ref = truncnorm.ppf(u, -3.0, 3.0, loc=40.0, scale=2.0)
    np.testing.assert_allclose(nor.from_unit(u), ref)
    assert nor.from_unit(np.array([0.5]))[0] == pytest.approx(40.0)


def test_corners_all_and_the_stated_subset() -> None:
    from loopwarden.analysis.sweep import corner_points

    c = corner_points(np.zeros(3), np.ones(3), 0)
    assert sorted(map(tuple, c)) == sorted({(a, b, d) for a in (0, 1) for b in (0, 1)
                                            for d in (0, 1)})
    big = corner_points(np.zeros(12), np.ones(12), 7)
    assert big.shape == (1024, 12) and set(np.unique(big)) == {0.0, 1.0}
    assert big[0].sum() == 0 and big[1].sum() == 12
    assert all(big[2 + i].sum() == 1 and big[2 + i][i] == 1 for i in range(12))
    np.testing.assert_array_equal(big, corner_points(np.zeros(12), np.ones(12), 7))


def test_sample_designs_have_no_uncertainty() -> None:
    import json
    from pathlib import Path

    from loopwarden.design.loader import load_design
    from loopwarden.report import renderer
    from loopwarden.review_run import run_review

    path = Path(__file__).parents[1] / "sample_designs" / "tank_level.toml"
    doc = json.loads(renderer("json").render(run_review(load_design(path),
                                                        today="2026-12-01")))
    assert doc["uncertainty"] is None
    assert not any(f["variant"] and f["variant"].endswith("(worst case)")
                   for f in doc["findings"])
