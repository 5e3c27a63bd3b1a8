"""Signed acts on an archive: set its owner, enrol and revoke signers, sign batches off, record dispositions.

Each act checks the key against the signer register (never the key file) for
the printed name, refuses a key that is not enrolled, is revoked or has the
wrong role, verifies the archive first (nothing is signed over a tampered
index), and stores its signed record together with a signed chain head.

Sign-off record (``surfinspect.signoff-record/2``, canonical JSON signed by
the signer's key) binds, per 21 CFR Part 11 §11.50 and §11.70: the printed
name and key fingerprint (with the register entry that enrolled the key),
the meaning, the UTC time, the hash of the exact report edition signed
(``report_sha256``: the batch report as stored, which the signer reviewed),
the hash of the batch's index content (``batch_content_sha256``), every
part's result hash, and the audit chain head at that moment. The signed
edition of the PDF, which prints the record's hash, is then bound by the
signer's signature over the next chain head.

Meanings (:data:`surfinspect.results.SIGNOFF_MEANINGS`) share no word with
the part or region verdicts: ``released`` (the batch may go on as judged),
``withheld`` (the batch is held back), ``examined`` (read and checked, no
release decision). Dispositions of a doubtful part: ``use-as-is``,
``rework``, ``scrap``, ``re-inspect``.
"""

from __future__ import annotations

from typing import Callable

from ..errors import InputError
from ..fsutil import sha256_bytes
from ..report.signoff_page import SHEET_OUTLINE, legacy_slot_box, sheet_slot, slot_appearance
from ..results import SIGNOFF_MEANINGS, DispositionNote, SignOff
from . import chain, pki, signing
from .certificates import certificate_der, certificate_spki, owner_certificate
from .editions import signed_report_sha256
from .pdf_signature import outline_pages, sign_pdf, signature_reason
from .records import CLOCK_ALLOWANCE_S, OLD_ERROR_VERDICT, parse_utc, time_problem
from .register import OWNER_ROLE, PDF_KEY_ACTION, check_printed_text, entry_record
from .schema import DispositionRow, RegisterRow, SignoffRow
from .store import ERROR_VERDICT, Archive, utc_now

__all__ = [
    "MEANINGS",
    "DECISIONS",
    "SIGNOFF_FORMAT",
    "DISPOSITION_FORMAT",
    "CLOCK_ALLOWANCE_S",
    "parse_utc",
    "time_problem",
    "init_owner",
    "enrol_signer",
    "revoke_signer",
    "certify_pdf_key",
    "pdf_signing_key",
    "sign_batch",
    "record_disposition",
]

MEANINGS = SIGNOFF_MEANINGS
DECISIONS = ("use-as-is", "rework", "scrap", "re-inspect")
SIGNOFF_FORMAT = "surfinspect.signoff-record/3"  # /2 and a list of the dispositions covered
DISPOSITION_FORMAT = "surfinspect.disposition-record/1"


def _require_intact(archive: Archive, what: str, batch_id: str | None = None) -> None:
    """Refuse to sign over a problem: the chain, every index row, the register and the signed heads are
    checked whole, and the files, results and signatures of ``batch_id`` (none when it is None)."""
    from .verify import verify_archive  # the verifier checks signed acts: imported when used

    report = verify_archive(archive, batch_id, shared_only=batch_id is None)
    if report.problems:
        more = f" (and {len(report.problems) - 1} more)" if len(report.problems) > 1 else ""
        raise InputError(
            f"{archive.location}: {what} refused: the archive does not verify: {report.problems[0]}{more}; "
            "run `surfinspect verify` and have the findings cleared first"
        )


# ------------------------------------------------------------------ register


def _register_entry(
    archive, owner_key, *, action, subject_fp, subject_pub, name, role, reason, certify=None, pdf=None
) -> RegisterRow:
    """Sign and store one register entry; ``certify(entry_no, recorded_at_utc)`` gives the certificates
    (:mod:`.pki`) stored with it; ``pdf`` is (PDF key DER, binding signature) when the entry names a PDF key."""
    register = archive.register()
    events, head = archive.chain_head()
    at = utc_now()
    record = entry_record(
        archive_id=archive.archive_id,
        entry_no=register.next_entry_no,
        action=action,
        key_fingerprint=subject_fp,
        public_key_hex=subject_pub,
        printed_name=name,
        role=role,
        reason=reason,
        recorded_at_utc=at,
        by_fingerprint=owner_key.fingerprint,
        audit_events=events,
        audit_head_sha256=head,
        pdf_public_key_hex=pdf[0].hex() if pdf else None,
        pdf_key_binding_hex=pdf[1].hex() if pdf else None,
    )
    signature = owner_key.sign(chain.canonical_bytes(record))
    columns = {f: record[f] for f in RegisterRow.__dataclass_fields__ if f in record}
    row = RegisterRow(
        **columns, record_json=chain.canonical_bytes(record).decode("utf-8"), signature_hex=signature.hex()
    )
    issued = certify(record["entry_no"], at) if certify else []
    archive.add_register_entry(row, owner_key, (events, head), certificates_der=[certificate_der(c) for c in issued])
    return row


