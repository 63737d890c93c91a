"""Shared pieces of signed-review verification: the check records, the report, reading
files and trust roots, the embedded files and the signature padding.
"""

from __future__ import annotations

import contextlib
import hashlib
import logging
import re
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, NamedTuple

from ..errors import UsageError

SCHEMA = "loopwarden-review/1"
_PADES = "/ETSI.CAdES.detached"


class Check(NamedTuple):
    """One verification step: its name, whether it passed, and why."""

    name: str
    passed: bool
    detail: str


@dataclass(frozen=True, slots=True, kw_only=True)
class VerifyReport:
    """The outcome of :func:`verify_pdf`; ``ok`` only when every check ran and passed."""

    ok: bool
    checks: tuple[Check, ...]
    signer: str | None = None           # subject of the signing certificate, when read
    verdict: str | None = None          # the review's verdict per the signed evidence
    review_date: str | None = None      # the evidence's date (YYYY-MM-DD), when read
    signed_at: str | None = None        # the signature's signing time (UTC), when read


def plant_attachment_names(variants: Sequence[str]) -> dict[str, str]:
    """Embedded-file name of each measured plant variant's CSV: ``plant-<variant>.csv``.

    The variant name is kept where it is a safe file name (letters, digits, ``.``, ``_``,
    ``-``; anything else becomes ``-``); names that would coincide get ``-2``, ``-3``… in
    the given order.  The review command and ``verify`` both use this, in the order of
    ``design.measured_plants`` in the evidence, so the names need not be recorded.
    """
    out: dict[str, str] = {}
    taken: set[str] = set()
    for variant in variants:
        stem = re.sub(r"[^A-Za-z0-9._-]+", "-", variant).strip("-.") or "variant"
        name, k = f"plant-{stem}.csv", 2
        while name in taken:
            name, k = f"plant-{stem}-{k}.csv", k + 1
        taken.add(name)
        out[variant] = name
    return out


def _read(path: Path | str, what: str) -> bytes:
    try:
        return Path(path).read_bytes()
    except OSError as exc:
        raise UsageError(f"cannot read the {what}: {exc.strerror or exc}",
                         file=str(path)) from exc


def _trust_root(path: Path | str) -> Any:
    from pyhanko.keys import load_certs_from_pemder_data

    data = _read(path, "trust certificate")
    try:
        certs = list(load_certs_from_pemder_data(data))
    except Exception as exc:  # noqa: BLE001 - any parse failure means "not a certificate"
        raise UsageError("the trust file holds no readable certificate", file=str(path),
                         hint="give the signer's (or its CA's) certificate, PEM or DER"
                         ) from exc
    if not certs:
        raise UsageError("the trust file holds no certificate", file=str(path))
    return certs


@contextlib.contextmanager
def _quiet() -> Iterator[None]:
    """pyHanko logs every validation problem at ERROR; the report says it instead."""
    loggers = [logging.getLogger(n) for n in ("pyhanko", "pyhanko_certvalidator")]
    levels = [lg.level for lg in loggers]
    for lg in loggers:
        lg.setLevel(logging.CRITICAL + 1)
    try:
        yield
    finally:
        for lg, level in zip(loggers, levels, strict=True):
            lg.setLevel(level)


def _sha(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def _short(digest: str) -> str:
    return f"{digest[:16]}…" if len(digest) > 16 else digest


def _obj(x: Any) -> Any:
    """Follow an indirect reference (pyHanko's ``get`` does not)."""
    return x.get_object() if hasattr(x, "get_object") else x


def embedded_files(resolver: Any) -> dict[str, bytes]:
    """Every file in the EmbeddedFiles name tree of a document (or historical revision)."""
    root = _obj(resolver.root)
    if "/Names" not in root:
        return {}
    names = _obj(root["/Names"])
    if "/EmbeddedFiles" not in names:
        return {}
    out: dict[str, bytes] = {}
    stack = [_obj(names["/EmbeddedFiles"])]
    seen = 0
    while stack:
        node = stack.pop()
        seen += 1
        if seen > 10_000:       # a name tree that loops back on itself
            raise ValueError("the EmbeddedFiles name tree does not end")
        if "/Kids" in node:
            stack.extend(_obj(kid) for kid in _obj(node["/Kids"]))
        pairs = list(_obj(node["/Names"])) if "/Names" in node else []
        if len(pairs) % 2:
            raise ValueError("an EmbeddedFiles name array has an odd length")
        for key, spec in zip(pairs[::2], pairs[1::2], strict=True):
            name = str(_obj(key))
            if name in out:
                raise ValueError(f"two embedded files are named {name!r}")
            stream = _obj(_obj(_obj(spec)["/EF"])["/F"])
            out[name] = bytes(stream.data)
    return out


def _der_length(blob: bytes) -> int:
    """Length in bytes of the DER element at the start of ``blob`` (tag, length, value)."""
    if len(blob) < 2:
        raise ValueError("the signature value is empty")
    first = blob[1]
    if first < 0x80:
        return 2 + first
    n = first & 0x7F
    if n == 0 or n > 4 or len(blob) < 2 + n:
        raise ValueError("the signature value has no definite DER length")
    return 2 + n + int.from_bytes(blob[2:2 + n], "big")


def _padding(data: bytes, byte_range: list[int]) -> Check:
    """The unsigned gap of the ByteRange: ``<hex>`` of the DER signature, then zeros only."""
    gap = data[byte_range[0] + byte_range[1]:byte_range[2]]
    if len(gap) < 2 or gap[:1] != b"<" or gap[-1:] != b">":
        return Check("signature padding", False,
                     "the bytes outside the signed range are not one hex string")
    digits = gap[1:-1]
    if not re.fullmatch(rb"[0-9A-Fa-f]*", digits) or len(digits) % 2:
        return Check("signature padding", False,
                     "the signature's hex string holds characters other than hex digits")
    blob = bytes.fromhex(digits.decode("ascii"))
    end = _der_length(blob)
    if end > len(blob):
        return Check("signature padding", False, "the signature value is cut short")
    stray = len(blob[end:]) - blob[end:].count(0)
    if stray:
        return Check("signature padding", False,
                     f"{stray} non-zero byte(s) follow the signature in its padding: the "
                     "file was changed after signing")
    return Check("signature padding", True,
                 f"{end}-byte signature followed by {len(blob) - end} zero bytes")
