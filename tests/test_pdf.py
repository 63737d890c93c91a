"""The PDF review: deterministic bytes, the text a reviewer must find, embedded evidence."""

from __future__ import annotations

import dataclasses
import functools
import hashlib
import io
import math
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest
from pypdf import PdfReader

import loopwarden
from loopwarden.report import renderer
from loopwarden.report.pdf import CAUTION, render_pdf

SAMPLES = Path(__file__).resolve().parents[1] / "sample_designs"
DATE = "2026-01-15"


@functools.cache
def sample_review(name: str):  # type: ignore[no-untyped-def]
    return loopwarden.review(loopwarden.load_design(str(SAMPLES / f"{name}.toml")), today=DATE)


def embedded_for(review) -> dict[str, bytes]:  # type: ignore[no-untyped-def]
    return {"review.json": renderer("json").render(review),
            "design.toml": review.design.text.encode("utf-8"),
            "rules.toml": review.ruleset.text.encode("utf-8")}


@functools.cache
def rendered(name: str) -> bytes:
    review = sample_review(name)
    return render_pdf(review, embedded=embedded_for(review))


def page_texts(pdf: bytes) -> list[str]:
    # Whitespace folded: reportlab breaks lines wherever the width ends.
    return [re.sub(r"\s+", " ", p.extract_text() or "") for p in PdfReader(io.BytesIO(pdf)).pages]


def test_two_unsigned_renders_are_byte_identical() -> None:
    review = sample_review("hoist_lag_tail")
    assert render_pdf(review, embedded=embedded_for(review)) == rendered("hoist_lag_tail")


