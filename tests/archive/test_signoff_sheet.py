"""Many sign-offs of one signed edition: each shows on the sign-off sheet, each earlier PDF signature stays
valid, and a change to any incremental revision is found by ``verify``.

References outside the project: pyHanko's validation and difference analysis (an implementation of ISO 32000-1
signature validation: integrity, and what a later revision may change); pypdf's text extraction after pikepdf
(qpdf) has flattened the signature appearances into the pages, as a printer does; poppler's ``pdfsig``.
"""

from __future__ import annotations

import io
import shutil
import subprocess
import warnings

import pikepdf
import pytest
from archive_helpers import BATCH, RECIPE_TEXT, fill_batch, write_images
from pdfa_checks import assert_pdfa_2b
from pypdf import PdfReader

from surfinspect.archive import pki, signatures, signing
from surfinspect.archive import store as arc
from surfinspect.archive.pdf_signature import pdf_signatures
from surfinspect.archive.verify import verify_archive
from surfinspect.report.signoff_page import BOXED, SHEET_OUTLINE
from surfinspect.station.batch_outputs import render_batch_report

MEANINGS = ("examined", "withheld", "released")
PEOPLE = (("R. OSTERMANN", "inspector"), ("J. NAKAMURA-WEISS", "quality engineer"))


def _with_pdf_key(key: signing.SigningKey) -> signing.PublicKeyInfo:
    return signing.PublicKeyInfo("", key.public_key_raw, key.pdf_public_der, key.pdf_binding_signature())


@pytest.fixture
def sheet_archive(tmp_path):
    """A finished batch (p2.png a reject), an owner and two enrolled people with PDF keys (P-256)."""
    recipe = tmp_path / "r.yaml"
    recipe.write_text(RECIPE_TEXT)
    root = tmp_path / "archive"
    owner = signing.SigningKey.generate()
    people = [signing.SigningKey.generate() for _ in PEOPLE]
    with arc.Archive(root, create=True) as a:
        signatures.init_owner(a, owner, "M. QUALITY")
        for key, (name, role) in zip(people, PEOPLE):
            signatures.enrol_signer(a, owner, _with_pdf_key(key), name, role)
    fill_batch(root, BATCH, write_images(tmp_path / "in", ["p1.png", "p2.png"]), recipe)
    return root, people


def _sign(a, key, n: int):
    return signatures.sign_batch(
        a,
        BATCH,
        key,
        meaning=MEANINGS[n % 3],
        comment=f"look {n} at lot 17, drawing LW-220 sheet {n}",
        render_edition=lambda s: render_batch_report(a, BATCH, signoff=s),
    )


def _sign_many(root, people, n: int, dispose_before=(1, 3, 7)) -> list:
    rows = []
    with arc.Archive(root) as a:
        for k in range(1, n + 1):
            if k in dispose_before:
                decision = ("rework", "scrap", "use-as-is")[dispose_before.index(k) % 3]
                signatures.record_disposition(a, BATCH, "p2.png", people[0], decision=decision, comment=f"before {k}")
            rows.append(_sign(a, people[k % 2], k))
    return rows


def _flat_text(pdf: bytes) -> list[str]:
    with pikepdf.open(io.BytesIO(pdf)) as doc, warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the flattened copy's widgets leave the form: expected here
        doc.flatten_annotations("print")
        out = io.BytesIO()
        doc.save(out)
    return [page.extract_text() for page in PdfReader(out).pages]


def _editions(root) -> list[bytes]:
    with arc.Archive(root) as a:
        return [a.read_object(s.signed_report_sha256) for s in a.signoffs(BATCH)]


def test_thirteen_signoffs_each_show_on_the_sheet_and_every_earlier_signature_stays_valid(sheet_archive, tmp_path):
    root, people = sheet_archive
    n = 13
    rows = _sign_many(root, people, n)
    editions = _editions(root)
    with arc.Archive(root) as a:
        roots = pki.trust_roots(a)
        dispositions = a.dispositions(BATCH)
    for k, edition in enumerate(editions, start=1):
        assert k == 1 or edition.startswith(editions[k - 2])  # each one the one before plus an update
        checks = pdf_signatures(edition, roots)
        assert [c.field_name for c in checks] == [f"signoff-{i}" for i in range(1, k + 1)]
        assert all(c.ok and c.intact for c in checks), [c.problems for c in checks]
        # pyHanko's difference analysis: what the later revisions added is a signature field (form filling)
        assert [c.modified_after for c in checks[:-1]] == ["FORM_FILLING"] * (k - 1)
    pages = _flat_text(editions[-1])
    sheet = pages[-2] + pages[-1]
    for row in rows:
        name, role = PEOPLE[row.signoff_no % 2]
        for text in (
            f"SIGN-OFF {row.signoff_no}",
            row.meaning.upper(),
            f"{name}, {role}  ·  {row.signed_at_utc}",
            row.comment,
            row.key_fingerprint,
            row.record_sha256,
        ):
            assert text in sheet, (row.signoff_no, text)
    assert f"SIGN-OFF {n + 1}\nkept for this sign-off" in sheet  # the next box, not filled
    # the dispositions each covers: all counted, the new ones listed in the box of the sign-off after them
    assert "Covers the 1 disposition(s) recorded up to it" in sheet
    assert "Covers 2 disposition(s); new since the sign-off before it: 1" in sheet
    assert "Covers 3 disposition(s); new since the sign-off before it: none" in sheet
    for d in dispositions:
        assert f"p2.png: {d.decision.upper()} by R. OSTERMANN, {d.decided_at_utc}: {d.comment}" in sheet
    # no page before the sheet names a later signer or meaning: only sign-off 1's own block on the summary
    assert not any("J. NAKAMURA-WEISS" in page for page in pages[1:-2])
    assert verify_archive(root).problems == []
    assert_pdfa_2b(editions[-1])  # the appearances' fonts are embedded too
    (tmp_path / "e.pdf").write_bytes(editions[-1])
    if shutil.which("pdfsig"):  # without the owner's certificate in an NSS database: not trusted, but valid
        said = subprocess.run(["pdfsig", str(tmp_path / "e.pdf")], capture_output=True, text=True,
                              stdin=subprocess.DEVNULL, timeout=120).stdout  # fmt: skip
        assert said.count("Signature Validation: Signature is Valid.") == n, said
    if shutil.which("pdftoppm"):  # pictures of the sheet, to look at when its layout changes
        subprocess.run(["pdftoppm", "-png", "-r", "70", "-f", str(len(pages) - 1), str(tmp_path / "e.pdf"),
                        str(tmp_path / "sheet")], check=True, stdin=subprocess.DEVNULL, timeout=120)  # fmt: skip


