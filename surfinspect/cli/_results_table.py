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
            rows.append([o.name, "—", "—", "—", "—", NOT_INSPECTED, ""])
            continue
        d = part_to_dict(o.result)
        if not d["regions"]:
            rows.append([o.name, "—", "—", "—", "—", d["verdict"], ""])
        for r in d["regions"]:
            lay, shown = _what_is_shown(r)
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


def _what_is_shown(r: dict) -> tuple[str, str]:
    """The lay column of a region (JSON form) and what its lay and deviation columns hold, in words."""
    pattern = r.get("lay_pattern", "directional")
    if pattern == "crossed":
        peaks = (r.get("extra") or {}).get("crossed_lay_deg") or []
        lay = " / ".join(format_angle(v, axial=True) for v in peaks) if peaks else format_angle(None, axial=True)
        return lay, "both peaks; the larger deviation of the two"
    if pattern in ("circular", "radial"):
        along = "tangent" if pattern == "circular" else "radius"
        return format_angle(r["lay_deg"], axial=True), f"no one lay; mean cell deviation from the {along}"
    if pattern in ("multidirectional", "particulate", "any"):
        return format_angle(r["lay_deg"], axial=True), "direction not judged"
    return format_angle(r["lay_deg"], axial=True), "region lay; its deviation"
