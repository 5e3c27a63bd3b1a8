"""The PDF signatures of a batch's signed editions against the archive's own sign-off records.

Signed edition *n* of a batch (the PDF stored for its sign-off *n*) must carry
exactly *n* PDF signatures, fields ``signoff-1`` .. ``signoff-n``, and
signature *i* must be the one sign-off *i* made:

- pyHanko finds it intact (its byte ranges hash to the signed digest), valid
  (the CMS signature verifies) and trusted (its certificate chains to the
  archive owner's certificate), covering its whole revision;
- its certificate certifies the key the record names and gives the record's
  printed name; its reason is the record's meaning and comment, its time the
  record's time;
- the bytes it covers are exactly signed edition *i* as the archive recorded
  it (SHA-256 equal to the record's ``signed_report_sha256``), so a later
  edition is the earlier one plus an incremental update, nothing else;
- what later revisions changed is at most what adding signatures changes
  (pyHanko's difference analysis, modification level NONE or FORM_FILLING).

A signature by a key the register revoked after it signed stays valid and is
reported as a warning (a PDF reader knows nothing of the register); signed
after the revocation, it is a problem.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from datetime import datetime

from cryptography import x509

from .editions import signed_report_sha256
from .pdf_signature import SIGNATURE_FIELD_PREFIX, PdfSignatureCheck, pdf_signatures, signature_reason

__all__ = ["SignedEdition", "Revocation", "edition_findings"]

#: pyHanko modification levels a later sign-off may cause (ModificationLevel: NONE, LTA_UPDATES, FORM_FILLING).
_ALLOWED_LATER_CHANGES = {"NONE", "LTA_UPDATES", "FORM_FILLING"}


@dataclass(frozen=True)
class SignedEdition:
    """A sign-off as the archive recorded it, with the edition it stored (None when it cannot be read)."""

    signoff_no: int
    signer_name: str
    key_fingerprint: str
    meaning: str
    comment: str
    signed_at_utc: str
    edition_sha256: str
    edition: bytes | None
    pdf_public_key_hex: str | None = None  # the PDF key the register certified for the signer (None: none)
    report_sha256: str | None = None  # the (unsigned) report edition the sign-off signed, from its record


@dataclass(frozen=True)
class Revocation:
    printed_name: str
    revoked_at_utc: str
    entry_no: int


def _fingerprint(key_raw: bytes | None) -> str | None:
    return hashlib.sha256(key_raw).hexdigest() if key_raw is not None else None


def _parse(utc: str) -> datetime | None:
    try:
        return datetime.fromisoformat(utc.replace("Z", "+00:00"))
    except ValueError:
        return None


def _signature_problems(sig: PdfSignatureCheck, record: SignedEdition) -> list[str]:
    """What signature ``sig`` gets wrong about sign-off ``record``."""
    problems = list(sig.problems)
    if not sig.intact:
        problems.append("its signed bytes were changed (the digest does not match)")
    elif not sig.valid:
        problems.append("its CMS signature does not verify")
    if sig.intact and sig.valid and not sig.trusted:
        problems.append("its certificate does not chain to the archive owner's certificate")
    if sig.intact and not sig.whole_revision:
        problems.append("it does not cover its whole revision")
    if sig.key_raw is None and sig.key_spki is not None:  # a PDF key: the register's for the record's signer
        if record.pdf_public_key_hex is None or sig.key_spki.hex() != record.pdf_public_key_hex:
            problems.append(f"its certificate is not for the PDF key the register certified for {record.signer_name}")
    elif sig.key_raw is not None and _fingerprint(sig.key_raw) != record.key_fingerprint:
        problems.append(
            f"its certificate is for key {str(_fingerprint(sig.key_raw))[:16]}…, the record's is "
            f"{record.key_fingerprint[:16]}…"
        )
    if sig.signer_name is not None and sig.signer_name != record.signer_name:
        problems.append(f"its certificate names {sig.signer_name!r}, the record {record.signer_name!r}")
    expected_reason = signature_reason(record.meaning, record.comment)
    if sig.reason != expected_reason:
        problems.append(f"its reason is {sig.reason!r}, the record's meaning and comment {expected_reason!r}")
    recorded = _parse(record.signed_at_utc)
    if sig.signed_at is None or recorded is None or abs((sig.signed_at - recorded).total_seconds()) >= 1:
        shown = sig.signed_at.strftime("%Y-%m-%dT%H:%M:%SZ") if sig.signed_at else "none"
        problems.append(f"its time is {shown}, the record's {record.signed_at_utc}")
    return problems


def _edition_findings(
    where: str, lineage: list[SignedEdition], checks: list[PdfSignatureCheck], revoked: dict
) -> tuple[list[str], list[str]]:
    """Findings of one signed edition; ``lineage``: the sign-offs of its report edition up to its own, in order."""
    problems, warnings = [], []
    names = [c.field_name for c in checks]
    expected = [f"{SIGNATURE_FIELD_PREFIX}{e.signoff_no}" for e in lineage]
    n = len(lineage)
    if names != expected:
        problems.append(f"{where}: carries PDF signatures {names or 'none'}, the archive records {expected}")
    for i, sig in enumerate(checks, start=1):
        if i > n:
            continue
        record = lineage[i - 1]
        found = _signature_problems(sig, record)
        if sig.covered_sha256 != record.edition_sha256:
            found.append(
                f"the bytes it covers (SHA-256 {sig.covered_sha256[:16]}…) are not signed edition "
                f"{record.signoff_no} as recorded ({record.edition_sha256[:16]}…)"
            )
        if i < n and sig.modified_after not in _ALLOWED_LATER_CHANGES:
            found.append(f"the later revisions changed more than signatures add ({sig.modified_after})")
        problems += [f"{where}: PDF signature {i} ({record.signer_name}): {p}" for p in found]
        gone = revoked.get(record.key_fingerprint)
        if gone is not None and i == n:  # said once per sign-off: on the edition it made
            if gone.revoked_at_utc <= record.signed_at_utc:
                problems.append(
                    f"{where}: PDF signature {i}: the certificate of {gone.printed_name} was revoked at "
                    f"{gone.revoked_at_utc} (register entry {gone.entry_no}), before it signed at {record.signed_at_utc}"
                )
            else:
                warnings.append(
                    f"{where}: PDF signature {i}: the certificate of {gone.printed_name} was revoked at "
                    f"{gone.revoked_at_utc} (register entry {gone.entry_no}), after it signed; the signature stays "
                    "valid, but a PDF reader trusting the owner's certificate does not know of the revocation"
                )
    return problems, warnings


def edition_findings(
    batch_id: str,
    editions: list[SignedEdition],
    owner_certificate: x509.Certificate | list[x509.Certificate],
    revoked: dict[str, Revocation],
) -> tuple[list[str], list[str]]:
    """(problems, warnings) of every signed edition of one batch, each naming the edition."""
    problems: list[str] = []
    warnings: list[str] = []
    ordered = sorted(editions, key=lambda e: e.signoff_no)
    for record in ordered:
        n = record.signoff_no
        where = f"batch {batch_id}: signed edition {n} (SHA-256 {record.edition_sha256[:16]}…)"
        if record.edition is None:
            problems.append(f"{where}: cannot be read, its PDF signatures are not checked")
            continue
        # a sign-off adds its signature to the signed edition of the same report before it; the first sign-off
        # of a newer report edition (parts re-inspected) starts a new signed PDF
        lineage = [e for e in ordered if e.signoff_no <= n and e.report_sha256 == record.report_sha256]
        p, w = _edition_findings(where, lineage, pdf_signatures(record.edition, owner_certificate), revoked)
        problems += p
        warnings += w
    return problems, warnings


def check_pdf_signatures(ctx) -> None:
    """``verify``'s check: the PDF signatures of every signed edition, and the certificates of the register.

    ``ctx`` is the verifier's :class:`.checks.Context`.
    """
    from . import pki

    if "signatures" not in ctx.usable or "register" not in ctx.usable:
        return
    register = ctx.archive.register()
    owner_cert = pki.owner_certificate_of(ctx.archive, register)
    batches = ctx.batches()
    if owner_cert is None:
        if any(ctx.archive.signoffs(b.batch_id) for b in batches):
            ctx.warn(
                "PDF signatures: the archive's owner has no certificate, so its signed editions carry no PDF "
                "signature to check (they were signed before PDF signatures were made)"
            )
        return
    _check_certificates(ctx, register, owner_cert)
    roots = pki.trust_roots(ctx.archive, register)
    revoked = {
        fp: Revocation(s.printed_name, s.revoked_at_utc, s.revoked_entry_no)
        for fp, s in register.signers.items()
        if s.revoked_at_utc is not None
    }
    for batch in batches:
        editions = []
        for s in ctx.archive.signoffs(batch.batch_id):
            try:  # a changed file is read too (``stored files`` names the change): which signature breaks is named here
                data = ctx.archive.read_object(s.signed_report_sha256)
            except OSError:
                data = None
            editions.append(
                SignedEdition(
                    s.signoff_no,
                    s.signer_name,
                    s.key_fingerprint,
                    s.meaning,
                    s.comment,
                    s.signed_at_utc,
                    s.signed_report_sha256,
                    data,
                    getattr(register.signers.get(s.key_fingerprint), "pdf_public_key_hex", None),
                    report_sha256=signed_report_sha256(s),
                )
            )
        problems, warnings = edition_findings(batch.batch_id, editions, roots, revoked)
        for p in problems:
            ctx.fail(p)
        for w in warnings:
            ctx.warn(w)


def _check_certificates(ctx, register, owner_cert) -> None:
    """Each enrolled person's certificate: issued by the owner, for the register's key, name and archive."""
    from . import pki
    from .certificates import certificate_problems

    owner_pdf = pki.owner_pdf_certificate_of(ctx.archive, register)
    for fp, signer in register.signers.items():
        pdf_hex = signer.pdf_public_key_hex
        pairs = [("certificate", pki.certificate_of(ctx.archive, fp, register), owner_cert, None)]
        if pdf_hex is not None:
            pdf_cert = pki.pdf_certificate_of(ctx.archive, fp, register)
            if pdf_cert is None:
                ctx.fail(f"PDF-key certificate of {signer.printed_name} ({fp[:16]}…): missing from the archive")
            pairs.append(("PDF-key certificate", pdf_cert, owner_pdf or owner_cert, bytes.fromhex(pdf_hex)))
        for what, cert, issuer, pdf_der in pairs:
            if cert is None:
                continue  # enrolled before certificates: its sign-offs say so when it signs
            for p in certificate_problems(
                cert,
                issuer,
                public_key_raw=bytes.fromhex(signer.public_key_hex),
                printed_name=signer.printed_name,
                archive_id=ctx.archive.archive_id,
                pdf_public_der=pdf_der,
            ):
                ctx.fail(f"{what} of {signer.printed_name} ({fp[:16]}…): {p}")
