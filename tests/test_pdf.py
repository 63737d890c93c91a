"""The PDF review: deterministic bytes, the text a reviewer must find, embedded evidence."""

from __future__ import annotations

import dataclasses
import functools
import hashlib
import io
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
