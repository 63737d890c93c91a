"""The JSON contract: the shipped JSON Schema, the key table behind the JSON, the enums.

Every review of every sample with every shipped rule set validates (a measured plant,
spindle_sweep, and a sampled loop, pump_pressure, among them), so do a baseline review,
a batch, and a design with a load disturbance, a waiver and a hidden cancellation;
evidence with a wrong type, a missing key, an unknown status or a misspelt infinity does
not.  Reference: the JSON Schema draft 2020-12 meta-schema, through the jsonschema
package; the schema's numbers convention ("inf" strings) from json_out's module doc.
"""

from __future__ import annotations

import copy
import dataclasses
import json
import textwrap
from pathlib import Path

import jsonschema
import pytest

from conftest import schema_validator
from loopwarden import schema
from loopwarden.cli import main
from loopwarden.design.loader import load_design
from loopwarden.report import json_out
from loopwarden.review_run import run_review
from loopwarden.ruleset.model import Bound, Level, LimitKey, Severity, Status, Verdict

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = sorted((ROOT / "sample_designs").glob("*.toml"))
SETS = ("general", "motion-servo", "process-control")
DATE = "2026-06-01"


@pytest.fixture(scope="module")
def validator() -> jsonschema.Draft202012Validator:
    return schema_validator()


def _errors(validator: jsonschema.Draft202012Validator, doc: object) -> list[str]:
    return [f"/{'/'.join(map(str, e.absolute_path))}: {e.message}"
            for e in validator.iter_errors(doc)]


def _review_json(design: Path, ruleset: str = "general", **kw: object) -> dict:
    review = run_review(load_design(str(design)), ruleset, today=DATE,
                        tool_version="0.0.0", **kw)   # type: ignore[arg-type]
    return json.loads(json_out.render(review))


