"""The archive: index behind one backend interface, content-addressed files, the audit chain, the
signer register, signed acts and verification. Imports the shared contracts only (no measurement,
no report, no station).

Modules, one concern each: ``schema`` (tables and row types), ``backend`` (the index interface),
``sqlite_backend`` (SQLite behind it), ``objects`` (files by content hash), ``chain`` (canonical
serialisation, event hashes, row replay), ``register`` (who may sign), ``records`` (plain records and ids), ``store`` (the Archive),
``editions`` (report editions: re-inspected parts, the batch as an edition had it),
``signatures`` (owner, enrolment, sign-off, disposition), ``signing`` (keys), ``certificates`` and ``pki``
(X.509 for the owner and signers, stored with the register), ``pdf_signature`` (PAdES signing and
validation), ``checks``, ``signed_checks``, ``pdf_checks`` and ``verify`` (the verifier and anchors).
"""

from .._lazy import attach

__getattr__, __dir__, __all__ = attach(
    __name__,
    {
        "signing": (
            "SigningKey",
            "PublicKeyInfo",
            "key_fingerprint",
            "verify_signature",
            "write_key_pair",
            "load_signing_key",
            "load_public_key",
            "public_key_path_for",
            "passphrase_from_env",
            "sign_record",
            "verify_record",
        ),
        "schema": ("ARCHIVE_FORMAT", "BatchRow", "PartRow", "SignoffRow", "DispositionRow", "RegisterRow", "EventRow"),
        "backend": ("IndexBackend", "IndexDamaged"),
        "chain": ("EventKind", "canonical_bytes"),
        "register": ("Register", "Signer", "STATION_ROLE"),
        "store": ("Archive", "BatchPlan"),
        "editions": ("Retried", "edition_events", "batch_state_at", "signs_newest_edition"),
        "records": (
            "ERROR_SCHEMA",
            "image_set_sha256",
            "error_record_json",
            "check_batch_id",
            "verdict_counts",
            "utc_now",
        ),
        "signatures": (
            "MEANINGS",
            "DECISIONS",
            "init_owner",
            "enrol_signer",
            "revoke_signer",
            "sign_batch",
            "record_disposition",
        ),
        "certificates": ("owner_certificate", "signer_certificate", "load_certificate", "certificate_sha256"),
        "pki": ("owner_certificate_of", "certificate_of"),
        "pdf_signature": ("PdfSignatureCheck", "sign_pdf", "pdf_signatures"),
        "verify": ("VerifyReport", "verify", "verify_archive", "export_anchor", "read_anchor"),
    },
)