def init_owner(archive: Archive, owner_key: signing.SigningKey, printed_name: str) -> RegisterRow:
    """Give the archive its owner, once: a self-signed register entry."""
    name = check_printed_text("--name", printed_name)
    owner = archive.register().owner
    if owner is not None:
        raise InputError(
            f"{archive.location}: the archive already has an owner ({owner.printed_name}, key {owner.key_fingerprint[:16]}…, "
            f"since {owner.enrolled_at_utc}); the owner is set once"
        )
    _require_intact(archive, "setting the owner")
    pub = owner_key.public_key_raw.hex()
    own_keys = [owner_key.private_key] + ([owner_key.pdf_key] if owner_key.pdf_key is not None else [])
    return _register_entry(
        archive,
        owner_key,
        action="owner",
        subject_fp=owner_key.fingerprint,
        subject_pub=pub,
        name=name,
        role=OWNER_ROLE,
        reason="",
        certify=lambda entry_no, at: [
            owner_certificate(
                k, printed_name=name, archive_id=archive.archive_id, entry_no=entry_no, issued_at=pki.utc(at)
            )
            for k in own_keys
        ],
        pdf=_pdf_fields(owner_key.pdf_public_der, owner_key),
    )


def _pdf_fields(pdf_public_der: bytes | None, holder) -> tuple[bytes, bytes] | None:
    """(PDF key DER, the Ed25519 key's binding signature) for a register record; None without a PDF key."""
    if pdf_public_der is None:
        return None
    binding = holder.pdf_binding_signature() if isinstance(holder, signing.SigningKey) else holder.pdf_binding
    return pdf_public_der, binding


def _owner_certificates(archive, owner_key) -> tuple:
    """The owner's certificate, and a list with it when it must still be stored (an owner set before certificates)."""
    stored = pki.owner_certificate_of(archive)
    if stored is not None:
        return stored, []
    made = pki.owner_certificate_for(owner_key.private_key, archive.register().owner, archive.archive_id)
    return made, [made]


def enrol_signer(
    archive: Archive, owner_key: signing.SigningKey, public: signing.PublicKeyInfo, printed_name: str, role: str
) -> RegisterRow:
    """Enrol a person's or a station's public key under a printed name and role, signed by the owner."""
    name = check_printed_text("--name", printed_name)
    role = check_printed_text("--role", role, max_len=40)
    register = archive.register()
    register.require_owner(owner_key.fingerprint, "--by")
    if register.key_holder(public.fingerprint) is not None:
        holder = register.key_holder(public.fingerprint)
        state = "revoked" if holder.revoked_at_utc else "enrolled"
        if holder is register.owner:
            raise InputError(
                f"--pub: this is the archive owner's key ({holder.printed_name}); it certifies the register and "
                "cannot be enrolled to sign: make a separate key with keygen and enrol that one"
            )
        raise InputError(
            f"--pub: this key ({public.fingerprint[:16]}…) is already {state} for {holder.printed_name}; "
            "a key is enrolled once (make a new key with keygen)"
        )
    same_name = [s for s in register.signers.values() if s.printed_name == name and s.revoked_at_utc is None]
    if same_name:
        raise InputError(
            f"--name: {name!r} is already enrolled with key {same_name[0].key_fingerprint[:16]}…; a printed name "
            "belongs to one signer (revoke the old key first, or tell the two apart)"
        )
    _require_intact(archive, "enrolment")
    return _register_entry(
        archive,
        owner_key,
        action="enrol",
        subject_fp=public.fingerprint,
        subject_pub=public.public_key_raw.hex(),
        name=name,
        role=role,
        reason="",
        certify=lambda entry_no, at: _issue(
            archive, owner_key, [public.public_key_raw, public.pdf_public_der], name, role, entry_no, at
        ),
        pdf=_pdf_fields(public.pdf_public_der, public),
    )