def test_a_changed_byte_in_any_incremental_revision_is_found_by_verify(sheet_archive, capsys):
    root, people = sheet_archive
    n = 6
    _sign_many(root, people, n, dispose_before=(2,))
    editions = _editions(root)
    with arc.Archive(root) as a:
        last = a.signoffs(BATCH)[-1]
        path = a.object_path(last.signed_report_sha256)
    original = path.read_bytes()
    path.chmod(0o600)
    for k in (1, 2, 4, n):
        start = 0 if k == 1 else len(editions[k - 2])
        data = bytearray(original)
        at = data.index(b"/Reason", start) + len(b"/Reason (") if k > 1 else 400  # inside revision k
        assert start <= at < len(editions[k - 1])
        data[at] ^= 0x01
        path.write_bytes(bytes(data))
        found = [p for p in verify_archive(root).problems if f"signed edition {n} " in p]
        broken = {i for i in range(1, n + 1) if any(f"PDF signature {i} (" in p for p in found)}
        # the signatures that cover the changed revision break, the earlier ones stay valid
        assert broken == set(range(k, n + 1)), (k, found)
    path.write_bytes(original)
    assert verify_archive(root).problems == []


def test_signoffs_after_the_last_box_stay_verified_and_the_sheet_says_where_they_are(sheet_archive, monkeypatch):
    root, people = sheet_archive
    # the archive is verified once at the end, not before each of the 23 sign-offs (that check has its own tests)
    monkeypatch.setattr(signatures, "_require_intact", lambda *args, **kwargs: None)
    n = BOXED + 2
    rows = _sign_many(root, people, n, dispose_before=())
    final = _editions(root)[-1]
    with pikepdf.open(io.BytesIO(final)) as doc:
        fields = {str(f.T): f for f in doc.Root.AcroForm.Fields}
        assert sorted(fields) == sorted(f"signoff-{k}" for k in range(1, n + 1))
        boxed = {k for k in range(1, n + 1) if any(float(v) for v in fields[f"signoff-{k}"].Rect)}
    assert boxed == set(range(2, BOXED + 1))  # sign-off 1 is printed on the sheet; BOXED + 1 and later: no box
    pages = _flat_text(final)
    assert f"SIGN-OFFS {BOXED + 1} AND LATER: SEE THE ARCHIVE RECORD" in pages[-1]
    assert rows[BOXED - 1].record_sha256 in pages[-1] and rows[BOXED].record_sha256 not in "".join(pages)
    assert verify_archive(root).problems == []
    with arc.Archive(root) as a:
        checks = pdf_signatures(final, pki.trust_roots(a))
    assert len(checks) == n and all(c.ok for c in checks)
    assert [c.reason for c in checks[-2:]] == [signatures.signature_reason(r.meaning, r.comment) for r in rows[-2:]]
    assert len(SHEET_OUTLINE) == 2


def test_a_page_added_by_a_later_revision_is_more_than_form_filling(sheet_archive):
    """Why the sheet is fixed at sign-off 1: pyHanko rates a revision that adds a page beyond FORM_FILLING."""
    from pyhanko.pdf_utils import generic
    from pyhanko.pdf_utils.incremental_writer import IncrementalPdfFileWriter

    root, people = sheet_archive
    _sign_many(root, people, 1, dispose_before=())
    (edition,) = _editions(root)
    writer = IncrementalPdfFileWriter(io.BytesIO(edition))
    page = generic.DictionaryObject({generic.pdf_name("/Type"): generic.pdf_name("/Page"),
                                     generic.pdf_name("/MediaBox"): generic.ArrayObject(
                                         [generic.NumberObject(v) for v in (0, 0, 595, 842)])})  # fmt: skip
    writer.insert_page(page)
    out = io.BytesIO()
    writer.write(out)
    with arc.Archive(root) as a:
        (check,) = pdf_signatures(out.getvalue(), pki.trust_roots(a))
    assert check.intact and check.modified_after not in ("NONE", "LTA_UPDATES", "FORM_FILLING")
