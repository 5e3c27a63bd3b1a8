"""``surfinspect owner-certificate``: export the archive owner's certificate, for customers to trust.

Every PDF signature made in the archive chains to this one self-signed
certificate (the owner acts as a small certificate authority for its signer
register). A customer imports it once into their PDF reader as a trusted
certificate; the reader then shows who signed each signed report, when, with
what meaning, and that nothing changed since. ``.pem`` writes it in PEM (text),
``.cer``, ``.crt`` and ``.der`` in DER; the SHA-256 fingerprint printed is the
one to compare when the file reaches the customer by another way.

An owner with a PDF key (ECDSA P-256) has two CA certificates; the PDF key's
is exported, since it is the one that issues the PDF signatures' certificates
and the one common readers can check. An owner without one exports its
Ed25519 certificate (readers without Ed25519 cannot use it).
"""

from __future__ import annotations

import argparse

from .._lazy import module
from ..errors import InputError
from ..fsutil import write_bytes_atomic
from ._checks import check_output_file
from ._options import add_archive_option
from .console import Console

pki = module("surfinspect.archive.pki")
archive = module("surfinspect.archive.store")
location = module("surfinspect.archive.location")

HELP = "export the archive owner's certificate (the one customers trust to check signed reports)"

#: Certificate file suffix -> encoding (``cryptography``'s ``serialization.Encoding`` member name).
_ENCODINGS = {".pem": "PEM", ".cer": "DER", ".crt": "DER", ".der": "DER"}


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_archive_option(parser)
    parser.add_argument("--out", required=True, metavar="FILE", help="the certificate file: .pem, or .cer/.crt/.der")
    parser.add_argument(
        "--algorithm",
        choices=("p256", "ed25519"),
        default="p256",
        help="p256 (default): the certificate of the owner's PDF key, which common readers check; ed25519: the one "
        "that issued the certificates of keys without a PDF key (what an archive set up before PDF keys has)",
    )


def run(args: argparse.Namespace, console: Console) -> int:
    from cryptography.hazmat.primitives import serialization

    from ..archive.certificates import certificate_sha256

    check_output_file("--out", args.out, suffixes=tuple(_ENCODINGS))
    encoding = getattr(serialization.Encoding, _ENCODINGS[args.out[args.out.rfind(".") :].lower()])
    with location.open_archive(args.archive) as arc:
        register = arc.register()
        pdf_cert = pki.owner_pdf_certificate_of(arc, register) if args.algorithm == "p256" else None
        cert = pdf_cert or pki.owner_certificate_of(arc, register)
        if cert is None:
            if register.owner is None:
                raise InputError(f"--archive: {args.archive} has no owner yet (surfinspect owner init)")
            raise InputError(
                f"--archive: the owner of {args.archive} has no certificate yet; it is issued with the next "
                "enrolment (surfinspect signers add)"
            )
        write_bytes_atomic(args.out, cert.public_bytes(encoding))
        owner = register.owner.printed_name
    kind = "ECDSA P-256" if pdf_cert is not None else "Ed25519"
    console.info(f"owner certificate of {owner} ({kind}) written to {args.out}")
    console.info(f"SHA-256 fingerprint {certificate_sha256(cert)}")
    console.info("trust it in the PDF reader to check the archive's signed reports")
    return 0
