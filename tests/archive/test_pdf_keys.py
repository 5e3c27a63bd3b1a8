"""PDF keys (ECDSA P-256) beside the Ed25519 identity keys: PDF signatures that common readers check.

Reference outside the project: poppler's ``pdfsig`` (NSS), the verifier behind Evince and Okular, which cannot
verify Ed25519 in a PDF signature. With the exported owner certificate in an NSS database as a trusted CA it
must report every signature valid and its certificate trusted.
"""

from __future__ import annotations

import json
import shutil
import subprocess
import warnings

import pikepdf
import pytest
from pdfa_checks import assert_pdfa_2b

from surfinspect.archive import pki
from surfinspect.archive import store as arc
from surfinspect.archive.pdf_signature import pdf_signatures
from surfinspect.cli.main import main
from surfinspect.errors import InputError

RECIPE = (
    "recipe: t\nrevision: 1\nregions:\n  - name: face\n    rect: [8, 8, 112, 80]\n    lay_deg: 90\n    cell_px: 16\n"
)
PASS = "a-long-test-passphrase"


def _pdfsig(pdf, owner_pem, tmp_path) -> str:
    """pdfsig's report of ``pdf`` with the owner certificate trusted (an NSS database made with certutil)."""
    if shutil.which("pdfsig") is None or shutil.which("certutil") is None:
        pytest.skip("poppler-utils (pdfsig) or libnss3-tools (certutil) not installed; .ci/run installs them")
    db = tmp_path / f"nss-{pdf.stem}"  # a fresh database per call (certutil -N asks for a password on an old one)
    db.mkdir()
    subprocess.run(
        ["certutil", "-N", "-d", f"sql:{db}", "--empty-password"],
        check=True,
        capture_output=True,
        stdin=subprocess.DEVNULL,
        timeout=60,
    )
    subprocess.run(["certutil", "-A", "-d", f"sql:{db}", "-n", "owner", "-t", "CT,C,C", "-i", str(owner_pem)],
                   check=True, capture_output=True, stdin=subprocess.DEVNULL, timeout=60)  # fmt: skip
    done = subprocess.run(
        ["pdfsig", "-nssdir", f"sql:{db}", str(pdf)],
        capture_output=True,
        text=True,
        stdin=subprocess.DEVNULL,
        timeout=60,
    )
    return done.stdout


def _cli(tmp_path, *args) -> int:
    return main(["-q", *map(str, args)])


@pytest.fixture
def batch_archive(tmp_path, monkeypatch):
    from archive_helpers import fill_batch, write_images

    monkeypatch.setenv("P", PASS)
    recipe = tmp_path / "r.yaml"
    recipe.write_text(RECIPE)
    root = tmp_path / "archive"
    with arc.Archive(root, create=True):
        pass
    fill_batch(root, "B1", write_images(tmp_path / "in", ["p1.png", "p2.png"]), recipe)  # p2 is a reject
    return root


def _sign(root, key, meaning, out, capsys):
    assert main(["sign", "--archive", str(root), "--batch-id", "B1", "--key", str(key), "--passphrase-env", "P",
                 "--meaning", meaning, "--comment", f"{meaning} on the line", "--out", str(out)]) == 0  # fmt: skip
    return capsys.readouterr().err


def _register(root, tmp_path):
    for who in ("qm", "insp"):
        assert _cli(None, "keygen", "--out", tmp_path / f"{who}.key", "--passphrase-env", "P") == 0
    assert _cli(None, "owner", "init", "--archive", root, "--name", "M. QUALITY", "--key", tmp_path / "qm.key",
                "--passphrase-env", "P") == 0  # fmt: skip
    assert _cli(None, "signers", "add", "--archive", root, "--pub", tmp_path / "insp.key.pub", "--name",
                "R. OSTERMANN", "--role", "inspector", "--by", tmp_path / "qm.key", "--passphrase-env", "P") == 0  # fmt: skip


