"""The archive: index behind one backend interface, content-addressed files, the audit chain, the
signer register, signed acts and verification. Imports the shared contracts only (no measurement,
no report, no station).

Modules, one concern each: ``schema`` (tables and row types), ``backend`` (the index interface),
``sqlite_backend`` (SQLite behind it), ``objects`` (files by content hash), ``chain`` (canonical
serialisation, event hashes, row replay), ``register`` (who may sign), ``records`` (plain records and ids), ``store`` (the Archive),
``batch_writes`` (the Archive's writes of a batch: started, parts recorded, finished),
``editions`` (report editions: re-inspected parts, the batch as an edition had it),
``signatures`` (owner, enrolment, sign-off, disposition), ``signing`` (keys), ``certificates`` and ``pki``
(X.509 for the owner and signers, stored with the register), ``pdf_signature`` (PAdES signing and
validation), ``checks``, ``signed_checks``, ``pdf_checks`` and ``verify`` (the verifier and anchors).
"""

from .._lazy import attach

__getattr__, __dir__ = attach(
    __name__,
    (
        "signing",
        "schema",
        "backend",
        "chain",
        "register",
        "records",
        "store",
        "editions",
        "signatures",
        "certificates",
        "pki",
        "pdf_signature",
        "verify",
    ),
)
