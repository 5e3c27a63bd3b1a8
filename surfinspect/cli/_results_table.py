"""The results table that inspect and demo print (terminal output lives in cli)."""

from __future__ import annotations

from typing import Iterable

from ..formatting import format_angle, format_fixed, format_signed_angle
from ..results import NOT_INSPECTED, part_to_dict
from ..station.runner import PartOutcome
from .console import Console


def print_results(console: Console, outcomes: Iterable[PartOutcome]) -> None:
    """The short table: part, region, lay, deviation, coherence, verdict.

    Numbers are printed from the result's JSON form, rounded as the report rounds them.
    """
    rows = []
    outcomes = list(outcomes)
    for o in outcomes:
        if o.result is None:
            rows.append([o.stem, "—", "—", "—", "—", NOT_INSPECTED])
            continue
        d = part_to_dict(o.result)
        if not d["regions"]:
            rows.append([o.stem, "—", "—", "—", "—", d["verdict"]])
        for r in d["regions"]:
            rows.append(
                [
                    o.stem,
                    r["name"],
                    format_angle(r["lay_deg"], axial=True),
                    format_signed_angle(r["deviation_deg"]),
                    format_fixed(r["coherence"], 3),
                    f"{r['verdict']} ({d['verdict']})",
                ]
            )
    console.table(["part", "region", "lay", "deviation", "coherence", "verdict (part)"], rows)
    for o in outcomes:
        if o.result is not None:
            for r in o.result.regions:
                if r.verdict.value != "pass":
                    console.info(f"  {o.stem} / {r.name}: {'; '.join(r.reasons)}")
            for reason in o.result.reasons:
                console.info(f"  {o.stem}: {reason}")
