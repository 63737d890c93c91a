"""Signing keys: a local self-signed trial key, loading a PKCS#12 key, the passphrase.

A key made here is for trials only: it proves that the same key signed two files, not who
holds it.  Releases need keys under the organisation's own certificate authority.

The passphrase never comes from the command line (it would sit in the shell history and
the process list): it comes from ``--passphrase-file``, the environment variable
``LOOPWARDEN_KEY_PASSPHRASE``, or an interactive prompt, in that order.  It must be UTF-8
text without NUL bytes (anything else is bad input, exit 2); a passphrase file that group
or others may read draws a warning.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import getpass
import os
import stat
import sys
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ..errors import SigningError, UsageError

__all__ = ["PASSPHRASE_ENV", "KeyMaterial", "make_key", "read_passphrase", "load_key",
           "signer_name", "certificate_path", "check_passphrase"]

PASSPHRASE_ENV = "LOOPWARDEN_KEY_PASSPHRASE"
#: Validity of a trial certificate.
TRIAL_VALIDITY_DAYS = 730
#: Said by ``keygen`` and written into the trial certificate's subject.
TRIAL_NOTE = "loopwarden local trial key - not for releases"


@dataclass(frozen=True, slots=True)
class KeyMaterial:
    """A private key with its certificate (cryptography objects) and the certificate chain."""

    private_key: Any
    certificate: Any
    chain: tuple[Any, ...]


def certificate_path(p12: Path) -> Path:
    """Where :func:`make_key` puts the certificate for ``KEY.p12``: ``KEY.pem``."""
    return Path(p12).with_suffix(".pem")


def _write_new(path: Path, data: bytes, mode: int) -> None:
    """Write ``data`` to a new file atomically; refuse if ``path`` exists.

    The bytes go to a temporary file in the same folder first; a hard link then puts it in
    place, which fails (instead of replacing) when the name is taken — so a concurrent
    writer cannot be overwritten either.
    """
    from ..report.atomic import clean_stale_tmp, tmp_name

    clean_stale_tmp(path)                 # left by an earlier, killed run
    tmp = tmp_name(path)
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, mode)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, mode)               # the umask must not widen or narrow it
        os.link(tmp, path)
    finally:
        with contextlib.suppress(OSError):
            os.unlink(tmp)


def make_key(out_p12: Path, name: str, passphrase: bytes | None, *,
             days: int = TRIAL_VALIDITY_DAYS) -> Path:
    """Make a self-signed ECDSA P-256 key for trials; write ``KEY.p12`` and ``KEY.pem``.

    Parameters
    ----------
    out_p12 : Path
        The PKCS#12 file to create (private key and certificate), mode 0600.
    name : str
        Common name of the certificate's subject (who signs).
    passphrase : bytes or None
        Encrypts the PKCS#12 file; None leaves it unencrypted.
    days : int
        Validity of the certificate from now.

    Returns
    -------
    Path
        The certificate file (PEM), for whoever verifies the signatures (``--trust``).

    Raises
    ------
    UsageError
        When either file exists already (nothing is overwritten) or cannot be written.
    """
    from cryptography import x509
    from cryptography.hazmat.primitives import hashes, serialization
    from cryptography.hazmat.primitives.asymmetric import ec
    from cryptography.hazmat.primitives.serialization import pkcs12
    from cryptography.x509.oid import NameOID

    out_p12 = Path(out_p12)
    out_pem = certificate_path(out_p12)
    if passphrase is not None:
        check_passphrase(passphrase, "keygen")
    if not name.strip():
        raise UsageError("--name must not be empty", hint="give the signer's name")
    if out_p12.suffix.lower() not in (".p12", ".pfx"):
        raise UsageError(f"--out {out_p12}: expected a .p12 file name",
                         hint="the certificate is written beside it as .pem")
    for path in (out_p12, out_pem):
        if path.is_symlink():
            raise UsageError(f"{path} is a symbolic link", hint="refusing to write a key "
                             "through it; choose another name; nothing was written")
        if path.exists():
            raise UsageError(f"{path} exists already", hint="refusing to overwrite a key; "
                             "choose another name or remove the old files yourself")
    folder = out_p12.parent if str(out_p12.parent) else Path(".")
    if not folder.is_dir():
        raise UsageError(f"--out {out_p12}: the folder {str(folder)!r} does not exist")

    key = ec.generate_private_key(ec.SECP256R1())
    subject = x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, name.strip()),
                         x509.NameAttribute(NameOID.ORGANIZATIONAL_UNIT_NAME, TRIAL_NOTE)])
    now = dt.datetime.now(dt.UTC).replace(microsecond=0)
    usage = x509.KeyUsage(digital_signature=True, content_commitment=True,
                          key_encipherment=False, data_encipherment=False, key_agreement=False,
                          key_cert_sign=False, crl_sign=False, encipher_only=False,
                          decipher_only=False)
    cert = (x509.CertificateBuilder()
            .subject_name(subject).issuer_name(subject)
            .public_key(key.public_key())
            .serial_number(x509.random_serial_number())
            .not_valid_before(now - dt.timedelta(minutes=5))   # tolerate small clock skew
            .not_valid_after(now + dt.timedelta(days=days))
            .add_extension(x509.BasicConstraints(ca=False, path_length=None), critical=True)
            .add_extension(usage, critical=True)
            .add_extension(x509.SubjectKeyIdentifier.from_public_key(key.public_key()),
                           critical=False)
            .sign(key, hashes.SHA256()))
    enc = (serialization.BestAvailableEncryption(passphrase) if passphrase
           else serialization.NoEncryption())
    p12 = pkcs12.serialize_key_and_certificates(name.strip().encode("utf-8"), key, cert,
                                                None, enc)
    pem = cert.public_bytes(serialization.Encoding.PEM)
    try:
        _write_new(out_p12, p12, 0o600)
        try:
            _write_new(out_pem, pem, 0o600)
        except BaseException:
            out_p12.unlink()              # all or nothing
            raise
    except FileExistsError as exc:
        raise UsageError(f"{exc.filename or out_p12} exists already",
                         hint="refusing to overwrite a key") from exc
    except OSError as exc:
        raise UsageError(f"cannot write {out_p12}: {exc.strerror or exc}",
                         hint="nothing was written") from exc
    return out_pem


def read_passphrase(source: Any = None, *, confirm: bool = False,
                    environ: Mapping[str, str] | None = None,
                    interactive: bool | None = None) -> bytes | None:
    """The key passphrase from a file, the environment, or a prompt — never from argv.

    Parameters
    ----------
    source : Path, str, argparse.Namespace or None
        The ``--passphrase-file`` path, or parsed arguments carrying ``passphrase_file``.
        The file's first line is the passphrase (the line ending is not part of it).
    confirm : bool
        Ask twice at the prompt (when making a key).
    environ : mapping, optional
        Where to look for ``LOOPWARDEN_KEY_PASSPHRASE`` (default ``os.environ``).
    interactive : bool, optional
        Whether a prompt is allowed (default: when stdin is a terminal).

    Returns
    -------
    bytes or None
        None for "no passphrase" (an empty one, or none available without a terminal).
    """
    path = getattr(source, "passphrase_file", source)
    env = os.environ if environ is None else environ
    if path:
        try:
            raw = Path(path).read_bytes()
            mode = os.stat(path).st_mode
        except OSError as exc:
            raise UsageError(f"--passphrase-file {path}: {exc.strerror or exc}") from exc
        if mode & 0o077:
            print(f"loopwarden: warning: --passphrase-file {path} is readable by others "
                  f"(mode {stat.S_IMODE(mode):04o}); make it private: chmod 600 {path}",
                  file=sys.stderr)
        line = raw.split(b"\n", 1)[0].rstrip(b"\r")
        return check_passphrase(line, f"--passphrase-file {path}") or None
    if PASSPHRASE_ENV in env:
        return check_passphrase(_encoded(env[PASSPHRASE_ENV], PASSPHRASE_ENV),
                                PASSPHRASE_ENV) or None
    if interactive is None:
        interactive = sys.stdin is not None and sys.stdin.isatty()
    if not interactive:
        return None
    first = getpass.getpass("Key passphrase (empty for none): ")
    if confirm and getpass.getpass("Repeat the passphrase: ") != first:
        raise UsageError("the two passphrases differ", hint="nothing was written")
    return check_passphrase(_encoded(first, "the passphrase"), "the passphrase") or None


def _encoded(text: str, source: str) -> bytes:
    # Bytes that are not UTF-8 reach Python as lone surrogates (surrogateescape).
    try:
        return text.encode("utf-8")
    except UnicodeEncodeError as exc:
        raise UsageError(f"{source}: the passphrase is not valid UTF-8 text",
                         hint="use a passphrase of UTF-8 text; nothing was written") from exc


def check_passphrase(data: bytes, source: str) -> bytes:
    """``data`` if it can be a passphrase: UTF-8 text without NUL; else UsageError (exit 2).

    A NUL byte ends a C string (the PKCS#12 libraries would cut the passphrase there or
    refuse it), and bytes that are not UTF-8 text cannot be typed the same way twice.
    """
    if b"\0" in data:
        raise UsageError(f"{source}: the passphrase holds a NUL byte",
                         hint="use a passphrase of printable text; nothing was written")
    try:
        data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise UsageError(f"{source}: the passphrase is not valid UTF-8 text "
                         f"(byte 0x{data[exc.start]:02x} at position {exc.start})",
                         hint="use a passphrase of UTF-8 text; nothing was written") from exc
    return data


def load_key(key_path: Path | str, passphrase: bytes | None) -> KeyMaterial:
    """Open a PKCS#12 key file.

    Raises
    ------
    SigningError
        Missing file, wrong passphrase, or a file that holds no key and certificate.
    """
    from cryptography.hazmat.primitives.serialization import pkcs12

    key_path = Path(key_path)
    if passphrase is not None:
        try:
            check_passphrase(passphrase, str(key_path))
        except UsageError as exc:
            raise SigningError(exc.what, file=str(key_path), hint=exc.hint) from exc
    try:
        data = key_path.read_bytes()
    except OSError as exc:
        raise SigningError(f"cannot read the key: {exc.strerror or exc}",
                           file=str(key_path)) from exc
    try:
        key, cert, extra = pkcs12.load_key_and_certificates(data, passphrase)
    except ValueError as exc:
        hint = (f"wrong passphrase? give it with --passphrase-file or {PASSPHRASE_ENV}"
                if passphrase is not None else
                f"the key may be encrypted: give its passphrase with --passphrase-file or "
                f"{PASSPHRASE_ENV}")
        raise SigningError("cannot open the PKCS#12 key", file=str(key_path),
                           hint=hint) from exc
    if key is None or cert is None:
        raise SigningError("the PKCS#12 file holds no private key with a certificate",
                           file=str(key_path))
    return KeyMaterial(private_key=key, certificate=cert, chain=tuple(extra or ()))


def signer_name(key_path: Path | str, passphrase: bytes | None) -> str:
    """The signer as printed on the review: the certificate subject's common name."""
    from cryptography.x509.oid import NameOID

    cert = load_key(key_path, passphrase).certificate
    names = cert.subject.get_attributes_for_oid(NameOID.COMMON_NAME)
    return str(names[0].value) if names else cert.subject.rfc4514_string()
