"""The results table that inspect and demo print (terminal output lives in cli)."""

from __future__ import annotations

from typing import Iterable

from ..formatting import format_fixed, format_signed_angle, region_lay_text
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
            rows.append([o.name, "—", "—", "—", "—", NOT_INSPECTED, ""])
            continue
        d = part_to_dict(o.result)
        if not d["regions"]:
            rows.append([o.name, "—", "—", "—", "—", d["verdict"], ""])
        for r in d["regions"]:
            lay, shown = region_lay_text(r)
            rows.append(
                [
                    o.name,
                    r["name"],
                    lay,
                    format_signed_angle(r["deviation_deg"]),
                    format_fixed(r["coherence"], 3),
                    f"{r['verdict']} ({d['verdict']})",
                    shown,
                ]
            )
    console.table(["part", "region", "lay", "deviation", "coherence", "verdict (part)", "lay and deviation are"], rows)
    for o in outcomes:
        if o.result is not None:
            for r in o.result.regions:
                if r.verdict.value != "pass":
                    console.info(f"  {o.name} / {r.name}: {'; '.join(r.reasons)}")
            for reason in o.result.reasons:
                console.info(f"  {o.name}: {reason}")