# --------------------------------------------------------------------------- the file
def test_schema_is_a_valid_draft_2020_12_schema() -> None:
    doc = schema.load()
    assert doc["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    jsonschema.Draft202012Validator.check_schema(doc)


def test_schema_command_prints_the_shipped_file(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["schema"]) == 0
    out = capsys.readouterr().out
    shipped = (ROOT / "src" / "loopwarden" / "schema" / schema.FILE).read_text(encoding="utf-8")
    assert out == shipped
    assert json.loads(out) == schema.load()


def test_schema_ships_as_package_data() -> None:
    text = (ROOT / "pyproject.toml").read_text(encoding="utf-8")
    assert '"loopwarden.schema" = ["*.json"]' in text and '"loopwarden.schema",' in text


def test_infinity_is_a_number_or_an_inf_string(validator) -> None:
    real = {"$ref": "#/$defs/real", "$defs": schema.load()["$defs"]}
    v = jsonschema.Draft202012Validator(real)
    for ok in (1.5, -3, 0, "inf", "-inf"):
        assert v.is_valid(ok), ok
    for bad in ("Infinity", "nan", "1.5", None, True, [1.0]):
        assert not v.is_valid(bad), bad


# --------------------------------------------------------------------------- reviews
@pytest.mark.parametrize("ruleset", SETS)
@pytest.mark.parametrize("sample", SAMPLES, ids=lambda p: p.stem)
def test_every_sample_review_validates(validator, sample: Path, ruleset: str) -> None:
    doc = _review_json(sample, ruleset)
    assert _errors(validator, doc) == []
    if sample.stem == "spindle_sweep":                      # a measured plant
        assert doc["design"]["measured_plants"]
        assert any(v["frequency_coverage"] is not None for v in doc["variants"])
    if sample.stem == "pump_pressure":                      # a sampled loop
        assert doc["design"]["sampling"] is not None
        assert all(v["sampling"] is not None for v in doc["variants"])


def test_baseline_review_validates(validator) -> None:
    sample = ROOT / "sample_designs" / "conveyor_axis.toml"
    doc = _review_json(sample, baseline=str(sample))
    assert doc["baseline"] is not None
    assert _errors(validator, doc) == []


EXTRAS = """
[design]
name = "Dosing pump with a hidden mode"
[plant]
zpk = { zeros = [], poles = [1.0, -2.0], gain = 1.0 }
[[controller]]
type = "tf"
num = [4.0, -4.0]
den = [1.0, 5.0]
[disturbance]
size = 0.5
[[waivers]]
rule = "margin.phase"
reason = "bench trial only"
approved_by = "I. Tanaka"
expires = 2030-01-01
"""


def test_disturbance_waiver_and_cancellation_validate(validator, tmp_path: Path) -> None:
    path = tmp_path / "extras.toml"
    path.write_text(textwrap.dedent(EXTRAS), encoding="utf-8")
    doc = _review_json(path)
    assert doc["design"]["waivers"][0]["expires"] == "2030-01-01"
    assert doc["variants"][0]["internal_stability"]["cancellations"]
    assert _errors(validator, doc) == []


def test_batch_reviews_validate(validator, tmp_path: Path) -> None:
    out = tmp_path / "out"
    picked = [str(ROOT / "sample_designs" / f"{s}.toml") for s in ("tank_level", "gimbal_rate")]
    assert main(["batch", *picked, "--out", str(out), "--jobs", "1", "--date", DATE,
                 "--quiet"]) in (0, 1)
    reviews = sorted(p for p in out.glob("*.json") if p.stem in ("tank_level", "gimbal_rate"))
    assert len(reviews) == 2
    for p in reviews:
        assert _errors(validator, json.loads(p.read_text(encoding="utf-8"))) == [], p.name


# --------------------------------------------------------------------------- tampering
@pytest.fixture(scope="module")
def good() -> dict:
    return _review_json(ROOT / "sample_designs" / "tank_level.toml")


def _tampered(doc: dict, change) -> dict:  # type: ignore[no-untyped-def]
    out = copy.deepcopy(doc)
    change(out)
    return out


TAMPERING = {
    "status maybe": lambda d: d["findings"][0].update(status="maybe"),
    "verdict unknown": lambda d: d.update(verdict="unknown"),
    "severity typo": lambda d: d["ruleset"]["rules"][0].update(severity="fatal"),
    "missing verdict": lambda d: d.pop("verdict"),
    "missing finding rule": lambda d: d["findings"][0].pop("rule"),
    "missing margins": lambda d: d["variants"][0].pop("margins"),
    "phase margin as text": lambda d: d["variants"][0]["margins"].update(
        phase_margin_deg="41.6"),
    "infinity misspelt": lambda d: d["variants"][0]["margins"].update(
        gain_margin_db="Infinity"),
    "stable as a string": lambda d: d["variants"][0].update(closed_loop_stable="yes"),
    "count negative": lambda d: d["counts"].update(fail=-1),
    "unknown key in a variant": lambda d: d["variants"][0].update(phase_margin=45.0),
    "unknown key at the top": lambda d: d.update(verdikt="pass"),
    "pole without im": lambda d: d["variants"][0]["stability"]["closed_loop_poles"][0].pop(
        "im"),
    "date not a date": lambda d: d.update(date="01/06/2026"),
    "wrong schema id": lambda d: d.update(schema="loopwarden-review/2"),
}


def test_untampered_evidence_validates(validator, good: dict) -> None:
    assert _errors(validator, good) == []
    assert good["variants"][0]["stability"]["closed_loop_poles"]


@pytest.mark.parametrize("name", TAMPERING)
def test_tampered_evidence_fails(validator, good: dict, name: str) -> None:
    assert _errors(validator, _tampered(good, TAMPERING[name])), name


def test_an_incomplete_saturation_object_is_refused(validator, good: dict) -> None:
    doc = _tampered(good, lambda d: d["variants"][1].update(
        saturation={"settling_time_s": 4.2, "windup_cost_s": 1.1}))
    assert _errors(validator, doc)


# --------------------------------------------------------------------------- key table
#: result type → the schema definition of its JSON object (keys must agree).
DEFINITIONS = {
    "Stability": "stability", "InternalStability": "internalStability",
    "Cancellation": "cancellation", "Margins": "margins", "GainCrossing": "gainCrossing",
    "PhaseCrossing": "phaseCrossing", "Sensitivity": "sensitivity", "Tracking": "tracking",
    "StepMetrics": "step", "SlowPair": "slowPair", "SlowTail": "slowTail", "Boost": "boost",
    "StageCrossoverCost": "stageCost", "IntegralAlternative": "integralAlternative",
    "RequirementCheck": "requirementCheck", "SampledInfo": "sampling",
    "FrequencyCoverage": "coverage", "DisturbanceResponse": "disturbance",
    "Effort": "effort", "Sampling": "designSampling", "Waiver": "waiver",
    "Actuator": "actuator", "SaturatedStep": "saturation", "SaturatedLoad": "saturatedLoad",
}
#: keys the JSON adds to an object beyond its fields (DESIGN.md §5 flat keys).
ADDED = {"integralAlternative": {"phase_margin_deg", "gain_margin_db", "system_type",
                                 "settling_time_s"},
         # the variant's saturation object: the reference step's figures, then the limits
         "saturation": {"min", "max", "rate_limit_per_s", "anti_windup", "tracking_time_s",
                        "method", "step_s", "load"}}


@pytest.mark.parametrize("cls", json_out.OBJECT_KEYS, ids=lambda c: c.__name__)
def test_every_field_has_a_json_key(cls: type) -> None:
    """A new field must be given its key (or the table misses a rename)."""
    fields = {f.name for f in dataclasses.fields(cls)}
    attributes = [attr for _key, attr in json_out.OBJECT_KEYS[cls]]
    assert sorted(attributes) == sorted(fields)


@pytest.mark.parametrize("cls", json_out.OBJECT_KEYS, ids=lambda c: c.__name__)
def test_key_table_and_schema_agree(cls: type) -> None:
    definition = schema.load()["$defs"][DEFINITIONS[cls.__name__]]
    keys = {key for key, _attr in json_out.OBJECT_KEYS[cls]} | ADDED.get(
        DEFINITIONS[cls.__name__], set())
    assert set(definition["required"]) == keys
    assert definition["additionalProperties"] is False


def test_an_unmapped_result_object_is_refused() -> None:
    @dataclasses.dataclass(frozen=True)
    class Stray:
        x: float = 1.0

    with pytest.raises(TypeError, match="OBJECT_KEYS"):
        json_out.plain(Stray())


def test_enum_values_are_the_schema_enums() -> None:
    defs = schema.load()["$defs"]
    assert defs["status"]["enum"] == [s.value for s in Status]
    assert defs["severity"]["enum"] == [s.value for s in Severity]
    assert defs["verdict"]["enum"] == [v.value for v in Verdict]
    assert set(defs["counts"]["required"]) == {s.value for s in Status}


# --------------------------------------------------------------------------- enums
def test_enums_compare_equal_to_strings() -> None:
    assert Status.FAIL == "fail" and Status.NA == "n/a" and Status.WAIVED == "waived"
    assert Severity.INFO == "info" and Verdict.PASS == "pass"
    assert f"{Status.FAIL}" == "fail" and str(Severity.WARN) == "warn"
    assert json.dumps({"s": Status.ERROR}) == '{"s": "error"}'
    assert Status("n/a") is Status.NA and {Status.PASS: 1}["pass"] == 1


def test_failing_finding_status_equals_the_string(tmp_path: Path) -> None:
    # Ogata's lag loop, PM 41.61° < 45° [memory, matched in test_cli]: margin.phase fails.
    from helpers import ogata_lag_design

    path = tmp_path / "ogata.toml"
    path.write_text(textwrap.dedent(ogata_lag_design("Conveyor axis")), encoding="utf-8")
    review = run_review(load_design(str(path)), "general", today=DATE, tool_version="0")
    f = next(f for f in review.findings if f.rule == "margin.phase")
    assert f.status == "fail" and f.status is Status.FAIL
    assert review.verdict == "fail" and review.verdict is Verdict.FAIL
    assert f.limit_key is not None and f.limit_key.bound == "min"
    rule = next(r for r in review.ruleset.rules if r.id == "margin.phase")
    assert rule.severity == "fail" and isinstance(rule.severity, Severity)


# --------------------------------------------------------------------------- limit keys
@pytest.mark.parametrize(("name", "quantity", "bound", "level"), [
    ("min", "", Bound.MIN, Level.FAIL), ("warn_min", "", Bound.MIN, Level.WARN),
    ("max", "", Bound.MAX, Level.FAIL), ("warn_max", "", Bound.MAX, Level.WARN),
    ("max_lower", "lower", Bound.MAX, Level.FAIL),
    ("warn_max_iae", "iae", Bound.MAX, Level.WARN),
    ("max_recovery", "recovery", Bound.MAX, Level.FAIL),
])
def test_limit_keys_read_once(name: str, quantity: str, bound: Bound, level: Level) -> None:
    key = LimitKey.parse(name)
    assert (key.quantity, key.bound, key.level) == (quantity, bound, level)
    assert LimitKey.parse(key.fail_key) == LimitKey(key.fail_key, quantity, bound, Level.FAIL)


@pytest.mark.parametrize("name", ["minimum", "warn_", "max_", "warn_min_", "upper", "Min"])
def test_malformed_limit_keys_are_refused(name: str) -> None:
    with pytest.raises(ValueError, match="limit key"):
        LimitKey.parse(name)


def test_every_catalog_key_is_read_at_load() -> None:
    from loopwarden.ruleset.checks import CHECKS
    from loopwarden.ruleset.loader import load_ruleset

    for check in CHECKS.values():
        assert set(check.limit_specs) == set(check.limit_keys)
    for rule in load_ruleset("general").rules:
        assert rule.limit_specs == CHECKS[rule.check].limit_specs


def test_bounds_judge_and_tighten() -> None:
    # A minimum is breached below it and tightened upwards; a maximum the other way.
    assert Bound.MIN.breached(44.9, 45.0) and not Bound.MIN.breached(45.0, 45.0)
    assert Bound.MAX.breached(20.1, 20.0) and not Bound.MAX.breached(20.0, 20.0)
    assert Bound.MIN.stricter(45.0, 50.0) and Bound.MAX.stricter(20.0, 15.0)
    assert (Bound.MIN.sign, Bound.MAX.sign) == ("≥", "≤")


def test_an_incomplete_uncertainty_object_is_refused(validator, good: dict) -> None:
    doc = _tampered(good, lambda d: d.update(
        uncertainty={"samples": 200, "seed": 1, "pass_fraction": 0.97}))
    assert _errors(validator, doc)
