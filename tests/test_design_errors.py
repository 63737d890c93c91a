"""Malformed design files: each is a DesignError (exit 2) naming the file, place and problem.

Every case is a complete design file written to tmp_path, with the ``where`` the error must
report and a fragment its message must contain.  The files differ from a valid design in one
place only, so each case tests exactly one check.
"""

from __future__ import annotations

import pytest

from loopwarden.design import load_design
from loopwarden.errors import DesignError

HEAD = '[design]\nname = "bad design"\n'
PLANT = "[plant]\nzpk = { zeros = [], poles = [0.0, -2.5, -40.0], gain = 130.0 }\n"
CTRL = '[[controller]]\ntype = "gain"\nk = 1.0\n'


def doc(*, head: str = HEAD, plant: str = PLANT, ctrl: str = CTRL, extra: str = "") -> str:
    return "\n".join(part for part in (head, plant, ctrl, extra) if part)


def stage(body: str) -> str:
    """A valid design whose second controller stage is ``body``."""
    return doc(ctrl=CTRL + "\n[[controller]]\n" + body + "\n")


CASES = [
    # (id, file text, where, message fragment)
    ("toml-syntax", doc(head='[design\nname = "x"\n'), "line 1, column", "TOML syntax error"),
    ("missing-design", doc(head=""), "design", "missing the [design] table"),
    ("missing-name", doc(head='[design]\nrevision = "A"\n'), "design.name",
     "missing required key 'name'"),
    ("missing-plant", doc(plant=""), "plant", "missing the [plant] table"),
    ("missing-controller", doc(ctrl=""), "controller", "no [[controller]] stage"),
    ("unknown-table", doc(extra='[controler]\ntype = "gain"\n'), "controler",
     "did you mean 'controller'?"),
    ("unknown-design-key", doc(head='[design]\nname = "x"\nfrequency_units = "hz"\n'),
     "design.frequency_units", "did you mean 'frequency_unit'?"),
    ("bad-frequency-unit", doc(head='[design]\nname = "x"\nfrequency_unit = "khz"\n'),
     "design.frequency_unit", "unknown frequency unit"),
    ("unknown-stage-key", stage('type = "lead"\nzero = 3.0\npoles = 30.0'), "controller[2].poles",
     "did you mean 'pole'?"),
    ("unknown-stage-type", doc(ctrl='[[controller]]\ntype = "leadd"\nzero = 1.0\npole = 2.0\n'),
     "controller[1].type", "did you mean 'lead'?"),
    ("missing-type", doc(ctrl="[[controller]]\nk = 1.0\n"), "controller[1].type",
     "missing required key 'type'"),
    ("lag-pole-above-zero", stage('type = "lag"\nzero = 0.1\npole = 1.0'), "controller[2].pole",
     "a lag needs pole < zero"),
    ("lead-zero-above-pole", stage('type = "lead"\nzero = 30.0\npole = 3.0'),
     "controller[2].pole", "a lead needs zero < pole"),
    ("lag-pole-at-origin", stage('type = "lag"\nzero = 0.1\npole = 0.0'), "controller[2].pole",
     "use type = 'pi' or 'integrator'"),
    ("string-for-number", doc(ctrl='[[controller]]\ntype = "gain"\nk = "2.0"\n'),
     "controller[1].k", "expected a number, got a string"),
    ("bool-for-number", doc(ctrl='[[controller]]\ntype = "gain"\nk = true\n'),
     "controller[1].k", "expected a number, got a boolean"),
    ("zero-gain", doc(ctrl='[[controller]]\ntype = "gain"\nk = 0.0\n'), "controller[1].k",
     "nonzero"),
    ("inf-frequency", stage('type = "lead"\nzero = inf\npole = 30.0'), "controller[2].zero",
     "expected a finite number"),
    ("nan-plant-pole",
     doc(plant="[plant]\nzpk = { poles = [0.0, nan], gain = 1.0 }\n"),
     "plant.zpk.poles[2]", "expected a finite number"),
    ("negative-ti", stage('type = "pi"\nkp = 1.0\nti = -2.0'), "controller[2].ti",
     "expected a positive number"),
    ("negative-delay", doc(plant=PLANT + "delay = -0.01\n"), "plant.delay", "≥ 0"),
    ("notch-depth-zero", stage('type = "notch"\nfreq = 10.0\ndepth_db = 0.0'),
     "controller[2].depth_db", "positive"),
    ("lowpass-order-3", stage('type = "lowpass"\nfreq = 10.0\norder = 3'),
     "controller[2].order", "expected one of 1, 2"),
    ("lowpass-zeta-order-1", stage('type = "lowpass"\nfreq = 10.0\nzeta = 0.5'),
     "controller[2].zeta", "only to a second-order"),
    ("improper-tf-stage", stage('type = "tf"\nnum = [1.0, 0.0, 0.0]\nden = [1.0, 1.0]'),
     "controller[2]", "improper"),
    ("improper-plant", doc(plant="[plant]\nzpk = { zeros = [-1.0, -2.0], poles = [-3.0], "
                                 "gain = 1.0 }\n"), "plant.zpk", "improper"),
    ("empty-denominator", doc(plant="[plant]\ntf = { num = [1.0], den = [] }\n"),
     "plant.tf.den", "empty array"),
    ("all-zero-denominator", doc(plant="[plant]\ntf = { num = [1.0], den = [0.0, 0.0] }\n"),
     "plant.tf.den", "every coefficient is zero"),
    ("all-zero-numerator", doc(plant="[plant]\ntf = { num = [0.0], den = [1.0, 1.0] }\n"),
     "plant.tf.num", "every coefficient is zero"),
    ("plant-two-forms", doc(plant="[plant]\ntf = { num = [1.0], den = [1.0, 1.0] }\n"
                                  "zpk = { poles = [-1.0], gain = 1.0 }\n"),
     "plant.zpk", "both 'tf' and 'zpk'"),
    ("plant-no-form", doc(plant="[plant]\ndelay = 0.1\n"), "plant",
     "no transfer function given"),
    ("plant-frd", doc(plant=PLANT + "frd = { file = 'meas.csv' }\n"), "plant.frd",
     "both 'zpk' and 'frd'"),
    ("sampling", doc(extra="[sampling]\nperiod = 0.0\n"), "sampling.period",
     "expected a positive number"),
    ("zpk-missing-gain", doc(plant="[plant]\nzpk = { poles = [-1.0] }\n"), "plant.zpk.gain",
     "missing required key 'gain'"),
    ("pair-negative-im", doc(plant="[plant]\nzpk = { poles = [[-1.0, -3.0]], gain = 1.0 }\n"),
     "plant.zpk.poles[1]", "im > 0"),
    ("pair-three-entries", doc(plant="[plant]\nzpk = { poles = [[-1.0, 3.0, 1.0]], "
                                     "gain = 1.0 }\n"), "plant.zpk.poles[1]", "complex pair"),
    ("ss-b-two-columns", doc(plant="[plant]\nss = { a = [[0.0, 1.0], [-2.0, -3.0]], "
                                   "b = [[0.0, 1.0], [1.0, 0.0]], c = [[1.0, 0.0]], d = 0.0 }\n"),
     "plant.ss.b", "one column"),
    ("ss-a-not-square", doc(plant="[plant]\nss = { a = [[0.0, 1.0]], b = [[1.0]], "
                                  "c = [[1.0]], d = 0.0 }\n"), "plant.ss.a", "square"),
    ("ss-ragged-row", doc(plant="[plant]\nss = { a = [[0.0, 1.0], [-2.0]], b = [[0.0], [1.0]], "
                                "c = [[1.0, 0.0]], d = 0.0 }\n"), "plant.ss.a[2]", "row 2 has 1"),
    ("ss-c-wrong-width", doc(plant="[plant]\nss = { a = [[0.0, 1.0], [-2.0, -3.0]], "
                                   "b = [[0.0], [1.0]], c = [[1.0]], d = 0.0 }\n"),
     "plant.ss.c", "expected 2 columns"),
    ("duplicate-variant", doc(plant=PLANT + '[[plant.variants]]\nname = "hot"\n'
                                            'zpk = { poles = [-1.0], gain = 1.0 }\n'
                                            '[[plant.variants]]\nname = "hot"\n'
                                            'zpk = { poles = [-2.0], gain = 1.0 }\n'),
     "plant.variants[2].name", "duplicate variant name"),
    ("variant-named-nominal", doc(plant=PLANT + '[[plant.variants]]\nname = "nominal"\n'
                                                'zpk = { poles = [-1.0], gain = 1.0 }\n'),
     "plant.variants[1].name", "reserved"),
    ("variant-without-name", doc(plant=PLANT + "[[plant.variants]]\n"
                                               "zpk = { poles = [-1.0], gain = 1.0 }\n"),
     "plant.variants[1].name", "missing required key 'name'"),
    ("sensor-integrator", doc(extra="[sensor]\nzpk = { poles = [0.0], gain = 1.0 }\n"),
     "sensor", "infinite DC gain"),
    ("sensor-zero-dc", doc(extra="[sensor]\ntf = { num = [1.0, 0.0], den = [1.0, 1.0] }\n"),
     "sensor", "zero DC gain"),
    ("unknown-requirement", doc(extra="[requirements]\nsettling_tim = 2.0\n"),
     "requirements.settling_tim", "did you mean 'settling_time'?"),
    ("settling-band-too-big", doc(extra="[requirements]\nsettling_band = 0.6\n"),
     "requirements.settling_band", "below 0.5"),
    ("negative-settling-time", doc(extra="[requirements]\nsettling_time = -1.0\n"),
     "requirements.settling_time", "positive"),
    ("crossover-order", doc(extra="[requirements]\ncrossover_min = 5.0\ncrossover_max = 2.0\n"),
     "requirements.crossover_max", "above crossover_min"),
    ("limits-unquoted-id", doc(extra="[limits.margin.phase]\nmin = 50.0\n"),
     'limits."margin"', 'quote a dotted rule id: [limits."margin.phase"]'),
    ("limits-typo", doc(extra='[limits."margin.phase"]\nwarn_mn = 50.0\n'),
     'limits."margin.phase".warn_mn', "did you mean 'warn_min'?"),
    ("limits-order", doc(extra='[limits."margin.phase"]\nmin = 50.0\nmax = 40.0\n'),
     'limits."margin.phase".max', "expected min below max"),
    ("waiver-date-string", doc(extra='[[waivers]]\nrule = "margin.phase"\nreason = "r"\n'
                                     'approved_by = "A. Engineer"\nexpires = "2027-03-31"\n'),
     "waivers[1].expires", "bare TOML date"),
    ("waiver-datetime", doc(extra='[[waivers]]\nrule = "margin.phase"\nreason = "r"\n'
                                  'approved_by = "A. Engineer"\nexpires = 2027-03-31T12:00:00\n'),
     "waivers[1].expires", "no time of day"),
    ("waiver-no-approver", doc(extra='[[waivers]]\nrule = "margin.phase"\nreason = "r"\n'
                                     "expires = 2027-03-31\n"),
     "waivers[1].approved_by", "missing required key 'approved_by'"),
    ("waiver-unknown-variant", doc(extra='[[waivers]]\nrule = "margin.phase"\nreason = "r"\n'
                                         'approved_by = "A"\nexpires = 2027-03-31\n'
                                         'variant = "nominl"\n'),
     "waivers[1].variant", "did you mean 'nominal'?"),
    ("controller-as-table", doc(ctrl='[controller]\ntype = "gain"\nk = 1.0\n'), "controller",
     "expected an array of tables [[controller]]"),
    ("stage-form-key-hint", stage('type = "gain"\nk = 1.0\ntf = { num = [1.0], den = [1.0] }'),
     "controller[2].tf", "type = 'tf'"),
    ("pid-missing-td", stage('type = "pid"\nkp = 1.0\nti = 2.0'), "controller[2].td",
     "missing required key 'td'"),
]


