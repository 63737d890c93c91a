"""JSON evidence: DESIGN.md §5 keys, conventions (inf, null, complex, rad/s), determinism.

Loops: the lag examples of REFERENCE_VALUES.md — Ogata (PM 41.61°, GM 14.30 dB, slow pole
−0.12281 with residue 0.2857 [memory, matched]) and Franklin–Powell–Emami-Naeini
L = 10(10s+1)/(s(s+1)(100s+1)) (GM infinite, Kv = 10, PM 45.19° [derived]).
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import math
import textwrap
from pathlib import Path

import pytest

from loopwarden.design.loader import load_design, parse_design
from loopwarden.report import json_out
from loopwarden.review_run import run_review

RULES_DIR = Path(__file__).resolve().parents[1] / "rules"

FPE = """
[design]
name = "FPE lag"
revision = "B"
[plant]
zpk = { zeros = [], poles = [0.0, -1.0], gain = 1.0 }
[[plant.variants]]
name = "slow motor"
zpk = { zeros = [], poles = [0.0, -0.8], gain = 0.8 }
[[controller]]
type = "gain"
k = 1.0
[[controller]]
type = "lag"
zero = 0.1
pole = 0.01
[requirements]
settling_time = 20.0
reference_band = 0.05
"""


def make(tmp_path: Path, text: str, name: str = "design.toml"):
    path = tmp_path / name
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return load_design(str(path))


@pytest.fixture(scope="module")
def fpe_review(tmp_path_factory: pytest.TempPathFactory):
    d = make(tmp_path_factory.mktemp("fpe"), FPE)
    return run_review(d, "general", today=dt.date(2025, 3, 14), tool_version="9.9.9")


@pytest.fixture(scope="module")
def doc(fpe_review) -> dict:
    return json.loads(json_out.render(fpe_review))


def test_contract_keys_are_present(doc: dict, fpe_review) -> None:
    assert doc["schema"] == "loopwarden-review/1"
    assert doc["verdict"] in ("pass", "fail")
    assert doc["design"]["name"] == "FPE lag"
    assert doc["design"]["sha256"] == fpe_review.design.sha256
    assert doc["ruleset"]["id"] == "general"
    assert doc["tool"]["version"] == "9.9.9"
    assert doc["date"] == "2025-03-14"
    assert [v["name"] for v in doc["variants"]] == ["nominal", "slow motor"]
    for v in doc["variants"]:
        assert isinstance(v["closed_loop_stable"], bool)
        for key in ("gain_margin_db", "gain_margin_lower_db", "phase_margin_deg",
                    "gain_crossover_rad_s", "phase_crossover_rad_s", "delay_margin_s",
                    "peak_sensitivity", "peak_complementary", "disk_margin"):
            assert key in v["margins"], key
        for key in ("system_type", "kp", "kv", "ka"):
            assert key in v["tracking"], key
        for key in ("overshoot_pct", "settling_time_s", "rise_time_s"):
            assert key in v["step"], key
        for pair in v["slow_pairs"]:
            assert {"pole", "zero", "residue", "tail_time_s"} <= set(pair)
        assert v["boost"], "the lag stage is a boost stage"
        for b in v["boost"]:
            assert {"stage", "dc_boost", "band_2x_rad_s", "band_3db_rad_s"} <= set(b)
        alt = v["integral_alternative"]
        assert {"phase_margin_deg", "system_type", "settling_time_s"} <= set(alt)
    assert len(doc["findings"]) == len(fpe_review.findings)
    for f in doc["findings"]:
        assert {"rule", "check", "status", "variant", "measured", "limit", "unit", "message",
                "limit_source"} <= set(f)


def test_values_and_conventions(doc: dict) -> None:
    nominal = doc["variants"][0]
    # FPE lag: no phase crossover → infinite gain margin as the string "inf" [derived]
    assert nominal["margins"]["gain_margin_db"] == "inf"
    assert nominal["margins"]["phase_crossover_rad_s"] is None          # n/a → null
    assert nominal["margins"]["phase_margin_deg"] == pytest.approx(45.19, abs=0.01)
    assert nominal["margins"]["gain_crossover_rad_s"] == pytest.approx(0.7906, abs=1e-4)
    assert nominal["tracking"]["kv"] == pytest.approx(10.0)
    assert nominal["tracking"]["kp"] == "inf"                           # type 1
    assert nominal["tracking"]["system_type"] == 1
    pair = nominal["slow_pairs"][0]
    assert set(pair["pole"]) == {"re", "im"}                            # complex as re/im
    assert pair["pole"]["re"] == pytest.approx(-0.10975, abs=1e-4)      # [derived]
    assert pair["residue"] == pytest.approx(0.1077, abs=1e-4)           # [derived]
    statuses = {f["status"] for f in doc["findings"]}
    assert statuses <= {"pass", "warn", "fail", "waived", "n/a", "error"}
    na = [f for f in doc["findings"] if f["status"] == "n/a" and f["rule"] == "margin.delay"]
    assert na and na[0]["limit"] is None
    assert doc["counts"]["n/a"] == sum(f["status"] == "n/a" for f in doc["findings"])
    assert "qualified engineer" in doc["cautions"]


def test_no_nan_and_only_json_types(doc: dict) -> None:
    def walk(x):
        if isinstance(x, float):
            assert math.isfinite(x)
        elif isinstance(x, dict):
            for v in x.values():
                walk(v)
        elif isinstance(x, list):
            for v in x:
                walk(v)
    walk(doc)


def test_hashes_are_of_the_file_bytes(tmp_path: Path) -> None:
    d = make(tmp_path, FPE)
    r = run_review(d, "general", today=dt.date(2025, 3, 14), tool_version="t")
    doc = json.loads(json_out.render(r))
    assert doc["design"]["sha256"] == hashlib.sha256(
        (tmp_path / "design.toml").read_bytes()).hexdigest()
    assert doc["ruleset"]["sha256"] == hashlib.sha256(
        (RULES_DIR / "general.toml").read_bytes()).hexdigest()
    assert doc["ruleset"]["files"][0]["sha256"] == doc["ruleset"]["sha256"]


def test_frequencies_are_rad_s_for_a_hz_design() -> None:
    rad = parse_design(textwrap.dedent(FPE), "rad.toml")
    two_pi = 2 * math.pi
    hz_text = textwrap.dedent(FPE).replace('revision = "B"', 'frequency_unit = "hz"')
    hz_text = hz_text.replace("poles = [0.0, -1.0]", f"poles = [0.0, {-1.0 / two_pi!r}]")
    hz_text = hz_text.replace("poles = [0.0, -0.8]", f"poles = [0.0, {-0.8 / two_pi!r}]")
    hz_text = hz_text.replace("zero = 0.1", f"zero = {0.1 / two_pi!r}")
    hz_text = hz_text.replace("pole = 0.01", f"pole = {0.01 / two_pi!r}")
    hz_text = hz_text.replace("reference_band = 0.05", f"reference_band = {0.05 / two_pi!r}")
    hz = parse_design(hz_text, "hz.toml")
    a = json.loads(json_out.render(run_review(rad, today="2025-01-01", tool_version="t")))
    b = json.loads(json_out.render(run_review(hz, today="2025-01-01", tool_version="t")))
    assert b["design"]["frequency_unit"] == "hz"
    for va, vb in zip(a["variants"], b["variants"], strict=True):
        assert vb["margins"]["gain_crossover_rad_s"] == pytest.approx(
            va["margins"]["gain_crossover_rad_s"], rel=1e-9)
        assert vb["boost"][0]["band_3db_rad_s"] == pytest.approx(
            va["boost"][0]["band_3db_rad_s"], rel=1e-6)


def test_byte_identical_for_the_same_inputs(tmp_path: Path) -> None:
    d1 = make(tmp_path, FPE)
    d2 = make(tmp_path, FPE)
    one = json_out.render(run_review(d1, "general", today="2025-03-14", tool_version="t"))
    two = json_out.render(run_review(d2, "general", today="2025-03-14", tool_version="t"))
    assert one == two
    assert one.endswith(b"\n") and b"NaN" not in one
    later = json_out.render(run_review(d1, "general", today="2025-03-15", tool_version="t"))
    assert later != one                       # the only date in it is the injected one


def test_plain_conversions() -> None:
    assert json_out.plain(math.inf) == "inf" and json_out.plain(-math.inf) == "-inf"
    assert json_out.plain(1 + 2j) == {"re": 1.0, "im": 2.0}
    assert json_out.plain(complex(math.inf, 0)) == {"re": "inf", "im": 0.0}
    assert json_out.plain(dt.date(2025, 1, 2)) == "2025-01-02"
    with pytest.raises(ValueError, match="NaN"):
        json_out.plain(math.nan)