def test_pdfsig_finds_both_signatures_valid_and_trusted(batch_archive, tmp_path, capsys):
    root = batch_archive
    _register(root, tmp_path)
    assert "Ed25519" not in _sign(root, tmp_path / "insp.key", "examined", tmp_path / "s1.pdf", capsys)
    _sign(root, tmp_path / "insp.key", "released", tmp_path / "s2.pdf", capsys)
    assert _cli(None, "owner-certificate", "--archive", root, "--out", tmp_path / "owner.pem") == 0
    report = _pdfsig(tmp_path / "s2.pdf", tmp_path / "owner.pem", tmp_path)
    assert report.count("Signature Validation: Signature is Valid.") == 2, report
    assert report.count("Certificate Validation: Certificate is Trusted.") == 2, report
    assert report.count("Signer Certificate Common Name: R. OSTERMANN") == 2
    assert "Signing Hash Algorithm: SHA-256" in report and "Total document signed" in report
    with arc.Archive(root) as a:
        roots = pki.trust_roots(a)
    assert [c.ok for c in pdf_signatures((tmp_path / "s2.pdf").read_bytes(), roots)] == [True, True]
    assert _cli(None, "verify", "--archive", root) == 0
    # one flipped byte inside the first signed range: pdfsig no longer finds it valid
    data = bytearray((tmp_path / "s2.pdf").read_bytes())
    data[2000] ^= 0x01
    (tmp_path / "bad.pdf").write_bytes(bytes(data))
    assert (
        "Signature is Valid."
        not in _pdfsig(tmp_path / "bad.pdf", tmp_path / "owner.pem", tmp_path).split("Signature #2")[0]
    )


def _downgrade(key_path):
    """Rewrite a key pair in the first format (an Ed25519 key only), as keygen wrote it before PDF keys."""
    doc = json.loads(key_path.read_text())
    doc["format"] = "surfinspect.signing-key/1"
    del doc["pdf_private_key_pem"], doc["pdf_public_key_hex"]
    key_path.write_text(json.dumps(doc))
    pub = key_path.with_name(key_path.name + ".pub")
    doc = json.loads(pub.read_text())
    doc["format"] = "surfinspect.public-key/1"
    del doc["pdf_public_key_pem"], doc["pdf_key_binding_hex"]
    pub.write_text(json.dumps(doc))


def test_old_key_files_keep_signing_and_upgrade_to_pdf_keys(batch_archive, tmp_path, capsys):
    root = batch_archive
    qm, insp = tmp_path / "qm.key", tmp_path / "insp.key"
    for key in (qm, insp):
        assert _cli(None, "keygen", "--out", key, "--passphrase-env", "P") == 0
        _downgrade(key)
    assert (
        _cli(None, "owner", "init", "--archive", root, "--name", "M. QUALITY", "--key", qm, "--passphrase-env", "P")
        == 0
    )
    assert main(["signers", "add", "--archive", str(root), "--pub", f"{insp}.pub", "--name", "R. OSTERMANN",
                 "--role", "inspector", "--by", str(qm), "--passphrase-env", "P"]) == 0  # fmt: skip
    assert "keygen --upgrade" in capsys.readouterr().err
    said = _sign(root, insp, "examined", tmp_path / "s1.pdf", capsys)
    assert "PDF signature is an Ed25519 one" in said and "signers pdf-key" in said
    assert _cli(None, "signers", "pdf-key", "--archive", root, "--pub", f"{insp}.pub", "--by", qm,
                "--passphrase-env", "P") == 2  # fmt: skip
    assert "no PDF key" in capsys.readouterr().err
    for key in (qm, insp):
        assert _cli(None, "keygen", "--upgrade", key, "--passphrase-env", "P") == 0
    for pub in (f"{qm}.pub", f"{insp}.pub"):  # the owner's own PDF key first: it issues the signer's
        assert (
            _cli(None, "signers", "pdf-key", "--archive", root, "--pub", pub, "--by", qm, "--passphrase-env", "P") == 0
        )
    assert "Ed25519" not in _sign(root, insp, "released", tmp_path / "s2.pdf", capsys)
    assert _cli(None, "verify", "--archive", root) == 0
    assert _cli(None, "owner-certificate", "--archive", root, "--out", tmp_path / "owner.pem") == 0
    first, second = _pdfsig(tmp_path / "s2.pdf", tmp_path / "owner.pem", tmp_path).split("Signature #2")
    assert "Signature is Valid." not in first  # Ed25519: poppler cannot verify it
    assert "Signature is Valid." in second and "Certificate is Trusted." in second