@pytest.mark.parametrize(("text", "where", "fragment"), [c[1:] for c in CASES],
                         ids=[c[0] for c in CASES])
def test_malformed_design(tmp_path, text, where, fragment):
    path = tmp_path / "bad.toml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(DesignError) as info:
        load_design(path)
    err = info.value
    assert err.exit_code == 2
    assert err.file == str(path)
    assert err.where is not None and err.where.startswith(where), err.where
    message = str(err)
    assert fragment in message, message
    # The message names the file and the offending table/key.
    assert str(path) in message and where in message


def test_cases_are_many_and_distinct():
    assert len(CASES) >= 20
    assert len({c[0] for c in CASES}) == len(CASES)
    assert len({c[1] for c in CASES}) == len(CASES)


def test_file_not_found(tmp_path):
    path = tmp_path / "absent.toml"
    with pytest.raises(DesignError, match="file not found") as info:
        load_design(path)
    assert info.value.exit_code == 2 and info.value.file == str(path)


def test_directory_is_not_a_design(tmp_path):
    with pytest.raises(DesignError, match="directory"):
        load_design(tmp_path)


def test_not_utf8(tmp_path):
    path = tmp_path / "latin1.toml"
    path.write_bytes(doc().encode("utf-8") + b'\n# caf\xe9\n')
    with pytest.raises(DesignError, match="not UTF-8"):
        load_design(path)


def test_design_error_is_a_value_error():
    # Callers that only know builtins can still catch it.
    with pytest.raises(ValueError):
        load_design("/nonexistent/loopwarden/design.toml")
