"""The archive: index, content-addressed files, hash-chained audit trail, signatures, verification.
Imports the shared contracts only (no measurement, no report).
"""

from .._lazy import attach

__getattr__, __dir__, __all__ = attach(
    __name__,
    {
        "signing": (
            "MEANINGS",
            "RECORD_FORMAT",
            "SigningKey",
            "PublicKeyInfo",
            "key_fingerprint",
            "verify_signature",
            "write_key_pair",
            "load_signing_key",
            "load_public_key",
            "public_key_path_for",
            "passphrase_from_env",
            "make_signoff_record",
            "canonical_record_bytes",
            "sign_record",
            "verify_record",
        ),
        "store": (
            "ARCHIVE_FORMAT",
            "ERROR_SCHEMA",
            "EventKind",
            "Archive",
            "BatchRow",
            "PartRow",
            "SignoffRow",
            "BatchPlan",
            "image_set_sha256",
            "error_record_json",
            "sign_batch",
            "verify",
            "utc_now",
        ),
    },
)