def _pdf_issuer(archive, owner_key) -> tuple:
    """(issuer key, issuer certificate) for a PDF key's certificate: the owner's PDF key and its CA certificate,
    or (an owner without one) the owner's Ed25519 key and certificate."""
    owner_pdf = pki.owner_pdf_certificate_of(archive)
    if owner_pdf is None:
        return owner_key.private_key, _owner_certificates(archive, owner_key)[0]
    if owner_key.pdf_key is None or signing.spki_der(owner_key.pdf_key.public_key()) != certificate_spki(owner_pdf):
        raise InputError(
            "--by: the owner's key file does not hold the owner's certified PDF key; use the owner's own key file"
        )
    return owner_key.pdf_key, owner_pdf


def _issue(archive, owner_key, public_keys: list, name: str, role: str, entry_no: int, at: str) -> list:
    """The certificates of a holder's keys (raw Ed25519 and/or PDF key DER; None skipped), issued by the owner,
    and the owner's own when it is not stored yet."""
    owner_cert, missing = _owner_certificates(archive, owner_key)
    issued = []
    for public in public_keys:
        if public is None:
            continue
        key, cert = (owner_key.private_key, owner_cert) if len(public) == 32 else _pdf_issuer(archive, owner_key)
        issued.append(
            pki.signer_certificate_for(
                key,
                cert,
                public,
                printed_name=name,
                role=role,
                archive_id=archive.archive_id,
                entry_no=entry_no,
                recorded_at_utc=at,
            )
        )
    return missing + issued


def certify_pdf_key(archive: Archive, owner_key: signing.SigningKey, public: signing.PublicKeyInfo) -> RegisterRow:
    """Certify the PDF key of a holder (an enrolled signer, or the owner) whose key was made before PDF keys."""
    register = archive.register()
    register.require_owner(owner_key.fingerprint, "--by")
    holder = register.key_holder(public.fingerprint)
    if holder is None or holder.revoked_at_utc is not None:
        raise InputError(
            f"--pub: this key ({public.fingerprint[:16]}…) is not an enrolled, unrevoked key of the archive "
            "(enrol a new key with `surfinspect signers add`)"
        )
    if public.pdf_public_der is None:
        raise InputError(f"--pub: the public key file holds no PDF key; {signing.UPGRADE_HINT}")
    if holder.pdf_public_key_hex is not None:
        raise InputError(f"--pub: {holder.printed_name} already has a certified PDF key; a PDF key is certified once")
    is_owner = holder is register.owner
    if is_owner and owner_key.pdf_public_der != public.pdf_public_der:
        raise InputError("--pub: the owner's PDF key is certified from the owner's own upgraded key file (--by)")
    _require_intact(archive, "certifying the PDF key")

    def certify(entry_no, at):
        if is_owner:
            made = owner_certificate(
                owner_key.pdf_key,
                printed_name=holder.printed_name,
                archive_id=archive.archive_id,
                entry_no=entry_no,
                issued_at=pki.utc(at),
            )
            return _owner_certificates(archive, owner_key)[1] + [made]
        return _issue(archive, owner_key, [public.pdf_public_der], holder.printed_name, holder.role, entry_no, at)

    return _register_entry(
        archive,
        owner_key,
        action=PDF_KEY_ACTION,
        subject_fp=holder.key_fingerprint,
        subject_pub=holder.public_key_hex,
        name=holder.printed_name,
        role=holder.role,
        reason="",
        certify=certify,
        pdf=_pdf_fields(public.pdf_public_der, public),
    )


def revoke_signer(archive: Archive, owner_key: signing.SigningKey, fingerprint: str, reason: str) -> RegisterRow:
    """Withdraw an enrolled key from now on (what it signed before stays valid), signed by the owner."""
    register = archive.register()
    register.require_owner(owner_key.fingerprint, "--by")
    matches = (
        [s for fp, s in register.signers.items() if fp.startswith(fingerprint.lower())] if len(fingerprint) >= 8 else []
    )
    if len(matches) != 1:
        raise InputError(
            f"--key-fingerprint: {fingerprint!r} names {len(matches)} enrolled key(s) (allowed: 8 or more leading hex "
            "digits of exactly one enrolled key; `surfinspect signers list` shows them)"
        )
    signer = matches[0]
    if signer.revoked_at_utc is not None:
        raise InputError(
            f"--key-fingerprint: the key of {signer.printed_name} was already revoked at {signer.revoked_at_utc}"
        )
    _require_intact(archive, "revocation")
    return _register_entry(
        archive,
        owner_key,
        action="revoke",
        subject_fp=signer.key_fingerprint,
        subject_pub=signer.public_key_hex,
        name=signer.printed_name,
        role=signer.role,
        reason=" ".join(reason.split()),
    )


# ------------------------------------------------------------------ sign-off