def test_render_is_byte_identical_in_a_fresh_process() -> None:
    # Hash seeds, font subsets and caches differ between processes; the bytes must not.
    code = (
        f"import hashlib, sys; sys.path.insert(0, {str(Path(__file__).parent)!r})\n"
        "from test_pdf import rendered\n"
        "print(hashlib.sha256(rendered('hoist_lag_tail')).hexdigest())\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, env={**os.environ, "PYTHONHASHSEED": "12345"})
    assert out.stdout.strip() == hashlib.sha256(rendered("hoist_lag_tail")).hexdigest()


def test_text_holds_the_verdict_and_every_finding_rule() -> None:
    review = sample_review("hoist_lag_tail")
    text = " ".join(page_texts(rendered("hoist_lag_tail")))
    assert review.verdict == "fail"                 # the sample exists to show a failing tail
    assert "FAIL" in page_texts(rendered("hoist_lag_tail"))[0]
    for f in review.findings:
        assert f.rule in text, f.rule
    assert review.design.sha256 in text and review.ruleset.sha256 in text


def test_passing_review_says_pass_on_the_cover() -> None:
    review = sample_review("tank_level")
    assert review.verdict == "pass"
    review = dataclasses.replace(review, analyses=review.analyses[:1],
                                 findings=tuple(f for f in review.findings
                                                if f.variant in (None, "nominal")))
    cover = page_texts(render_pdf(review, embedded={}))[0]
    assert "PASS" in cover and "No finding fails" in cover


def test_cautions_on_every_page_and_a_closing_page() -> None:
    pages = page_texts(rendered("hoist_lag_tail"))
    tail = "local codes and licensed practice decide"
    assert all(tail in p for p in pages)
    assert "Cautions" in pages[-1] and CAUTION in pages[-1]


def test_unsigned_mark_and_signer_name() -> None:
    review = sample_review("hoist_lag_tail")
    assert "UNSIGNED" in page_texts(rendered("hoist_lag_tail"))[0]
    signed = dataclasses.replace(review, run=dataclasses.replace(review.run,
                                                                 signer="Ada Example"))
    cover = page_texts(render_pdf(signed, embedded={}))[0]
    assert "Ada Example" in cover and "UNSIGNED" not in cover


def test_embedded_evidence_round_trips() -> None:
    review = sample_review("hoist_lag_tail")
    files = embedded_for(review)
    reader = PdfReader(io.BytesIO(rendered("hoist_lag_tail")))
    got = {name: data[0] for name, data in reader.attachments.items()}
    assert got == files
    assert len(reader.trailer["/Root"]["/AF"]) == len(files)


def test_metadata_date_and_identifier() -> None:
    review = sample_review("hoist_lag_tail")
    reader = PdfReader(io.BytesIO(rendered("hoist_lag_tail")))
    assert reader.metadata["/CreationDate"] == "D:20260115000000Z"
    other = render_pdf(review, embedded={"review.json": b"{}"})
    ident = PdfReader(io.BytesIO(other)).trailer["/ID"][0]
    assert ident != reader.trailer["/ID"][0]        # content-derived, not a constant


def test_hz_design_shows_hz() -> None:
    # gimbal_rate is written in Hz: frequencies on paper are rad/s ÷ 2π [derived].
    review = sample_review("gimbal_rate")
    review = dataclasses.replace(review, analyses=review.analyses[:1])
    text = " ".join(page_texts(render_pdf(review, embedded={})))
    a = review.analyses[0]
    shown = a.margins.gain_crossover_rad_s / (2 * 3.141592653589793)
    assert "Frequency unit Hz" in text
    assert f"{shown:.4g} Hz" in text


@pytest.mark.parametrize("name", ["conveyor_axis"])
def test_delay_variant_renders(name: str) -> None:
    # conveyor_axis has a variant with transport delay: no closed-loop poles, Nyquist count.
    review = sample_review(name)
    delayed = [a for a in review.analyses if a.stability.method == "nyquist"]
    assert delayed
    review = dataclasses.replace(review, analyses=tuple(delayed[:1]))
    text = " ".join(page_texts(render_pdf(review, embedded={})))
    assert "Nyquist count" in text


# --------------------------------------------------------------------------- sampled designs
def test_sampled_design_renders_in_z_with_the_caveat_and_samples() -> None:
    review = sample_review("pump_pressure")
    pdf = rendered("pump_pressure")
    assert pdf == render_pdf(review, embedded=embedded_for(review))      # deterministic
    pages = page_texts(pdf)
    text = " ".join(pages)
    for a in review.analyses:
        page = next(p for p in pages if f"Evidence: {a.variant}" in p)
        # The caveat on the variant's own evidence page.
        assert "Only the sampling instants are analysed" in page
        assert "between two instants is not computed" in page
        # Delay margin in samples: delay_margin_s / T [derived], as the analysis gives it.
        m = a.margins
        assert m.delay_margin_samples == pytest.approx(m.delay_margin_s / 0.05, rel=1e-9)
        assert f"= {m.delay_margin_samples:.4g} samples" in page
    assert "Nyquist frequency π/T = 10 Hz" in text
    # Appendix: stages in z, the lowpass discretised by Tustin prewarped at its corner.
    # python-control's sample_system(tustin, prewarp 3 Hz, T = 0.05 s) of 18.85/(s + 18.85)
    # gives 0.3375 (z + 1)/(z − 0.3249) [python-control].
    import control as ct

    w0 = 2 * math.pi * 3.0
    ref = ct.sample_system(ct.tf([w0], [1.0, w0]), 0.05, method="tustin",
                           prewarp_frequency=w0)
    k, pole = float(ref.num[0][0][0]), float(ref.poles()[0].real)
    assert f"C_d(z) = {k:.4g}·(z + 1) / (z − {pole:.4g})" in text
    assert "Tustin (bilinear) prewarped at 3 Hz, T = 0.05 s" in text
    assert "C1(z) = 21.25·(z − 0.9412) / (z − 1)" in text     # 21.25 z − 20 as written
    assert "L(z) = C(z)·P_d(z) =" in text and "P_d(z) =" in text
    assert "Transfer functions are in s with" not in text


# --------------------------------------------------------------------------- measured plants
def test_measured_variant_names_its_file_and_draws_no_model_figures() -> None:
    review = sample_review("spindle_sweep")
    pages = page_texts(rendered("spindle_sweep"))
    text = " ".join(pages)
    csv_bytes = (SAMPLES / "spindle_sweep.csv").read_bytes()
    digest = hashlib.sha256(csv_bytes).hexdigest()               # [hashlib]
    points = sum(1 for line in csv_bytes.decode().splitlines()
                 if line.strip() and not line.startswith("#")) - 1      # minus the header
    page = next(p for p in pages if "Evidence: nominal" in p)
    assert (f"measured frequency response: spindle_sweep.csv (sha256 {digest}, {points} "
            "points, 0.5 Hz to 1000 Hz, declared unstable poles 0, declared integrators 0)"
            ) in page
    assert "P(s) = 1 " not in text and "P(s) = 1." not in text
    assert "Pole-zero map: not drawn." in page and "Step and ramp responses: not drawn." in page
    # The unknown tracking constant is not printed as its 0.0 placeholder.
    a = review.analyses[0]
    assert a.tracking.unknown == ("kv", "ramp_error")
    assert "∞ / unknown / 0 1/s²" in page


def test_short_sweep_leaves_figures_undecided_in_the_pdf(tmp_path: Path) -> None:
    from test_plots import write_short_sweep

    review = loopwarden.review(loopwarden.load_design(str(write_short_sweep(tmp_path))),
                               today=DATE)
    text = " ".join(page_texts(render_pdf(review, embedded={})))
    assert "gain crossing above the sweep?" in text
    assert "Not decided by the measured range" in text
    cover = text[:text.index("1 Findings")]
    assert "not decided" in cover                       # the glance table
    # no undecided margin printed as a number
    a = review.analyses[0]
    assert f"{a.margins.phase_margin_deg:.4g}°" not in text


# --------------------------------------------------------------------------- findings order
def test_findings_table_puts_verdicts_first_and_na_last() -> None:
    from loopwarden.report.pdf import FINDING_ORDER, ordered_findings
    from loopwarden.ruleset.model import Status

    for name in ("hoist_lag_tail", "pump_pressure"):
        review = sample_review(name)
        judged, na = ordered_findings(review)
        assert sorted(map(id, judged + na)) == sorted(map(id, review.findings))  # all kept
        ranks = [FINDING_ORDER.index(f.status) for f in judged + na]
        assert ranks == sorted(ranks)
        assert all(f.status is Status.NA for f in na) and Status.NA not in {
            f.status for f in judged}
    # In the hoist PDF every failing rule appears before the n/a table, which follows the
    # passes; n/a rules still appear (the evidence is complete).
    review = sample_review("hoist_lag_tail")
    text = " ".join(page_texts(rendered("hoist_lag_tail")))
    start = text.index("1 Findings")
    split = text.index("Measured without a limit / not applicable", start)
    table = text[text.index("Findings Rule", start):]
    for f in review.findings:
        at = table.index(f.rule) + text.index("Findings Rule", start)
        if f.status is Status.FAIL:
            assert at < split, f.rule
        if f.status is Status.NA and not any(
                g.rule == f.rule and g.status is not Status.NA for g in review.findings):
            assert at > split, f.rule


# --------------------------------------------------------------------------- embedding
def test_review_command_embeds_the_measured_csv(tmp_path: Path) -> None:
    import json

    from loopwarden.cli import main

    out = tmp_path / "spindle.pdf"
    assert main(["review", str(SAMPLES / "spindle_sweep.toml"), "--out", str(out), "--json",
                 str(tmp_path / "r.json"), "--date", DATE, "--quiet"]) == 0
    got = {name: data[0] for name, data in PdfReader(out).attachments.items()}
    csv_bytes = (SAMPLES / "spindle_sweep.csv").read_bytes()
    assert got["plant-nominal.csv"] == csv_bytes
    doc = json.loads(got["review.json"])
    assert doc == json.loads((tmp_path / "r.json").read_text(encoding="utf-8"))
    (plant,) = doc["design"]["measured_plants"]
    assert plant["sha256"] == hashlib.sha256(csv_bytes).hexdigest()
    assert set(got) == {"review.json", "design.toml", "rules.toml", "plant-nominal.csv"}
    assert "plant-nominal.csv" in page_texts(out.read_bytes())[-1]    # listed on the last page
