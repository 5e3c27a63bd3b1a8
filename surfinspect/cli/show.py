"""``surfinspect show``: list an archive's batches, their verdict counts, sign-offs and dispositions.

With ``--batch-id ID --out DIR`` it also copies that batch's files out of the
archive under readable names (the archive keeps them as objects named by
their hash, without a suffix): ``report.pdf``, ``report.signed-N.pdf``,
``regions.csv`` and each part's JSON and overlay.
"""

from __future__ import annotations

import argparse
import json

from .._lazy import module
from ..errors import InputError
from ..fsutil import OutputFolder
from ._checks import batch_owner
from ._options import add_archive_option, add_overwrite_option
from .console import Console

archive = module("surfinspect.archive.store")
location = module("surfinspect.archive.location")
editions = module("surfinspect.archive.editions")
batch = module("surfinspect.station.batch")

HELP = "list the batches in an archive with their verdict counts and sign-offs; copy a batch's files out"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_archive_option(parser)
    parser.add_argument("--batch-id", metavar="ID", help="show one batch part by part, with its sign-offs")
    parser.add_argument(
        "--out",
        metavar="DIR",
        help="with --batch-id: copy the batch's report(s), CSV, results and overlays here, readably named "
        "(a new or empty folder, or one holding this batch's earlier copy)",
    )
    add_overwrite_option(parser, with_out=True)


def _signoff_state(signoffs: list[archive.SignoffRow], report_sha256: str | None) -> str:
    if not signoffs:
        return "not signed"
    last = signoffs[-1]
    more = f" (+{len(signoffs) - 1} earlier)" if len(signoffs) > 1 else ""
    # after batch --retry-errors the batch has a newer report edition than the one signed
    older = json.loads(last.record_json).get("report_sha256") != report_sha256
    return f"{last.meaning} by {last.signer_name} {last.signed_at_utc}{more}" + (
        "; an earlier edition: the newest is not signed" if older else ""
    )


def run(args: argparse.Namespace, console: Console) -> int:
    if args.out and args.batch_id is None:
        raise InputError("--out: needs --batch-id (the batch whose files to copy out)")
    with location.open_archive(args.archive) as arc:
        if args.batch_id is None:
            _show_batches(arc, console)
            return 0
        _show_batch(arc, args.batch_id, console)
        if args.out:
            folder = OutputFolder(
                args.out, "--out", overwrite=args.overwrite, owner=batch_owner(args.archive, args.batch_id)
            ).claim()
            try:
                batch.export_batch(arc, args.batch_id, folder.path)
            finally:
                written = folder.finish()
            out = folder.path
            console.info(f"{len(written)} file(s) of batch {args.batch_id} copied to {out}")
    return 0


def _signed_edition(events, s) -> int | str:
    """The report edition a sign-off signed: the one current at its audit event."""
    act = next(
        (e for e in events if e.kind == "signed" and json.loads(e.details).get("signoff_no") == s.signoff_no), None
    )
    return editions.edition_at(events, s.batch_id, act.seq) if act else "?"


def _show_batches(arc: archive.Archive, console: Console) -> None:
    rows = []
    for b in arc.batches():
        counts = archive.verdict_counts(arc.parts(b.batch_id))
        rows.append(
            [
                b.batch_id,
                f"{b.recipe_name} rev {b.recipe_revision}",
                b.started_at[:16].replace("T", " "),
                b.part_count,
                counts["accept"],
                counts["reject"],
                counts["review"],
                counts[archive.ERROR_VERDICT],
                "finished" if b.is_finished else f"unfinished ({counts['pending']} to do)",
                _signoff_state(arc.signoffs(b.batch_id), b.report_sha256),
            ]
        )
    if not rows:
        console.info(f"archive {arc.location}: no batches yet")
        return
    console.table(
        [
            "batch",
            "recipe",
            "started (UTC)",
            "parts",
            "accept",
            "reject",
            "review",
            archive.ERROR_VERDICT,
            "state",
            "sign-off",
        ],
        rows,
    )
    events, head = arc.chain_head()
    console.info(f"audit trail: {events} events, head {head}")


def _show_batch(arc: archive.Archive, batch_id: str, console: Console) -> None:
    b = arc.batch(batch_id)
    parts = arc.parts(batch_id)
    counts = archive.verdict_counts(parts)
    console.info(f"batch {b.batch_id}: recipe {b.recipe_name} rev {b.recipe_revision} (sha256 {b.recipe_sha256})")
    console.info(
        f"operator {b.operator or '-'}, station {b.station or '-'}, started {b.started_at}, "
        f"{'finished ' + b.finished_at if b.is_finished else 'unfinished'}"
    )
    console.info(", ".join(f"{n} {v}" for v, n in counts.items() if n) or "no parts")
    events = arc.batch_events(batch_id)
    if b.report_sha256:
        console.info(
            f"report {arc.object_path(b.report_sha256).relative_to(arc.root)} "
            "(a PDF stored under its hash; --out DIR copies it out as report.pdf)"
        )
    retried = [e for e in events if e.kind == "part re-inspected"]
    if retried:
        console.info(
            f"report edition {len(editions.edition_events(events, batch_id))}; parts re-inspected after the first "
            "edition: "
            + ", ".join(
                f"{e.part_key} (edition {json.loads(e.details).get('edition')}, {e.recorded_at})" for e in retried
            )
        )
    rows = []
    for p in parts:
        note = p.error or ""
        if p.result_sha256 and not p.error:
            result = arc.read_result(p)
            note = ", ".join(f"{r['name']}: {r['verdict']}" for r in result["regions"] if r["verdict"] != "pass")
            note = note or "; ".join(result.get("reasons", []))
        rows.append([p.part_key, p.verdict or "pending", note])
    console.table(["part", "verdict", "regions not passed, or the reason"], rows)
    signoffs = arc.signoffs(batch_id)
    if signoffs:
        console.table(
            ["#", "signer", "meaning", "signed (UTC)", "key fingerprint", "signed report", "of edition", "comment"],
            [
                [
                    s.signoff_no,
                    s.signer_name,
                    s.meaning,
                    s.signed_at_utc,
                    s.key_fingerprint[:16] + "…",
                    str(arc.object_path(s.signed_report_sha256).relative_to(arc.root)),
                    _signed_edition(events, s),
                    s.comment,
                ]
                for s in signoffs
            ],
        )
    else:
        console.info("not signed off")
    dispositions = arc.dispositions(batch_id)
    if dispositions:
        console.table(
            ["part", "#", "disposition", "by", "decided (UTC)", "comment"],
            [
                [d.part_key, d.disposition_no, d.decision, d.signer_name, d.decided_at_utc, d.comment]
                for d in dispositions
            ],
        )
