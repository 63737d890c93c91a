"""PAdES signing of a rendered review with pyHanko, offline.

The signature is PAdES baseline B-B: a CAdES detached signature (``ETSI.CAdES.detached``)
with the signing certificate bound into the signed attributes, SHA-256, no timestamp and no
revocation data — nothing is fetched from the network.  It is added as an incremental
update, so the signed byte range covers the whole rendered file, embedded evidence
included.
"""

from __future__ import annotations

import datetime as dt
import io
from pathlib import Path
from typing import Any

from ..errors import SigningError
from .keys import load_key

__all__ = ["SIGNATURE_FIELD", "preload", "sign_pdf"]

#: Name of the signature field loopwarden creates.
SIGNATURE_FIELD = "loopwarden-review"


def preload() -> None:
    """Import pyHanko now (about 0.3 s), e.g. while the review's figures are drawn."""
    import pyhanko.pdf_utils.incremental_writer  # noqa: F401
    import pyhanko.sign  # noqa: F401


def sign_pdf(pdf: bytes, key_path: Path | str, passphrase: bytes | None, *,
             signing_time: dt.datetime | None = None) -> bytes:
    """Sign ``pdf`` with the PKCS#12 key at ``key_path``; return the signed file.

    Parameters
    ----------
    pdf : bytes
        An unsigned PDF (normally from :func:`loopwarden.report.pdf.render_pdf`).
    key_path : Path or str
        PKCS#12 file with the private key and its certificate (and optionally its chain).
    passphrase : bytes or None
        The key file's passphrase; None for an unencrypted key.
    signing_time : datetime, optional
        The signing time written into the signature (``/M``), timezone-aware; the review
        command passes the time it recorded in the evidence (``signed_at``), so the two
        agree to the second.  Default: now.

    Raises
    ------
    SigningError
        The key cannot be opened, or the PDF cannot be signed.
    """
    from pyhanko.pdf_utils.incremental_writer import IncrementalPdfFileWriter
    from pyhanko.sign import fields, signers

    load_key(key_path, passphrase)      # clear messages before pyHanko's own
    try:
        signer = signers.SimpleSigner.load_pkcs12_data(
            Path(key_path).read_bytes(), other_certs=(), passphrase=passphrase)
    except (ValueError, OSError) as exc:
        raise SigningError(f"cannot use the key for signing: {exc}",
                           file=str(key_path)) from exc
    if signer is None:   # older pyHanko versions return None instead of raising
        raise SigningError("cannot use the key for signing", file=str(key_path))
    # The PKCS#12 file's other certificates (the issuing chain) go into the signature.

    meta = signers.PdfSignatureMetadata(
        field_name=SIGNATURE_FIELD,
        subfilter=fields.SigSeedSubFilter.PADES,
        md_algorithm="sha256",
        reason="loopwarden control loop review",
    )
    when = (signing_time or dt.datetime.now(dt.UTC)).astimezone(dt.UTC).replace(microsecond=0)

    class _AtTime(signers.PdfSigner):
        # pyHanko reads the clock itself; the session's time is what goes into /M.
        def init_signing_session(self, pdf_out: Any, existing_fields_only: bool = False
                                 ) -> Any:
            session = super().init_signing_session(pdf_out, existing_fields_only)
            session.system_time = when
            return session

    try:
        writer = IncrementalPdfFileWriter(io.BytesIO(pdf), strict=False)
        out = io.BytesIO()
        _AtTime(meta, signer=signer).sign_pdf(writer, output=out)
    except Exception as exc:  # noqa: BLE001 - pyHanko raises many types; all mean "not signed"
        raise SigningError(f"cannot sign the PDF: {type(exc).__name__}: {exc}") from exc
    return bytes(out.getbuffer())