def test_a_public_key_file_whose_pdf_key_was_swapped_is_refused(tmp_path, monkeypatch):
    from surfinspect.archive import signing

    monkeypatch.setenv("P", PASS)
    for who in ("a", "b"):
        assert _cli(None, "keygen", "--out", tmp_path / f"{who}.key", "--passphrase-env", "P") == 0
    a, b = (json.loads((tmp_path / f"{w}.key.pub").read_text()) for w in ("a", "b"))
    a["pdf_public_key_pem"] = b["pdf_public_key_pem"]
    (tmp_path / "a.key.pub").write_text(json.dumps(a))
    with pytest.raises(InputError, match="pdf_key_binding_hex: the Ed25519 key did not sign this PDF key"):
        signing.load_public_key(tmp_path / "a.key.pub")


def _dispose(root, tmp_path, decision, comment):
    assert _cli(None, "disposition", "--archive", root, "--batch-id", "B1", "--part", "p2.png", "--decision", decision,
                "--comment", comment, "--key", tmp_path / "insp.key", "--passphrase-env", "P") == 0  # fmt: skip


def test_every_signoff_and_disposition_is_readable_in_the_edition_that_carries_it(batch_archive, tmp_path, capsys):
    import sqlite3

    from pypdf import PdfReader

    root = batch_archive
    _register(root, tmp_path)
    _dispose(root, tmp_path, "rework", "rebrush the face along 90 deg")
    _sign(root, tmp_path / "insp.key", "examined", tmp_path / "s1.pdf", capsys)
    _dispose(root, tmp_path, "scrap", "the rebrushed face is still off")
    _sign(root, tmp_path / "insp.key", "released", tmp_path / "s2.pdf", capsys)
    # reference: pypdf's text extraction; the boxes are signature appearances, which pikepdf (qpdf) flattens
    # into the page first, as a printer does
    flat = tmp_path / "flat.pdf"
    with pikepdf.open(tmp_path / "s2.pdf") as pdf, warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the flattened copy's widget is no longer in the form: expected here
        pdf.flatten_annotations("print")
        pdf.save(flat)
    pages = [page.extract_text() for page in PdfReader(flat).pages]
    covered = pages[-3]  # printed by sign-off 1: the dispositions up to it
    assert "p2.png: REWORK by R. OSTERMANN" in covered and "rebrush the face along 90 deg" in covered
    assert "SCRAP" not in covered
    sheet = pages[-2]  # sign-off 1's box printed with it; sign-off 2's drawn by its signature's appearance
    for text in ("SIGN-OFF 1", "EXAMINED", "examined on the line", "Covers the 1 disposition(s) recorded up to it",
                 "SIGN-OFF 2", "R. OSTERMANN, inspector", "RELEASED", "released on the line",
                 "p2.png: SCRAP by R. OSTERMANN", "the rebrushed face is still off",
                 "Covers 2 disposition(s); new since the sign-off before it: 1", "SIGN-OFF 3"):  # fmt: skip
        assert text in sheet, text
    opened = [page.extract_text() for page in PdfReader(tmp_path / "s1.pdf").pages[-2:]]
    assert sum(t.count("kept for this sign-off: the appearance of its PDF") for t in opened) == 20  # sign-offs 2-21
    with arc.Archive(root) as a:
        roots = pki.trust_roots(a)
    first, second = pdf_signatures((tmp_path / "s2.pdf").read_bytes(), roots)
    assert first.ok and second.ok and first.modified_after == "FORM_FILLING"  # a signature field was added
    assert_pdfa_2b((tmp_path / "s2.pdf").read_bytes())  # the appearance's fonts are embedded too
    png = tmp_path / "last"
    if shutil.which("pdftoppm"):  # a picture of the page, to look at when the layout changes
        subprocess.run(["pdftoppm", "-png", "-r", "60", "-f", str(len(pages) - 1), str(tmp_path / "s2.pdf"), str(png)],
                       check=True, stdin=subprocess.DEVNULL, timeout=60)  # fmt: skip
    assert _cli(None, "verify", "--archive", root) == 0
    # a disposition record changed behind the archive's back: verify names the sign-offs that cover it
    db = sqlite3.connect(root / arc.INDEX_NAME)
    db.execute("UPDATE dispositions SET record_sha256 = ? WHERE disposition_no = 1", ("0" * 64,))
    db.commit()
    db.close()
    assert main(["verify", "--archive", str(root)]) == 1
    said = capsys.readouterr().out
    assert "sign-off #1 of batch 'B1'" in said and "disposition 1 of the 1 it covers" in said
    assert "sign-off #2 of batch 'B1'" in said and "disposition 1 of the 2 it covers" in said
