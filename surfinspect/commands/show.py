"""``surfinspect show``: list an archive's batches, their verdict counts and sign-off state."""

from __future__ import annotations

import argparse

from .. import archive
from ..console import Console

HELP = "list the batches in an archive with their verdict counts and sign-offs"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--archive", required=True, metavar="DIR", help="the archive folder")
    parser.add_argument("--batch-id", metavar="ID", help="show one batch part by part, with its sign-offs")


def _signoff_state(signoffs: list[archive.SignoffRow]) -> str:
    if not signoffs:
        return "not signed"
    last = signoffs[-1]
    more = f" (+{len(signoffs) - 1} earlier)" if len(signoffs) > 1 else ""
    return f"{last.meaning} by {last.signer_name} {last.signed_at_utc}{more}"


def run(args: argparse.Namespace, console: Console) -> int:
    with archive.Archive(args.archive) as arc:
        if args.batch_id is None:
            _show_batches(arc, console)
        else:
            _show_batch(arc, args.batch_id, console)
    return 0


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
                counts["error"],
                "finished" if b.is_finished else f"unfinished ({counts['pending']} to do)",
                _signoff_state(arc.signoffs(b.batch_id)),
            ]
        )
    if not rows:
        console.info(f"archive {arc.root}: no batches yet")
        return
    console.table(
        ["batch", "recipe", "started (UTC)", "parts", "accept", "reject", "review", "error", "state", "sign-off"], rows
    )
    events, head = arc.chain_head()
    console.info(f"audit trail: {events} events, head {head}")


def _show_batch(arc: archive.Archive, batch_id: str, console: Console) -> None:
    b = arc.batch(batch_id)
    parts = arc.parts(batch_id)
    counts = archive.verdict_counts(parts)
    console.info(f"batch {b.batch_id}: recipe {b.recipe_name} rev {b.recipe_revision} (sha256 {b.recipe_sha256})")
    console.info(f"operator {b.operator or '-'}, station {b.station or '-'}, started {b.started_at}, "
                 f"{'finished ' + b.finished_at if b.is_finished else 'unfinished'}")
    console.info(", ".join(f"{n} {v}" for v, n in counts.items() if n) or "no parts")
    if b.report_sha256:
        console.info(f"report {arc.object_path(b.report_sha256).relative_to(arc.root)}")
    rows = []
    for p in parts:
        note = p.error or ""
        if p.result_sha256 and not p.error:
            result = arc.read_result(p)
            note = ", ".join(f"{r['name']}: {r['verdict']}" for r in result["regions"] if r["verdict"] != "pass")
            note = note or "; ".join(result.get("reasons", []))
        rows.append([p.part_key, p.verdict or "pending", note])
    console.table(["part", "verdict", "regions not passed / error"], rows)
    signoffs = arc.signoffs(batch_id)
    if signoffs:
        console.table(
            ["#", "signer", "meaning", "signed (UTC)", "key fingerprint", "signed report", "comment"],
            [
                [s.signoff_no, s.signer_name, s.meaning, s.signed_at_utc, s.key_fingerprint[:16] + "…",
                 str(arc.object_path(s.signed_report_sha256).relative_to(arc.root)), s.comment]
                for s in signoffs
            ],
        )
    else:
        console.info("not signed off")
