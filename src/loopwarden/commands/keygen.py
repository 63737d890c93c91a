"""``loopwarden keygen``: a local self-signed signing key, for trials only."""

from __future__ import annotations

import argparse

HELP = "make a local signing key for trials"

EPILOG = """\
The key is self-signed: it shows that one key signed a file, not who holds the key.
Releases need the organisation's own certificates (a key issued under its certificate
authority); give verifiers that authority's certificate for --trust.

passphrase: --passphrase-file FILE (first line), else LOOPWARDEN_KEY_PASSPHRASE, else a
prompt when run in a terminal; an empty passphrase leaves the key file unencrypted.
Never on the command line. It must be UTF-8 text without NUL bytes (exit 2 otherwise); a
passphrase file readable by group or others draws a warning (chmod 600 it).

writes KEY.p12 (private key and certificate, mode 0600) and KEY.pem (the certificate, for
'loopwarden verify --trust'). Existing files (and symbolic links, and the passphrase
file) are never overwritten.
"""

NOT_FOR_RELEASES = ("This is a self-signed key for trials. It proves that the same key "
                    "signed two files, not who holds it. Releases need the organisation's "
                    "own certificates: sign with a key issued under its certificate "
                    "authority, and verify with --trust set to that authority's certificate.")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.formatter_class = argparse.RawDescriptionHelpFormatter
    parser.epilog = EPILOG
    parser.add_argument("--out", metavar="KEY.p12", required=True,
                        help="PKCS#12 file to create; the certificate goes beside it as .pem")
    parser.add_argument("--name", metavar="NAME", required=True,
                        help="signer's name (the certificate subject's common name)")
    parser.add_argument("--passphrase-file", metavar="FILE",
                        help="file holding the passphrase that encrypts the key (first line)")
    parser.add_argument("--days", metavar="N", type=int, default=730,
                        help="validity of the certificate in days (default 730)")


def run(args: argparse.Namespace) -> int:
    import sys
    from pathlib import Path

    from ..errors import UsageError
    from ..signing.keys import certificate_path, make_key, read_passphrase

    if args.days < 1:
        raise UsageError(f"--days {args.days}: expected a positive number of days")
    if args.passphrase_file:
        pw = Path(args.passphrase_file).resolve()
        for out in (Path(args.out), certificate_path(Path(args.out))):
            if out.resolve() == pw:
                raise UsageError(f"{out} is the passphrase file, an input of this run",
                                 hint="refusing to overwrite it; choose another name; "
                                      "nothing was written")
    passphrase = read_passphrase(args, confirm=True)
    cert = make_key(Path(args.out), args.name, passphrase, days=args.days)
    from ..report.escape import for_terminal

    print(for_terminal(f"wrote {args.out} (private key and certificate, mode 0600)"))
    print(for_terminal(f"wrote {cert} (certificate: give it to verifiers for --trust)"))
    if passphrase is None:
        print("warning: the key file is not encrypted (no passphrase given); keep it private",
              file=sys.stderr)
    print(NOT_FOR_RELEASES)
    return 0
