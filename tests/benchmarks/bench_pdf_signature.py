"""Benchmark: what archival PDF and PDF signatures cost beside rendering the report.

Run from the checkout root::

    python tests/benchmarks/bench_pdf_signature.py [--parts 3] [--runs 3]

Renders an n-part report of 12-megapixel synthetic panels (the engine's time
not counted), then times, best of ``--runs``: the PDF/A finishing step alone
(pikepdf rewrite, output intent, XMP) on the drawn document, one PAdES
signature (sign-off 1), a second one (incremental), and pyHanko's validation
of both; then the same with the P-256 PDF key (ECDSA, SHA-256), the second
signature with its visible appearance in the box of sign-off 2. Prints each as seconds and as a ratio to the report's rendering
measured in the same run, and the bytes each adds.
"""

from __future__ import annotations

import argparse
import time
from datetime import datetime, timedelta, timezone

from bench_report import SHAPE, WHEN, best_of, recipe_text
from cryptography.hazmat.primitives.asymmetric import ec
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

import surfinspect.report.pdf as report_pdf
from surfinspect.archive import certificates as certs
from surfinspect.archive.pdf_signature import pdf_signatures, sign_pdf
from surfinspect.measure import synth
from surfinspect.measure.engine import inspect_image
from surfinspect.pdfa import document
from surfinspect.recipe import parse_recipe
from surfinspect.report.pdf import render_report


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--parts", type=int, default=3)
    parser.add_argument("--runs", type=int, default=3)
    args = parser.parse_args()
    recipe = parse_recipe(recipe_text(32))
    pixels = synth.brushed_panel(SHAPE, 90.0, seed=5, patch_rect=(1600, 1200, 500, 400), patch_lay_deg=0.0)
    part = inspect_image(pixels, recipe, name="LW-220-BENCH")
    parts, images = [part] * args.parts, [pixels] * args.parts

    captured = {}
    real_finish = document.finish_archival

    def capture(pdf, info):
        captured["drawn"], captured["info"] = pdf, info
        return real_finish(pdf, info)

    report_pdf.finish_archival = capture  # the report module's own reference: keep the drawn bytes too
    t_render = best_of(args.runs, lambda: render_report(parts, images, report_id="BENCH", generated_at=WHEN))
    report = render_report(parts, images, report_id="BENCH", generated_at=WHEN)
    t_finish = best_of(args.runs, lambda: real_finish(captured["drawn"], captured["info"]))

    owner_key, signer_key = Ed25519PrivateKey.generate(), Ed25519PrivateKey.generate()
    enrolled = datetime.now(timezone.utc) - timedelta(days=1)
    owner = certs.owner_certificate(owner_key, printed_name="Q", archive_id="bench", entry_no=1, issued_at=enrolled)
    signer = certs.signer_certificate(
        owner_key,
        owner,
        signer_key.public_key().public_bytes_raw(),
        printed_name="S",
        role="inspector",
        archive_id="bench",
        entry_no=2,
        issued_at=enrolled,
    )
    at = datetime.now(timezone.utc)

    def sign(pdf, n):
        return sign_pdf(pdf, signer_key, signer, owner, field_name=f"signoff-{n}", reason="released", signed_at=at)

    t_sign1 = best_of(args.runs, lambda: sign(report, 1))
    first = sign(report, 1)
    t_sign2 = best_of(args.runs, lambda: sign(first, 2))
    second = sign(first, 2)
    t_check = best_of(args.runs, lambda: pdf_signatures(second, owner))
    assert all(c.ok for c in pdf_signatures(second, owner))

    def line(what, seconds, extra=""):
        print(f"{what:<34} {seconds:7.3f} s  {seconds / t_render:6.3f} x render{extra}")

    print(f"{args.parts} parts, report {len(report):,} bytes (drawn by reportlab: {len(captured['drawn']):,})")
    line("render report (incl. PDF/A step)", t_render)
    line("PDF/A step alone", t_finish, f"  ({len(report) - len(captured['drawn']):+,} bytes)")
    line("sign-off 1 (PAdES B-B)", t_sign1, f"  ({len(first) - len(report):+,} bytes)")
    line("sign-off 2 (incremental)", t_sign2, f"  ({len(second) - len(first):+,} bytes)")
    line("validate both (pyHanko)", t_check)
    _p256(args, report, at, enrolled, line)


def _p256(args, report, at, enrolled, line) -> None:
    from surfinspect.archive.signing import spki_der
    from surfinspect.report.signoff_page import sheet_slot, slot_appearance
    from surfinspect.results import DispositionNote, SignOff

    owner_key, signer_key = ec.generate_private_key(ec.SECP256R1()), ec.generate_private_key(ec.SECP256R1())
    owner = certs.owner_certificate(owner_key, printed_name="Q", archive_id="bench", entry_no=1, issued_at=enrolled)
    signer = certs.signer_certificate(owner_key, owner, spki_der(signer_key.public_key()), printed_name="S",
                                      role="inspector", archive_id="bench", entry_no=2, issued_at=enrolled)  # fmt: skip
    notes = tuple(DispositionNote(f"P{i}", "rework", "S", "2026-01-01T00:00:00Z", "rebrush") for i in range(5))
    look = SignOff("S", "released", "2026-01-01T00:00:00Z", "0" * 64, "ok", signoff_no=2, dispositions=notes)

    box = sheet_slot(2)[1]

    def sign(pdf, n, appearance=None):
        return sign_pdf(pdf, signer_key, signer, owner, field_name=f"signoff-{n}", reason="released", signed_at=at,
                        appearance=appearance, box=sheet_slot(n)[1] if appearance else None)  # fmt: skip

    t_sign1 = best_of(args.runs, lambda: sign(report, 1))
    first = sign(report, 1)
    t_look = best_of(args.runs, lambda: slot_appearance(look, notes, box))
    t_sign2 = best_of(args.runs, lambda: sign(first, 2, slot_appearance(look, notes, box)))
    second = sign(first, 2, slot_appearance(look, notes, box))
    t_check = best_of(args.runs, lambda: pdf_signatures(second, owner))
    assert all(c.ok for c in pdf_signatures(second, owner))
    line("P-256 sign-off 1", t_sign1, f"  ({len(first) - len(report):+,} bytes)")
    line("P-256 sign-off 2, visible box", t_sign2, f"  ({len(second) - len(first):+,} bytes)")
    line("  of which drawing the box", t_look)
    line("validate both (pyHanko)", t_check)
    many, start = second, time.perf_counter()
    for n in range(3, 14):  # sign-offs 3-13, each with its box: what twelve later sign-offs add to the file
        many = sign(many, n, slot_appearance(look, notes, sheet_slot(n)[1]))
    took = time.perf_counter() - start
    check_start = time.perf_counter()
    assert all(c.ok for c in pdf_signatures(many, owner))
    line("P-256 sign-offs 3-13, boxes (once)", took, f"  ({len(many) - len(second):+,} bytes, 11 boxes)")
    line("validate all 13 (pyHanko, once)", time.perf_counter() - check_start)


if __name__ == "__main__":
    start = time.perf_counter()
    main()
    print(f"(benchmark {time.perf_counter() - start:.0f} s)")
