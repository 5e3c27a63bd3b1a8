"""How numbers from the result file are printed: the report, the console and the CSV agree."""

from __future__ import annotations

import math
from decimal import ROUND_HALF_UP, Decimal

__all__ = ["ANGLE_DECIMALS", "format_fixed", "format_angle", "format_signed_angle", "region_lay_text"]

#: Decimals of every printed angle (lay, deviation, uncertainty).
ANGLE_DECIMALS = 2


def format_fixed(value: float | None, decimals: int, *, signed: bool = False) -> str:
    """A number from the result file with ``decimals`` decimals, rounded half away from zero.

    The value is rounded from its shortest decimal form (the digits the JSON
    file shows), so a reader who rounds the JSON's number by hand gets the
    printed one: 0.125 prints as 0.13, where binary rounding would give 0.12.
    A value that rounds to zero has no sign. None (and NaN) is a dash.
    """
    if value is None or not math.isfinite(float(value)):
        return "—"
    exact = Decimal(repr(float(value)))
    rounded = exact.quantize(Decimal(1).scaleb(-decimals), rounding=ROUND_HALF_UP)
    if rounded == 0:
        rounded = abs(rounded)  # no "-0.00": a sign that rounds away says nothing
        return f"{rounded:.{decimals}f}"
    return f"{rounded:+.{decimals}f}" if signed else f"{rounded:.{decimals}f}"


def format_angle(value: float | None, *, axial: bool = False) -> str:
    """An angle as the report prints it: ``ANGLE_DECIMALS`` decimals and a degree sign; None is a dash.

    Rounding as :func:`format_fixed`. With ``axial=True`` (a lay direction,
    in [0, 180)) a value that rounds to 180 is printed as 0, the same direction.
    """
    if value is None:
        return "—"
    text = format_fixed(value, ANGLE_DECIMALS)
    if axial and Decimal(text) >= 180:
        text = format_fixed(float(Decimal(text) - 180), ANGLE_DECIMALS)
    return text + "°"


def format_signed_angle(value: float | None) -> str:
    """A deviation as the report prints it: signed, ``ANGLE_DECIMALS`` decimals; None is a dash."""
    if value is None:
        return "—"
    return format_fixed(value, ANGLE_DECIMALS, signed=True) + "°"


def region_lay_text(r: dict) -> tuple[str, str]:
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