def sign_batch(
    archive: Archive,
    batch_id: str,
    key: signing.SigningKey,
    *,
    meaning: str,
    comment: str = "",
    render_edition: Callable[[SignOff], bytes],
    signed_at_utc: str | None = None,
) -> SignoffRow:
    """Sign a finished batch and store the signed edition of its report.

    ``render_edition`` receives the :class:`SignOff` to print in the report's
    sign-off block and returns the PDF bytes.

    Raises
    ------
    InputError
        For an unknown or unfinished batch, an unknown meaning, a key that
        is not enrolled or is revoked or a station's, a time that is not a
        real one, or an archive that does not verify.
    """
    batch = archive.batch(batch_id)
    if not batch.is_finished:
        raise InputError(
            f"--batch-id: batch {batch_id!r} is not finished (no batch report yet); run the batch again to finish it"
        )
    if meaning not in MEANINGS:
        raise InputError(f"--meaning: unknown meaning (got {meaning!r}, allowed {', '.join(MEANINGS)})")
    at = signed_at_utc or utc_now()
    signer = archive.register().require_signer(key.fingerprint, at, "--key", station_allowed=False)
    problem = time_problem(at, not_before=batch.finished_at)
    if problem:
        raise InputError(f"signed_at_utc: {problem}")
    _require_intact(archive, "signing", batch_id)
    events, head = archive.chain_head()
    number = 1 + len(archive.signoffs(batch_id))
    dispositions = archive.dispositions(batch_id)
    record = {
        "format": SIGNOFF_FORMAT,
        "archive_id": archive.archive_id,
        "batch_id": batch_id,
        "signoff_no": number,
        "signer_name": signer.printed_name,
        "key_fingerprint": key.fingerprint,
        "register_entry": signer.entry_no,
        "meaning": meaning,
        "signed_at_utc": at,
        "comment": " ".join(comment.split()),
        "report_sha256": batch.report_sha256,
        "batch_content_sha256": archive.batch_content_sha256(batch_id),
        "results_sha256": archive.results_sha256(batch_id),
        "dispositions_sha256": [d.record_sha256 for d in dispositions],
        "audit_events": events,
        "audit_head_sha256": head,
    }
    record_bytes = chain.canonical_bytes(record)
    signature = signing.sign_record(key, record)
    signoff = SignOff(
        signer_name=signer.printed_name,
        meaning=meaning,
        signed_at_utc=at,
        key_fingerprint=key.fingerprint,
        comment=record["comment"],
        record_sha256=chain.canonical_sha256(record),
        report_sha256=batch.report_sha256,
        chain_head=f"{events} {head}",
        dispositions=tuple(
            DispositionNote(d.part_key, d.decision, d.signer_name, d.decided_at_utc, d.comment, d.disposition_no)
            for d in dispositions
        ),
        signoff_no=number,
        role=signer.role,
    )
    edition = _pdf_signed_edition(archive, batch_id, key, number, record, render_edition, signoff)
    row = SignoffRow(
        batch_id=batch_id,
        signoff_no=number,
        signer_name=signer.printed_name,
        key_fingerprint=key.fingerprint,
        meaning=meaning,
        signed_at_utc=at,
        comment=record["comment"],
        record_json=record_bytes.decode("utf-8"),
        record_sha256=signoff.record_sha256,
        signature_hex=signature.hex(),
        signed_report_sha256=sha256_bytes(edition),
    )
    return archive.add_signoff(row, signed_report_pdf=edition, key=key, expected_head=(events, head))


def _pdf_signed_edition(archive, batch_id, key, number, record, render_edition, signoff) -> bytes:
    """The signed edition with its PDF signature (:mod:`.pdf_signature`): sign-off 1 signs the report rendered
    with its sign-off block; each later one is an incremental update of the edition before it, so that every
    earlier PDF signature stays valid."""
    register = archive.register()
    private, cert = pdf_signing_key(archive, key, register)
    if cert is None:
        raise InputError(
            f"--key: the register holds no certificate for this key ({key.fingerprint[:16]}…): it was enrolled "
            "before signers got certificates; the owner revokes it and enrols a new key for the PDF signature"
        )
    issuer = next((c for c in pki.trust_roots(archive, register) if c.subject == cert.issuer), None)
    if issuer is None:
        raise InputError(
            f"--key: the owner's certificate that issued the certificate of {key.fingerprint[:16]}… is missing"
        )
    # later sign-offs of the same report edition add their signature to the signed PDF before them; the first
    # sign-off of a report edition (the first one, or one written after parts were re-inspected) renders it
    same = [s for s in archive.signoffs(batch_id) if signed_report_sha256(s) == record["report_sha256"]]
    appearance = place = None
    if not same:
        base = render_edition(signoff)
    else:
        previous = same[-1]
        base = archive.read_object(previous.signed_report_sha256)
        place = _later_place(base, len(same) + 1, '"dispositions_sha256"' in same[0].record_json)
        if place is not None:
            since = tuple(d for d in signoff.dispositions if d.decided_at_utc > previous.signed_at_utc)
            appearance = slot_appearance(signoff, since, place[1])
    return sign_pdf(
        base,
        private,
        cert,
        issuer,
        field_name=f"signoff-{number}",
        reason=signature_reason(record["meaning"], record["comment"]),
        signed_at=pki.utc(record["signed_at_utc"]),
        appearance=appearance,
        box=place[1] if place else None,
        on_page=place[0] if place else -1,
    )


