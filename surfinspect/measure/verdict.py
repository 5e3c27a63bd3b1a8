"""What the pattern rules decide about a region, collected before it becomes a RegionResult."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["Verdict", "Cells", "fmt_angle", "fmt_signed"]


def fmt_angle(v: float) -> str:
    return f"{v:.1f}°"


def fmt_signed(v: float) -> str:
    return f"{v:+.1f}°"


@dataclass
class Verdict:
    """What the pattern rules decide; collected, then turned into a RegionResult."""

    lay: float | None
    deviation: float | None = None
    uncertainty: float | None = None
    failed: bool = False
    reasons: list = field(default_factory=list)
    extra: dict = field(default_factory=dict)
    deviating: np.ndarray | None = None
    review: list = field(default_factory=list)  # reasons why a person must look (never a fail)

    def fail(self, reason: str) -> None:
        self.failed = True
        self.reasons.append(reason)


@dataclass(frozen=True)
class Cells:
    """The region's cells: lays in the part frame and which cells take part in the checks."""

    lay: np.ndarray
    coherence: np.ndarray
    energy: np.ndarray  # jxx + jyy per cell (weights)
    covered: np.ndarray  # at least CELL_MIN_COVER of the cell in the region
    textured: np.ndarray  # covered, and gradient energy above the texture threshold
    clear: np.ndarray  # textured, and coherence at least min_coherence
    unmeasured: np.ndarray  # region cells that could not be measured (too few pixels measured, no texture)