def _later_place(base: bytes, position: int, has_boxes: bool) -> tuple[int, tuple] | None:
    """(page, box) of the ``position``-th sign-off of a signed edition, or None for an invisible signature.

    An edition with a sign-off sheet names its pages in its outline; one signed before the sheet
    (``has_boxes``: its sign-off 1 record lists dispositions) has four boxes on its last page; an older one none.
    """
    pages = outline_pages(base)
    if SHEET_OUTLINE[0] in pages:
        slot = sheet_slot(position)
        page = pages.get(SHEET_OUTLINE[slot[0]]) if slot is not None else None
        return (page, slot[1]) if page is not None else None
    box = legacy_slot_box(position) if has_boxes else None
    return (pages[""], box) if box is not None else None


def pdf_signing_key(archive, key: signing.SigningKey, register=None) -> tuple:
    """(private key, certificate) the PDF signature is made with: the holder's PDF key (ECDSA P-256) when the
    key file holds it and the register certified it, else the Ed25519 key and its certificate (readers without
    EdDSA cannot check that one; :data:`.signing.UPGRADE_HINT` says what to do). The certificate is None when
    the key has none."""
    register = register or archive.register()
    pdf_cert = pki.pdf_certificate_of(archive, key.fingerprint, register)
    if key.pdf_key is not None and pdf_cert is not None and certificate_spki(pdf_cert) == key.pdf_public_der:
        return key.pdf_key, pdf_cert
    return key.private_key, pki.certificate_of(archive, key.fingerprint, register)


def record_disposition(
    archive: Archive, batch_id: str, part_key: str, key: signing.SigningKey, *, decision: str, comment: str = ""
) -> DispositionRow:
    """Record what is to become of a rejected, doubtful or uninspected part, signed by an enrolled person.

    Raises
    ------
    InputError
        For an unknown batch or part, an accepted or pending part, an unknown
        decision, a key that may not sign, or an archive that does not verify.
    """
    if decision not in DECISIONS:
        raise InputError(f"--decision: unknown decision (got {decision!r}, allowed {', '.join(DECISIONS)})")
    archive.batch(batch_id)
    part = archive.part(batch_id, part_key)
    if part.verdict not in ("reject", "review", ERROR_VERDICT, OLD_ERROR_VERDICT):
        raise InputError(
            f"--part: part {part_key!r} of batch {batch_id!r} is {part.verdict or 'not inspected yet'}; "
            "a disposition is for a part judged reject or review, or one that could not be inspected"
        )
    at = utc_now()
    signer = archive.register().require_signer(key.fingerprint, at, "--key", station_allowed=False)
    _require_intact(archive, "the disposition", batch_id)
    events, head = archive.chain_head()
    number = 1 + len([d for d in archive.dispositions(batch_id) if d.part_key == part_key])
    record = {
        "format": DISPOSITION_FORMAT,
        "archive_id": archive.archive_id,
        "batch_id": batch_id,
        "part_key": part_key,
        "disposition_no": number,
        "decision": decision,
        "part_verdict": part.verdict,
        "result_sha256": part.result_sha256,
        "signer_name": signer.printed_name,
        "key_fingerprint": key.fingerprint,
        "register_entry": signer.entry_no,
        "decided_at_utc": at,
        "comment": " ".join(comment.split()),
        "audit_events": events,
        "audit_head_sha256": head,
    }
    row = DispositionRow(
        batch_id=batch_id,
        part_key=part_key,
        disposition_no=number,
        decision=decision,
        signer_name=signer.printed_name,
        key_fingerprint=key.fingerprint,
        decided_at_utc=at,
        comment=record["comment"],
        record_json=chain.canonical_bytes(record).decode("utf-8"),
        record_sha256=chain.canonical_sha256(record),
        signature_hex=signing.sign_record(key, record).hex(),
    )
    archive.add_disposition(row, key=key, expected_head=(events, head))
    return row
