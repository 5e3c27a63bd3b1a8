"""Qualifying the measurement: crossed gauge R&R by the ANOVA method, bias and linearity.

The analysis functions are pure (arrays in, frozen dataclasses out). Reading a
study table (:func:`read_study_csv`) and drawing the study page
(:func:`write_gauge_pdf`) are the only functions here that touch files.

Acceptance thresholds (common automotive measurement-system practice): %GRR
under 10 % acceptable, 10-30 % acceptable only with a reason, over 30 % not
acceptable; at least 5 distinct categories; resolution at most a tenth of the
tolerance [1]_.

References
----------
.. [1] AIAG, *Measurement Systems Analysis Reference Manual*, 4th ed.,
   Automotive Industry Action Group, 2010. ISBN 978-1-60534-211-5 (from memory).
.. [2] R. K. Burdick, C. M. Borror and D. C. Montgomery, "A review of methods
   for measurement systems capability analysis", *Journal of Quality
   Technology* 35(4), 342-354, 2003. doi:10.1080/00224065.2003.11980232
   (DOI from memory).
.. [3] D. C. Montgomery and G. C. Runger, "Gauge capability and designed
   experiments. Part II: experimental design models and variance component
   estimation", *Quality Engineering* 6(2), 289-305, 1993.
   doi:10.1080/08982119308919024 (DOI from memory).
"""

from __future__ import annotations

import csv
import enum
import math
import os
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Callable, Sequence

import numpy as np
from scipy import stats

from .._version import __version__
from ..errors import InputError
from ..fsutil import atomic_path
from ..measure.orientation import wrap_deviation
from ..results import CAUTION
from .spc import D4_MOVING_RANGE

__all__ = [
    "INTERACTION_ALPHA",
    "GaugeVerdict",
    "StudyTable",
    "AnovaRow",
    "AnovaTable",
    "VarianceComponent",
    "GaugeStudy",
    "BiasAtNominal",
    "LinearityFit",
    "BiasStudy",
    "read_study_csv",
    "gauge_rr",
    "bias_study",
    "gauge_to_dict",
    "bias_to_dict",
    "write_gauge_pdf",
]

#: Significance level above which the part x appraiser interaction is pooled
#: into repeatability. 0.25 is common practice, no source.
INTERACTION_ALPHA = 0.25

#: %GRR thresholds (common automotive practice [1]_).
GRR_ACCEPTABLE_BELOW = 10.0
GRR_CONDITIONAL_UP_TO = 30.0
MIN_DISTINCT_CATEGORIES = 5
#: Resolution must be at most this share of the tolerance width ("rule of ten" [1]_).
RESOLUTION_SHARE_OF_TOLERANCE = 0.1

#: Width of the measurement spread in sigmas for %GRR of tolerance (6 sigma, [1]_).
SPREAD_SIGMAS = 6.0
#: Factor of the number of distinct categories, sqrt(2) rounded as in [1]_.
NDC_FACTOR = 1.41

#: D4 (upper range-chart limit over the mean range) by subgroup size, from the
#: usual table of control-chart constants (Montgomery, Introduction to
#: Statistical Quality Control, appendix VI; from memory, checked by simulation
#: in the tests).
D4_BY_SUBGROUP = {2: D4_MOVING_RANGE, 3: 2.574, 4: 2.282, 5: 2.114, 6: 2.004, 7: 1.924, 8: 1.864, 9: 1.816, 10: 1.777}


class GaugeVerdict(str, enum.Enum):
    """Outcome of a gauge study."""

    ACCEPTABLE = "acceptable"
    CONDITIONAL = "conditional"  # acceptable only with a documented reason
    NOT_ACCEPTABLE = "not-acceptable"


# ------------------------------------------------------------------ study table


@dataclass(frozen=True)
class StudyTable:
    """A balanced, crossed gauge study.

    ``values[i, j, k]`` is trial ``trials[k]`` of appraiser ``appraisers[j]``
    on part ``parts[i]``; labels keep the order of first appearance.
    """

    source: str
    parts: tuple[str, ...]
    appraisers: tuple[str, ...]
    trials: tuple[str, ...]
    values: np.ndarray


LABEL_COLUMNS = ("part", "appraiser", "trial")
VALUE_COLUMNS = ("value", "image")  # exactly one: a measured value, or an image to measure
STUDY_COLUMNS = LABEL_COLUMNS + ("value",)

#: ``measure(image_path) -> value``: measures one study image (see :func:`read_study_csv`).
Measure = Callable[[Path], float]


def _sniff_delimiter(header_line: str) -> str:
    # Spreadsheets set to a decimal comma write semicolon-separated files.
    return ";" if header_line.count(";") > header_line.count(",") else ","


def _raise_all(problems: list[str]) -> None:
    if problems:
        raise InputError(
            problems[0] if len(problems) == 1 else f"{problems[0]} (and {len(problems) - 1} more)", problems
        )


def read_study_csv(path: str | Path, *, measure: Measure | None = None) -> StudyTable:
    """Read a crossed study table: columns ``part, appraiser, trial`` and ``value`` or ``image``.

    Parameters
    ----------
    path : str or Path
        CSV file, comma- or semicolon-separated (with a semicolon a decimal
        comma is accepted), one measurement per row, a header row first.
        Blank lines are skipped.
    measure : callable, optional
        For a table with an ``image`` column instead of ``value``:
        ``measure(image_path)`` returns the value of one image (relative
        paths are taken from the table's folder); it raises
        :class:`InputError` when the image cannot be measured. Images are
        measured only once the table's structure has been checked.

    Returns
    -------
    StudyTable

    Raises
    ------
    InputError
        Lists every problem, each naming the file and the line: missing or
        unknown columns, empty labels, a value that is not a finite number, a
        repeated (part, appraiser, trial), a part not measured by every
        appraiser, a missing trial, fewer than 2 parts, appraisers or trials,
        an image table without ``measure``, a value table with ``measure``,
        an image that cannot be measured. Problems of balance are listed
        compactly (see :func:`_balanced_layout`).
    """
    path = Path(path)
    name = str(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{name}: cannot read the study table ({exc})") from None
    lines = text.splitlines()
    first = next((ln for ln in lines if ln.strip()), None)
    allowed = f"{', '.join(LABEL_COLUMNS)} and one of {' or '.join(VALUE_COLUMNS)}"
    if first is None:
        raise InputError(f"{name}: the study table is empty (allowed: a header {allowed}, then rows)")
    delimiter = _sniff_delimiter(first)
    reader = csv.reader(lines, delimiter=delimiter)
    header: list[str] | None = None
    value_column = ""
    problems: list[str] = []
    rows: list[tuple[int, str, str, str, str]] = []
    for record in reader:
        line = reader.line_num
        if not any(cell.strip() for cell in record):
            continue
        if header is None:
            header = [cell.strip().lower() for cell in record]
            missing = [c for c in LABEL_COLUMNS if c not in header]
            unknown = [c for c in header if c not in LABEL_COLUMNS + VALUE_COLUMNS]
            values_given = [c for c in VALUE_COLUMNS if c in header]
            if not values_given:
                missing.append(" or ".join(VALUE_COLUMNS))
            if missing or unknown or len(set(header)) != len(header) or len(values_given) != 1:
                found = [f"missing {', '.join(missing)}"] if missing else []
                found += [f"unknown {', '.join(unknown)}"] if unknown else []
                found += ["both value and image"] if len(values_given) > 1 else []
                found += ["a column repeated"] if len(set(header)) != len(header) else []
                raise InputError(
                    f"{name}:{line}: header: columns must be {allowed} (got {', '.join(header)}; {'; '.join(found)})"
                )
            value_column = values_given[0]
            if value_column == "image" and measure is None:
                raise InputError(
                    f"{name}:{line}: header: the table lists images; give a recipe and region to measure them"
                )
            if value_column == "value" and measure is not None:
                # a recipe given for a table of values would be ignored without a word
                raise InputError(
                    f"{name}:{line}: header: the table holds measured values, so a recipe has nothing to measure "
                    "(allowed: a recipe with an image column, or a value column without a recipe)"
                )
            continue
        if len(record) != len(header):
            problems.append(f"{name}:{line}: row has {len(record)} fields (allowed {len(header)}: {', '.join(header)})")
            continue
        cells = {key: cell.strip() for key, cell in zip(header, record)}
        empty = [key for key in LABEL_COLUMNS + (value_column,) if not cells[key]]
        for key in empty:
            problems.append(f"{name}:{line}: {key}: empty (a {'value' if key == 'value' else 'label'} is required)")
        if value_column == "value" and cells["value"]:
            number = cells["value"].replace(",", ".") if delimiter == ";" else cells["value"]
            try:
                value = float(number)
            except ValueError:
                problems.append(f"{name}:{line}: value: not a number (got {cells['value']!r})")
                continue
            if not math.isfinite(value):
                problems.append(f"{name}:{line}: value: not a finite number (got {cells['value']!r})")
                continue
        if not empty:
            rows.append((line, cells["part"], cells["appraiser"], cells["trial"], cells[value_column]))
    if header is None:  # pragma: no cover - a non-blank first line is a header
        raise InputError(f"{name}: no header row")
    _raise_all(problems)
    layout = _balanced_layout(name, rows)
    values = np.empty(layout.shape)
    for (line, part, appraiser, trial, raw), index in zip(rows, layout.indices):
        if value_column == "value":
            values[index] = float(raw.replace(",", ".") if delimiter == ";" else raw)
            continue
        image = Path(raw) if Path(raw).is_absolute() else path.parent / raw
        try:
            measured = float(measure(image))
        except InputError as exc:
            problems.extend(f"{name}:{line}: image: {p}" for p in exc.problems)
            continue
        if not math.isfinite(measured):
            problems.append(f"{name}:{line}: image: {raw} gave no finite value")
            continue
        values[index] = measured
    _raise_all(problems)
    return StudyTable(name, layout.parts, layout.appraisers, layout.trials, values)


@dataclass(frozen=True)
class _Layout:
    parts: tuple[str, ...]
    appraisers: tuple[str, ...]
    trials: tuple[str, ...]
    indices: tuple[tuple[int, int, int], ...]  # per row: (part, appraiser, trial) index

    @property
    def shape(self) -> tuple[int, int, int]:
        return (len(self.parts), len(self.appraisers), len(self.trials))


#: Problems of balance listed one by one; the rest are counted in the summary line.
MAX_BALANCE_LINES = 5


def _intended_set(sets: Sequence[frozenset[str]], every_label: Sequence[str]) -> frozenset[str]:
    """The labels a table was meant to have: its most common set of at least 2 labels.

    One stray row then shows as one extra row, not as a label missing from
    every other cell. A tie goes to the larger set; with no set of 2 or more
    (a study needs at least 2), every label seen is taken as intended.
    """
    counts: dict[frozenset[str], int] = {}
    for labels in sets:
        counts[labels] = counts.get(labels, 0) + 1
    candidates = [labels for labels in counts if len(labels) >= 2]
    if not candidates:
        return frozenset(every_label)
    return max(candidates, key=lambda labels: (counts[labels], len(labels)))


def _plural(count: int, word: str) -> str:
    return f"{count} {word}" if count == 1 else f"{count} {word}s"


def _balanced_layout(name: str, rows: list[tuple[int, str, str, str, str]]) -> _Layout:
    """Check that the rows form a balanced crossed study and index them.

    Every problem names its line; rows that break the balance (a repeated
    cell, an appraiser or trial that the rest of the table does not have) are
    named themselves, and a missing measurement is named at the first line of
    its part or cell. At most :data:`MAX_BALANCE_LINES` are listed, then one
    summary line counts them all.
    """
    if not rows:
        raise InputError(f"{name}: the study table has a header but no measurements")
    parts: dict[str, int] = {}
    appraisers: dict[str, int] = {}
    trials: dict[str, int] = {}
    seen: dict[tuple[str, str, str], int] = {}
    repeated: list[tuple[int, str]] = []
    first_line_of_part: dict[str, int] = {}
    lines_of_cell: dict[tuple[str, str], list[tuple[int, str]]] = {}
    for line, part, appraiser, trial, _ in rows:
        parts.setdefault(part, len(parts))
        appraisers.setdefault(appraiser, len(appraisers))
        trials.setdefault(trial, len(trials))
        first_line_of_part.setdefault(part, line)
        key = (part, appraiser, trial)
        if key in seen:
            repeated.append(
                (
                    line,
                    f"part {part!r}, appraiser {appraiser!r}, trial {trial!r} repeats line {seen[key]} "
                    "(allowed: one value per part, appraiser and trial)",
                )
            )
            continue
        seen[key] = line
        lines_of_cell.setdefault((part, appraiser), []).append((line, trial))

    appraisers_of_part = {part: frozenset(a for p, a in lines_of_cell if p == part) for part in parts}
    study_appraisers = _intended_set(list(appraisers_of_part.values()), list(appraisers))
    shown_appraisers = ", ".join(a for a in appraisers if a in study_appraisers)
    cells = [cell for cell in lines_of_cell if cell[1] in study_appraisers]
    study_trials = _intended_set([frozenset(t for _, t in lines_of_cell[c]) for c in cells], list(trials))
    shown_trials = ", ".join(t for t in trials if t in study_trials)

    extra_appraisers: list[tuple[int, str]] = []
    missing_appraisers: list[tuple[int, str]] = []
    extra_trials: list[tuple[int, str]] = []
    missing_trials: list[tuple[int, str]] = []
    extra_rows = len(repeated)
    missing_values = 0
    for (part, appraiser), cell_rows in lines_of_cell.items():
        if appraiser not in study_appraisers:
            extra_rows += len(cell_rows)
            where = ", ".join(str(line) for line, _ in cell_rows)
            extra_appraisers.append(
                (
                    cell_rows[0][0],
                    (
                        f"part {part!r}, appraiser {appraiser!r}: an appraiser the other parts do not have "
                        f"({_plural(len(cell_rows), 'row')}: {'line' if len(cell_rows) == 1 else 'lines'} {where}; "
                        f"the study's appraisers: {shown_appraisers})"
                    ),
                )
            )
            continue
        for line, trial in cell_rows:
            if trial not in study_trials:
                extra_rows += 1
                extra_trials.append(
                    (
                        line,
                        (
                            f"part {part!r}, appraiser {appraiser!r}, trial {trial!r}: a trial the other cells do not have "
                            f"(the study's trials: {shown_trials})"
                        ),
                    )
                )
        absent = [t for t in trials if t in study_trials and t not in {tr for _, tr in cell_rows}]
        if absent:
            missing_values += len(absent)
            missing_trials.append(
                (
                    cell_rows[0][0],
                    (
                        f"part {part!r}, appraiser {appraiser!r} has no trial {', '.join(absent)} "
                        f"(trials in the study: {shown_trials})"
                    ),
                )
            )
    for part, line in first_line_of_part.items():
        absent = [a for a in appraisers if a in study_appraisers and a not in appraisers_of_part[part]]
        if absent:
            missing_values += len(absent) * len(study_trials)
            present = [a for a in appraisers if a in study_appraisers and a in appraisers_of_part[part]]
            by = f"by appraiser(s) {', '.join(present)} only" if present else "by none of the study's appraisers"
            missing_appraisers.append(
                (
                    line,
                    (
                        f"part {part!r} is measured {by}; missing {', '.join(absent)} "
                        "(a crossed study needs every part measured by every appraiser)"
                    ),
                )
            )

    # Categories in this order, each by line: what is wrong with a part before what is wrong with a cell.
    balance = [
        f"{name}:{line}: {text}"
        for group in (repeated, extra_appraisers, missing_appraisers, extra_trials, missing_trials)
        for line, text in sorted(group, key=lambda item: item[0])
    ]
    problems = balance[:MAX_BALANCE_LINES]
    if len(parts) < 2:
        problems.append(f"{name}: the study needs at least 2 parts (got {len(parts)})")
    if len(study_appraisers) < 2:
        problems.append(f"{name}: the study needs at least 2 appraisers or setups (got {len(study_appraisers)})")
    if len(study_trials) < 2:
        problems.append(f"{name}: the study needs at least 2 trials per part and appraiser (got {len(study_trials)})")
    if balance:
        counted = [_plural(extra_rows, "extra row")] if extra_rows else []
        counted += [_plural(missing_values, "missing value")] if missing_values else []
        listed = f"; {len(balance) - MAX_BALANCE_LINES} more not listed" if len(balance) > MAX_BALANCE_LINES else ""
        shape = (len(parts), len(study_appraisers), len(study_trials))
        problems.append(
            f"{name}: the study is not balanced ({', '.join(counted)}{listed}): a crossed study has one value "
            f"per part, appraiser and trial, {shape[0]} x {shape[1]} x {shape[2]} = {math.prod(shape)} rows "
            f"(got {len(rows)})"
        )
    _raise_all(problems)
    indices = tuple((parts[p], appraisers[a], trials[t]) for _, p, a, t, _ in rows)
    return _Layout(tuple(parts), tuple(appraisers), tuple(trials), indices)


# ------------------------------------------------------------------ ANOVA


@dataclass(frozen=True)
class AnovaRow:
    """One line of an ANOVA table; ``f`` and ``p`` are None for error and total lines."""

    source: str
    df: int
    ss: float
    ms: float | None
    f: float | None
    p: float | None


@dataclass(frozen=True)
class AnovaTable:
    """Two-way crossed ANOVA, with the interaction line or with it pooled into repeatability.

    ``model`` is ``'interaction'`` or ``'pooled'``. In the interaction model,
    parts and appraisers are tested against the interaction mean square and
    the interaction against repeatability (random effects [2]_); in the
    pooled model every effect is tested against the pooled repeatability.
    """

    model: str
    rows: tuple[AnovaRow, ...]

    def row(self, source: str) -> AnovaRow:
        for r in self.rows:
            if r.source == source:
                return r
        raise KeyError(source)


@dataclass(frozen=True)
class VarianceComponent:
    """A source of variation: its variance, sigma and shares."""

    name: str
    variance: float
    sigma: float
    percent_contribution: float  # of the total variance
    percent_total_variation: float  # sigma over total sigma
    percent_tolerance: float  # 6 sigma over the tolerance width


@dataclass(frozen=True)
class GaugeStudy:
    """Result of a crossed gauge R&R study (see :func:`gauge_rr`)."""

    parts: tuple[str, ...]
    appraisers: tuple[str, ...]
    n_trials: int
    tolerance: float
    values: np.ndarray
    anova_interaction: AnovaTable
    anova_pooled: AnovaTable
    model: str
    model_reason: str
    interaction_alpha: float
    components: tuple[VarianceComponent, ...]
    grr_percent_of_total_variation: float
    grr_percent_of_tolerance: float
    ndc: int | None
    resolution: float
    resolution_source: str  # 'given' or 'apparent'
    verdict: GaugeVerdict
    reasons: tuple[str, ...]
    source: str = ""

    def component(self, name: str) -> VarianceComponent:
        for c in self.components:
            if c.name == name:
                return c
        raise KeyError(name)

    @property
    def anova(self) -> AnovaTable:
        """The ANOVA table of the model used."""
        return self.anova_interaction if self.model == "interaction" else self.anova_pooled


#: Names of the variance components, in report order.
COMPONENTS = ("repeatability", "reproducibility", "appraiser", "part x appraiser", "grr", "part", "total")
COMPONENT_LABELS = {
    "repeatability": "Repeatability (EV)",
    "reproducibility": "Reproducibility (AV)",
    "appraiser": "  appraiser",
    "part x appraiser": "  part x appraiser",
    "grr": "Gauge R&R (GRR)",
    "part": "Part-to-part (PV)",
    "total": "Total (TV)",
}


def _ratio(num: float, den: float) -> float | None:
    if den > 0:
        return num / den
    return math.inf if num > 0 else None


def _p_value(f: float | None, df1: int, df2: int) -> float | None:
    if f is None:
        return None
    if math.isinf(f):
        return 0.0
    return float(stats.f.sf(f, df1, df2))


def _anova_tables(y: np.ndarray) -> tuple[AnovaTable, AnovaTable]:
    p, o, r = y.shape
    grand = y.mean()
    part_means = y.mean(axis=(1, 2))
    appraiser_means = y.mean(axis=(0, 2))
    cell_means = y.mean(axis=2)
    ss_part = o * r * float(((part_means - grand) ** 2).sum())
    ss_appraiser = p * r * float(((appraiser_means - grand) ** 2).sum())
    ss_interaction = r * float(((cell_means - part_means[:, None] - appraiser_means[None, :] + grand) ** 2).sum())
    ss_error = float(((y - cell_means[:, :, None]) ** 2).sum())
    ss_total = float(((y - grand) ** 2).sum())
    df_part, df_appraiser = p - 1, o - 1
    df_interaction, df_error = df_part * df_appraiser, p * o * (r - 1)
    ms_part, ms_appraiser = ss_part / df_part, ss_appraiser / df_appraiser
    ms_interaction, ms_error = ss_interaction / df_interaction, ss_error / df_error

    def effects(ms_reference: float, df_reference: int) -> tuple[AnovaRow, AnovaRow]:
        rows = []
        for source, df, ss, ms in (
            ("part", df_part, ss_part, ms_part),
            ("appraiser", df_appraiser, ss_appraiser, ms_appraiser),
        ):
            f = _ratio(ms, ms_reference)
            rows.append(AnovaRow(source, df, ss, ms, f, _p_value(f, df, df_reference)))
        return tuple(rows)

    total = AnovaRow("total", p * o * r - 1, ss_total, None, None, None)
    f_interaction = _ratio(ms_interaction, ms_error)
    full = AnovaTable(
        "interaction",
        (
            *effects(ms_interaction, df_interaction),  # random effects: tested against the interaction
            AnovaRow(
                "part x appraiser",
                df_interaction,
                ss_interaction,
                ms_interaction,
                f_interaction,
                _p_value(f_interaction, df_interaction, df_error),
            ),
            AnovaRow("repeatability", df_error, ss_error, ms_error, None, None),
            total,
        ),
    )
    df_pooled = df_interaction + df_error
    ss_pooled = ss_interaction + ss_error
    ms_pooled = ss_pooled / df_pooled
    pooled = AnovaTable(
        "pooled",
        (*effects(ms_pooled, df_pooled), AnovaRow("repeatability", df_pooled, ss_pooled, ms_pooled, None, None), total),
    )
    return full, pooled


def _apparent_resolution(y: np.ndarray) -> float:
    # The recorded step is at most the smallest gap between distinct values;
    # rounding to 12 significant digits keeps binary noise from faking a gap.
    distinct = np.unique(np.array([float(f"{v:.12g}") for v in y.ravel()]))
    return float(np.diff(distinct).min()) if distinct.size > 1 else 0.0


def gauge_rr(
    values: np.ndarray,
    *,
    tolerance: float,
    parts: Sequence[str] | None = None,
    appraisers: Sequence[str] | None = None,
    interaction_alpha: float = INTERACTION_ALPHA,
    resolution: float | None = None,
    basis: str = "both",
    source: str = "",
) -> GaugeStudy:
    """Crossed gauge repeatability and reproducibility study by the ANOVA method.

    1. Two-way ANOVA with interaction of ``value ~ part * appraiser``: sums of
       squares, degrees of freedom, mean squares; parts and appraisers are
       tested against the interaction, the interaction against repeatability
       (random effects [2]_ [3]_).
    2. If the interaction's p-value is at least ``interaction_alpha`` it is
       pooled into repeatability and the pooled model is used; otherwise the
       model with interaction is kept. The result states which and why.
    3. Variance components from the expected mean squares, negatives set to 0:
       ``EV^2 = MSE``, interaction ``(MSI - MSE) / r``, appraiser
       ``(MSA - MSI) / (p r)``, part ``(MSP - MSI) / (a r)`` (pooled model:
       ``MSI`` replaced by the pooled ``MSE`` and the interaction is 0).
       ``AV^2`` = appraiser + interaction, ``GRR^2 = EV^2 + AV^2``,
       ``TV^2 = GRR^2 + PV^2``.
    4. ``%GRR`` of total variation ``100 GRR / TV``, of tolerance
       ``100 * 6 GRR / T``; ``ndc = floor(1.41 PV / GRR)``; verdict by the
       thresholds of the module docstring.

    Parameters
    ----------
    values : (P, A, R) array_like
        ``values[i, j, k]``: trial k of appraiser j on part i; P, A, R >= 2.
    tolerance : float
        Tolerance width ``USL - LSL`` (> 0) in the units of ``values``; for a
        recipe tolerance of ±3 degrees that is 6.
    parts, appraisers : sequence of str, optional
        Labels; default ``'1'..'P'`` and ``'A'..``.
    interaction_alpha : float, optional
        Pool the interaction when its p-value is at least this (default 0.25,
        common practice, no source).
    resolution : float, optional
        The gauge's resolution (smallest step it reports). Default: the
        apparent resolution, the smallest gap between distinct study values
        (an upper bound of the true step).
    basis : {'both', 'tolerance', 'total-variation'}, optional
        Which %GRR the verdict is judged on; ``'both'`` (default) takes the
        larger, since this gauge both accepts parts against a tolerance and
        feeds process charts.
    source : str, optional
        Where the values came from (a file name), kept in the result.

    Returns
    -------
    GaugeStudy

    Raises
    ------
    InputError
        Wrong shape, a non-finite value, a non-positive tolerance, a bad
        ``basis`` or ``interaction_alpha``, or no variation at all.

    References
    ----------
    .. [2] R. K. Burdick, C. M. Borror and D. C. Montgomery, *Journal of
       Quality Technology* 35(4), 342-354, 2003.
       doi:10.1080/00224065.2003.11980232 (DOI from memory).
    .. [3] D. C. Montgomery and G. C. Runger, *Quality Engineering* 6(2),
       289-305, 1993. doi:10.1080/08982119308919024 (DOI from memory).
    """
    # Settings are checked first and are not about the table, so their messages do not name it.
    if not (math.isfinite(tolerance) and tolerance > 0):
        raise InputError(f"tolerance: must be a width > 0 (got {tolerance:g})")
    if basis not in ("both", "tolerance", "total-variation"):
        raise InputError(f"basis: unknown (got {basis!r}, allowed both, tolerance, total-variation)")
    if not 0 < interaction_alpha < 1:
        raise InputError(f"interaction_alpha: must be in (0, 1) (got {interaction_alpha:g})")
    if resolution is not None and not (math.isfinite(resolution) and resolution >= 0):
        raise InputError(f"resolution: must be a number >= 0 (got {resolution:g})")
    y = np.asarray(values, dtype=float)
    where = f"{source}: " if source else "gauge study: "
    if y.ndim != 3 or min(y.shape) < 2:
        raise InputError(f"{where}values must have shape (parts, appraisers, trials), each at least 2 (got {y.shape})")
    if not np.isfinite(y).all():
        raise InputError(f"{where}values must all be finite numbers")
    p, o, r = y.shape
    part_labels = tuple(parts) if parts is not None else tuple(str(i + 1) for i in range(p))
    appraiser_labels = tuple(appraisers) if appraisers is not None else tuple(chr(ord("A") + j) for j in range(o))
    if len(part_labels) != p or len(appraiser_labels) != o:
        raise InputError(
            f"{where}labels: {len(part_labels)} parts and {len(appraiser_labels)} appraisers for values of shape {y.shape}"
        )

    full, pooled = _anova_tables(y)
    if full.row("total").ss <= 0:
        raise InputError(f"{where}all study values are equal: there is no variation to analyse")
    interaction_p = full.row("part x appraiser").p
    if interaction_p is None or interaction_p >= interaction_alpha:
        model = "pooled"
        shown = "undefined (no variation within or between cells)" if interaction_p is None else f"{interaction_p:.3g}"
        model_reason = (
            f"part x appraiser interaction not significant (p = {shown} >= alpha = {interaction_alpha:g}): "
            "pooled into repeatability"
        )
    else:
        model = "interaction"
        model_reason = (
            f"part x appraiser interaction significant (p = {interaction_p:.3g} < alpha = {interaction_alpha:g}): "
            "kept in the model"
        )

    ms_part, ms_appraiser = full.row("part").ms, full.row("appraiser").ms
    if model == "interaction":
        ms_error = full.row("repeatability").ms
        ms_interaction = full.row("part x appraiser").ms
        var_interaction = max(0.0, (ms_interaction - ms_error) / r)
        reference = ms_interaction  # parts and appraisers are measured against the interaction
    else:
        ms_error = pooled.row("repeatability").ms
        var_interaction = 0.0
        reference = ms_error
    var_repeat = ms_error
    var_appraiser = max(0.0, (ms_appraiser - reference) / (p * r))
    var_part = max(0.0, (ms_part - reference) / (o * r))
    var_reproduce = var_appraiser + var_interaction
    var_grr = var_repeat + var_reproduce
    var_total = var_grr + var_part
    variances = {
        "repeatability": var_repeat,
        "reproducibility": var_reproduce,
        "appraiser": var_appraiser,
        "part x appraiser": var_interaction,
        "grr": var_grr,
        "part": var_part,
        "total": var_total,
    }
    sigma_total = math.sqrt(var_total)
    components = tuple(
        VarianceComponent(
            name=name,
            variance=variances[name],
            sigma=math.sqrt(variances[name]),
            percent_contribution=100.0 * variances[name] / var_total if var_total > 0 else 0.0,
            percent_total_variation=100.0 * math.sqrt(variances[name]) / sigma_total if sigma_total > 0 else 0.0,
            percent_tolerance=100.0 * SPREAD_SIGMAS * math.sqrt(variances[name]) / tolerance,
        )
        for name in COMPONENTS
    )
    grr, pv = math.sqrt(var_grr), math.sqrt(var_part)
    pct_tv = 100.0 * grr / sigma_total if sigma_total > 0 else 0.0
    pct_tol = 100.0 * SPREAD_SIGMAS * grr / tolerance
    ndc = math.floor(NDC_FACTOR * pv / grr) if grr > 0 else None

    if resolution is None:
        resolution_used, resolution_source = _apparent_resolution(y), "apparent"
    else:
        resolution_used, resolution_source = float(resolution), "given"

    verdict, reasons = _judge(pct_tv, pct_tol, ndc, resolution_used, resolution_source, tolerance, basis)
    return GaugeStudy(
        parts=part_labels,
        appraisers=appraiser_labels,
        n_trials=r,
        tolerance=float(tolerance),
        values=y.copy(),
        anova_interaction=full,
        anova_pooled=pooled,
        model=model,
        model_reason=model_reason,
        interaction_alpha=float(interaction_alpha),
        components=components,
        grr_percent_of_total_variation=pct_tv,
        grr_percent_of_tolerance=pct_tol,
        ndc=ndc,
        resolution=resolution_used,
        resolution_source=resolution_source,
        verdict=verdict,
        reasons=tuple(reasons),
        source=source,
    )


def _judge(
    pct_tv: float,
    pct_tol: float,
    ndc: int | None,
    resolution: float,
    resolution_source: str,
    tolerance: float,
    basis: str,
) -> tuple[GaugeVerdict, list[str]]:
    judged = {"both": max(pct_tv, pct_tol), "tolerance": pct_tol, "total-variation": pct_tv}[basis]
    label = {
        "both": "%GRR (larger of total variation and tolerance)",
        "tolerance": "%GRR of tolerance",
        "total-variation": "%GRR of total variation",
    }[basis]
    reasons = []
    if judged < GRR_ACCEPTABLE_BELOW:
        verdict = GaugeVerdict.ACCEPTABLE
        reasons.append(f"{label} {judged:.1f}% < {GRR_ACCEPTABLE_BELOW:g}%")
    elif judged <= GRR_CONDITIONAL_UP_TO:
        verdict = GaugeVerdict.CONDITIONAL
        reasons.append(
            f"{label} {judged:.1f}% within {GRR_ACCEPTABLE_BELOW:g}-{GRR_CONDITIONAL_UP_TO:g}%: "
            "acceptable only with a documented reason"
        )
    else:
        verdict = GaugeVerdict.NOT_ACCEPTABLE
        reasons.append(f"{label} {judged:.1f}% > {GRR_CONDITIONAL_UP_TO:g}%")
    if ndc is None:
        reasons.append("number of distinct categories undefined: no measurement variation seen (check the resolution)")
    elif ndc < MIN_DISTINCT_CATEGORIES:
        verdict = GaugeVerdict.NOT_ACCEPTABLE
        reasons.append(f"number of distinct categories {ndc} < {MIN_DISTINCT_CATEGORIES}")
    else:
        reasons.append(f"number of distinct categories {ndc} >= {MIN_DISTINCT_CATEGORIES}")
    limit = RESOLUTION_SHARE_OF_TOLERANCE * tolerance
    if resolution > limit:
        verdict = GaugeVerdict.NOT_ACCEPTABLE
        reasons.append(f"{resolution_source} resolution {resolution:.4g} > tolerance/10 = {limit:.4g}")
    else:
        reasons.append(f"{resolution_source} resolution {resolution:.4g} <= tolerance/10 = {limit:.4g}")
    return verdict, reasons


# ------------------------------------------------------------------ bias and linearity


@dataclass(frozen=True)
class BiasAtNominal:
    """Bias and repeatability of the measurements of one reference angle.

    ``bias_deg`` is the mean of the wrapped deviations ``measured - nominal``;
    ``repeatability_deg`` their sample standard deviation; ``ci_deg`` the
    two-sided confidence interval of the bias from Student's t with n-1
    degrees of freedom; ``p_value`` tests bias = 0. Spread figures are None
    with a single measurement.
    """

    nominal_deg: float
    n: int
    mean_measured_deg: float
    bias_deg: float
    repeatability_deg: float | None
    t: float | None
    p_value: float | None
    ci_deg: tuple[float, float] | None


@dataclass(frozen=True)
class LinearityFit:
    """Least-squares line ``bias = slope * nominal + intercept`` over every measurement."""

    slope: float
    intercept: float
    slope_ci: tuple[float, float]
    intercept_ci: tuple[float, float]
    slope_p_value: float
    r_squared: float
    n: int


@dataclass(frozen=True)
class BiasStudy:
    """Bias per nominal angle and the linearity line across nominals."""

    per_nominal: tuple[BiasAtNominal, ...]
    linearity: LinearityFit | None  # None with fewer than 2 nominals or 3 measurements
    confidence: float


def bias_study(
    nominals: Sequence[float],
    measured: Sequence[float],
    *,
    confidence: float = 0.95,
) -> BiasStudy:
    """Bias, repeatability and linearity of lay measurements of known-angle references.

    1. Each measurement's deviation ``measured - nominal`` is wrapped to
       (-90, 90] (lay is axial: 179.8 measured for 0 nominal is -0.2).
    2. Per nominal: bias = mean deviation, repeatability = sample standard
       deviation, t = bias / (s / sqrt(n)) and its confidence interval from
       Student's t with n - 1 degrees of freedom [1]_.
    3. Linearity: ordinary least squares of every deviation on its nominal;
       slope and intercept with confidence intervals from Student's t with
       N - 2 degrees of freedom [1]_.

    Parameters
    ----------
    nominals, measured : sequence of float
        Pairs of reference lay angle and measured lay angle, degrees.
    confidence : float, optional
        Confidence level of the intervals, in (0, 1). Default 0.95.

    Returns
    -------
    BiasStudy
        Nominals in ascending order.

    Raises
    ------
    InputError
        Unequal lengths, no pairs, non-finite values, or a bad confidence.

    References
    ----------
    .. [1] AIAG, *Measurement Systems Analysis Reference Manual*, 4th ed.,
       2010, ch. III, bias and linearity studies (from memory).
    """
    x = np.asarray(nominals, dtype=float).ravel()
    m = np.asarray(measured, dtype=float).ravel()
    if x.size != m.size:
        raise InputError(f"bias study: {x.size} nominal angles for {m.size} measurements (must be equal)")
    if x.size == 0:
        raise InputError("bias study: no measurements")
    if not (np.isfinite(x).all() and np.isfinite(m).all()):
        raise InputError("bias study: nominal and measured angles must be finite numbers")
    if not 0 < confidence < 1:
        raise InputError(f"bias study: confidence must be in (0, 1) (got {confidence})")
    deviation = np.asarray(wrap_deviation(m, x))
    per_nominal = []
    for nominal in np.unique(x):
        d = deviation[x == nominal]
        n = int(d.size)
        bias = float(d.mean())
        s = t = p = ci = None
        if n >= 2:
            s = float(d.std(ddof=1))
            se = s / math.sqrt(n)
            half = float(stats.t.ppf(0.5 + confidence / 2, n - 1)) * se
            ci = (bias - half, bias + half)
            if se > 0:
                t = bias / se
                p = float(2 * stats.t.sf(abs(t), n - 1))
        per_nominal.append(
            BiasAtNominal(
                nominal_deg=float(nominal),
                n=n,
                mean_measured_deg=float((nominal + bias) % 180.0),
                bias_deg=bias,
                repeatability_deg=s,
                t=t,
                p_value=p,
                ci_deg=ci,
            )
        )
    linearity = None
    if np.unique(x).size >= 2 and x.size >= 3:
        fit = stats.linregress(x, deviation)
        t_crit = float(stats.t.ppf(0.5 + confidence / 2, x.size - 2))
        linearity = LinearityFit(
            slope=float(fit.slope),
            intercept=float(fit.intercept),
            slope_ci=(float(fit.slope - t_crit * fit.stderr), float(fit.slope + t_crit * fit.stderr)),
            intercept_ci=(
                float(fit.intercept - t_crit * fit.intercept_stderr),
                float(fit.intercept + t_crit * fit.intercept_stderr),
            ),
            slope_p_value=float(fit.pvalue),
            r_squared=float(fit.rvalue**2),
            n=int(x.size),
        )
    return BiasStudy(per_nominal=tuple(per_nominal), linearity=linearity, confidence=confidence)


# ------------------------------------------------------------------ JSON form


def _json_number(v: float | None, digits: int = 6) -> float | None:
    if v is None or not math.isfinite(v):
        return None
    return round(float(v), digits)


def _anova_to_list(table: AnovaTable) -> list[dict]:
    return [
        {
            "source": r.source,
            "df": r.df,
            "ss": _json_number(r.ss, 9),
            "ms": _json_number(r.ms, 9),
            "f": _json_number(r.f, 6),
            "p": _json_number(r.p, 6),
        }
        for r in table.rows
    ]


def gauge_to_dict(study: GaugeStudy) -> dict[str, Any]:
    """The JSON-ready form of a gauge study (schema ``surfinspect.gauge-study/1``).

    ``values[i][j][k]`` is trial k of appraiser j on part i, in the order of
    ``parts`` and ``appraisers``. Non-finite F values (no variation in the
    denominator) are written as null.
    """
    return {
        "schema": "surfinspect.gauge-study/1",
        "engine_version": __version__,
        "source": study.source,
        "parts": list(study.parts),
        "appraisers": list(study.appraisers),
        "trials": study.n_trials,
        "tolerance": study.tolerance,
        "model": study.model,
        "model_reason": study.model_reason,
        "interaction_alpha": study.interaction_alpha,
        "anova": _anova_to_list(study.anova),
        "anova_with_interaction": _anova_to_list(study.anova_interaction),
        "components": {
            c.name: {
                "variance": _json_number(c.variance, 9),
                "sigma": _json_number(c.sigma, 9),
                "percent_contribution": _json_number(c.percent_contribution, 4),
                "percent_total_variation": _json_number(c.percent_total_variation, 4),
                "percent_tolerance": _json_number(c.percent_tolerance, 4),
            }
            for c in study.components
        },
        "grr_percent_of_total_variation": _json_number(study.grr_percent_of_total_variation, 4),
        "grr_percent_of_tolerance": _json_number(study.grr_percent_of_tolerance, 4),
        "ndc": study.ndc,
        "resolution": _json_number(study.resolution, 9),
        "resolution_source": study.resolution_source,
        "verdict": study.verdict.value,
        "reasons": list(study.reasons),
        "values": [[[_json_number(v, 9) for v in trials] for trials in row] for row in study.values.tolist()],
    }


def bias_to_dict(study: BiasStudy) -> dict[str, Any]:
    """The JSON-ready form of a bias study (schema ``surfinspect.bias-study/1``)."""
    lin = study.linearity
    return {
        "schema": "surfinspect.bias-study/1",
        "engine_version": __version__,
        "confidence": study.confidence,
        "per_nominal": [
            {
                "nominal_deg": b.nominal_deg,
                "n": b.n,
                "mean_measured_deg": _json_number(b.mean_measured_deg),
                "bias_deg": _json_number(b.bias_deg),
                "repeatability_deg": _json_number(b.repeatability_deg),
                "t": _json_number(b.t),
                "p_value": _json_number(b.p_value),
                "ci_deg": None if b.ci_deg is None else [_json_number(v) for v in b.ci_deg],
            }
            for b in study.per_nominal
        ],
        "linearity": None
        if lin is None
        else {
            "slope": _json_number(lin.slope, 9),
            "intercept_deg": _json_number(lin.intercept),
            "slope_ci": [_json_number(v, 9) for v in lin.slope_ci],
            "intercept_ci_deg": [_json_number(v) for v in lin.intercept_ci],
            "slope_p_value": _json_number(lin.slope_p_value),
            "r_squared": _json_number(lin.r_squared),
            "n": lin.n,
        },
    }


# ------------------------------------------------------------------ tables as text

ANOVA_HEADER = ("source", "df", "SS", "MS", "F", "p")
COMPONENT_HEADER = ("component", "variance", "sigma", "% contribution", "% total variation", "% tolerance")


def _fmt(v: float | None, digits: int = 4) -> str:
    if v is None:
        return "-"
    if math.isinf(v):
        return "inf"
    if v != 0 and (abs(v) < 10 ** -(digits - 1) or abs(v) >= 1e6):
        return f"{v:.{digits - 1}e}"
    return f"{v:.{digits}f}"


def _fmt_p(p: float | None) -> str:
    if p is None:
        return "-"
    return "< 0.0001" if p < 1e-4 else f"{p:.4f}"


def anova_text_rows(table: AnovaTable) -> list[list[str]]:
    """The rows of an ANOVA table as text, in the columns of :data:`ANOVA_HEADER`."""
    return [[r.source, str(r.df), _fmt(r.ss), _fmt(r.ms), _fmt(r.f, 3), _fmt_p(r.p)] for r in table.rows]


def component_text_rows(study: GaugeStudy) -> list[list[str]]:
    """The variance components as text, in the columns of :data:`COMPONENT_HEADER`."""
    return [
        [
            COMPONENT_LABELS[comp.name],
            _fmt(comp.variance, 5),
            _fmt(comp.sigma, 4),
            f"{comp.percent_contribution:.2f}",
            f"{comp.percent_total_variation:.2f}",
            f"{comp.percent_tolerance:.2f}",
        ]
        for comp in study.components
    ]


# ------------------------------------------------------------------ PDF page

_INK = (0.12, 0.14, 0.18)
_GRID = (0.78, 0.80, 0.84)
_VERDICT_TINT = {
    GaugeVerdict.ACCEPTABLE: (0.16, 0.45, 0.33),
    GaugeVerdict.CONDITIONAL: (0.62, 0.44, 0.05),
    GaugeVerdict.NOT_ACCEPTABLE: (0.62, 0.13, 0.15),
}
#: Line styles told apart without colour (printed in black and white): dash pattern and marker.
_SERIES_DASHES = ((), (4, 2), (1, 2), (6, 2, 1, 2), (8, 3))
_SERIES_MARKERS = ("circle", "square", "triangle", "diamond", "cross")
_SERIES_GREYS = (0.10, 0.35, 0.55, 0.25, 0.45)


def _draw_table(
    c, x: float, y: float, header: Sequence[str], rows: Sequence[Sequence[str]], widths: Sequence[float]
) -> float:
    """Draw a ruled text table with its top-left at (x, y) in points; return the y below it."""
    line_h = 12.0
    c.setFont("Helvetica-Bold", 8)
    cx = x
    for text, w in zip(header, widths):
        if cx == x:
            c.drawString(cx + 2, y - 9, text)
        else:
            c.drawRightString(cx + w - 2, y - 9, text)
        cx += w
    c.setLineWidth(0.6)
    c.setStrokeColorRGB(*_INK)
    c.line(x, y - line_h, x + sum(widths), y - line_h)
    c.setFont("Helvetica", 8)
    yy = y - line_h
    for row in rows:
        cx = x
        for k, (text, w) in enumerate(zip(row, widths)):
            if k == 0:
                c.drawString(cx + 2, yy - 9, text)
            else:
                c.drawRightString(cx + w - 2, yy - 9, text)
            cx += w
        yy -= line_h
    c.setLineWidth(0.3)
    c.line(x, yy, x + sum(widths), yy)
    return yy


def _draw_marker(c, kind: str, x: float, y: float, size: float = 2.2) -> None:
    p = c.beginPath()
    if kind == "circle":
        c.circle(x, y, size, stroke=1, fill=1)
        return
    if kind == "square":
        c.rect(x - size, y - size, 2 * size, 2 * size, stroke=1, fill=1)
        return
    if kind == "triangle":
        p.moveTo(x, y + size * 1.2)
        p.lineTo(x - size, y - size * 0.8)
        p.lineTo(x + size, y - size * 0.8)
    elif kind == "diamond":
        p.moveTo(x, y + size * 1.3)
        p.lineTo(x + size, y)
        p.lineTo(x, y - size * 1.3)
        p.lineTo(x - size, y)
    else:
        c.line(x - size, y - size, x + size, y + size)
        c.line(x - size, y + size, x + size, y - size)
        return
    p.close()
    c.drawPath(p, stroke=1, fill=1)


def _nice_ticks(lo: float, hi: float, count: int = 5) -> list[float]:
    if hi <= lo:
        hi = lo + 1.0
    raw = (hi - lo) / count
    mag = 10 ** math.floor(math.log10(raw))
    step = min((s * mag for s in (1, 2, 2.5, 5, 10) if s * mag >= raw), default=10 * mag)
    first = math.ceil(lo / step) * step
    return [first + k * step for k in range(int((hi - first) / step + 1e-9) + 1)]


def _draw_axes(c, box, lo: float, hi: float, title: str, ylabel: str) -> tuple[float, float]:
    """Frame, horizontal grid and y tick labels; returns the padded (lo, hi) used."""
    x0, y0, w, h = box
    pad = 0.08 * (hi - lo) if hi > lo else max(abs(hi), 1.0) * 0.1
    lo, hi = lo - pad, hi + pad
    c.setFont("Helvetica-Bold", 8.5)
    c.setFillColorRGB(*_INK)
    c.drawString(x0, y0 + h + 5, title)
    c.setLineWidth(0.3)
    c.setFont("Helvetica", 6.5)
    for t in _nice_ticks(lo, hi):
        ty = y0 + (t - lo) / (hi - lo) * h
        c.setStrokeColorRGB(*_GRID)
        c.line(x0, ty, x0 + w, ty)
        c.drawRightString(x0 - 2, ty - 2, f"{t:g}")
    c.setStrokeColorRGB(*_INK)
    c.setLineWidth(0.6)
    c.rect(x0, y0, w, h, stroke=1, fill=0)
    c.saveState()
    c.translate(x0 - 27, y0 + h / 2)
    c.rotate(90)
    c.drawCentredString(0, 0, ylabel)
    c.restoreState()
    return lo, hi


def _draw_range_chart(c, study: GaugeStudy, box) -> None:
    """Range of the trials of each part, one panel per appraiser, with mean range and UCL."""
    x0, y0, w, h = box
    ranges = study.values.max(axis=2) - study.values.min(axis=2)  # (parts, appraisers)
    r_bar = float(ranges.mean())
    d4 = D4_BY_SUBGROUP.get(study.n_trials)
    ucl = d4 * r_bar if d4 is not None else None
    top = max(float(ranges.max()), ucl or 0.0, r_bar)
    lo, hi = _draw_axes(c, box, 0.0, top, "Range of trials by appraiser", "range")
    n_parts, n_app = ranges.shape
    panel_w = w / n_app
    scale = lambda v: y0 + (v - lo) / (hi - lo) * h  # noqa: E731
    c.setFont("Helvetica", 6.5)
    for j, appraiser in enumerate(study.appraisers):
        px0 = x0 + j * panel_w
        if j:
            c.setStrokeColorRGB(*_INK)
            c.setLineWidth(0.4)
            c.line(px0, y0, px0, y0 + h)
        c.setFillColorRGB(*_INK)
        c.drawCentredString(px0 + panel_w / 2, y0 - 9, f"appraiser {appraiser}")
        xs = [px0 + panel_w * (i + 0.5) / n_parts for i in range(n_parts)]
        ys = [scale(v) for v in ranges[:, j]]
        c.setLineWidth(0.8)
        c.setStrokeColorRGB(*_INK)
        for k in range(n_parts - 1):
            c.line(xs[k], ys[k], xs[k + 1], ys[k + 1])
        for xx, yy in zip(xs, ys):
            _draw_marker(c, "circle", xx, yy, 1.6)
    c.setLineWidth(0.7)
    c.setDash(3, 2)
    c.line(x0, scale(r_bar), x0 + w, scale(r_bar))
    c.drawString(x0 + w + 2, scale(r_bar) - 2, f"R-bar {r_bar:.3g}")
    if ucl is not None:
        c.setDash(1, 1.5)
        c.line(x0, scale(ucl), x0 + w, scale(ucl))
        c.drawString(x0 + w + 2, scale(ucl) - 2, f"UCL {ucl:.3g}")
    c.setDash()


def _short_labels(labels: Sequence[str], width: int = 8) -> list[str]:
    """Labels without their common prefix (``LW-220-01`` -> ``01``), cut to ``width`` characters."""
    prefix = os.path.commonprefix(list(labels)) if len(labels) > 1 else ""
    return [(label[len(prefix) :] or label)[-width:] for label in labels]


def _draw_means_chart(c, study: GaugeStudy, box) -> None:
    """Mean of the trials per part, one line per appraiser."""
    x0, y0, w, h = box
    means = study.values.mean(axis=2)
    lo, hi = _draw_axes(c, box, float(means.min()), float(means.max()), "Means by part and appraiser", "mean")
    n_parts, n_app = means.shape
    xs = [x0 + w * (i + 0.5) / n_parts for i in range(n_parts)]
    scale = lambda v: y0 + (v - lo) / (hi - lo) * h  # noqa: E731
    c.setFont("Helvetica", 6.5)
    c.setFillColorRGB(*_INK)
    for i, part in enumerate(_short_labels(study.parts)):
        c.drawCentredString(xs[i], y0 - 9, part)
    for j, appraiser in enumerate(study.appraisers):
        grey = _SERIES_GREYS[j % len(_SERIES_GREYS)]
        marker = _SERIES_MARKERS[j % len(_SERIES_MARKERS)]
        c.setStrokeColorRGB(grey, grey, grey)
        c.setFillColorRGB(grey, grey, grey)
        c.setLineWidth(0.8)
        dash = _SERIES_DASHES[j % len(_SERIES_DASHES)]
        c.setDash(*dash) if dash else c.setDash()
        ys = [scale(v) for v in means[:, j]]
        for k in range(n_parts - 1):
            c.line(xs[k], ys[k], xs[k + 1], ys[k + 1])
        c.setDash()
        for xx, yy in zip(xs, ys):
            _draw_marker(c, marker, xx, yy)
        # legend
        lx, ly = x0 + w + 6, y0 + h - 10 - 11 * j
        c.setDash(*dash) if dash else c.setDash()
        c.line(lx, ly + 2.5, lx + 14, ly + 2.5)
        c.setDash()
        _draw_marker(c, marker, lx + 7, ly + 2.5)
        c.setFillColorRGB(*_INK)
        c.drawString(lx + 17, ly, str(appraiser)[:10])
    c.setStrokeColorRGB(*_INK)
    c.setFillColorRGB(*_INK)


def write_gauge_pdf(study: GaugeStudy, path: str | Path, *, title: str = "Gauge R&R study (ANOVA method)") -> None:
    """Write the one-page PDF of a gauge study (atomically).

    The page holds the ANOVA table of the model used (and the table with the
    interaction when that was pooled), the variance components, the verdict
    with its reasons, the range chart by appraiser and the chart of means by
    part and appraiser, drawn as vector graphics.
    """
    from reportlab.lib.pagesizes import A4
    from reportlab.lib.units import mm
    from reportlab.pdfgen import canvas

    page_w, page_h = A4
    left = 18 * mm
    with atomic_path(path) as tmp:
        c = canvas.Canvas(str(tmp), pagesize=A4, pageCompression=1)
        c.setTitle(title)
        c.setAuthor(f"surfinspect {__version__}")
        c.setFillColorRGB(*_INK)
        y = page_h - 18 * mm
        c.setFont("Helvetica-Bold", 14)
        c.drawString(left, y, title)
        y -= 14
        c.setFont("Helvetica", 8.5)
        c.drawString(
            left,
            y,
            f"{study.source or 'study'}  |  {len(study.parts)} parts x {len(study.appraisers)} appraisers x "
            f"{study.n_trials} trials  |  tolerance width {study.tolerance:g}  |  "
            f"{datetime.now(timezone.utc).strftime('%Y-%m-%d %H:%M UTC')}",
        )
        # verdict
        y -= 26
        tint = _VERDICT_TINT[study.verdict]
        c.setStrokeColorRGB(*tint)
        c.setLineWidth(1.4)
        c.rect(left, y - 4, page_w - 2 * left, 22, stroke=1, fill=0)
        c.setFillColorRGB(*tint)
        c.setFont("Helvetica-Bold", 11)
        c.drawString(left + 6, y + 3, f"Gauge {study.verdict.value.replace('-', ' ')}")
        c.setFillColorRGB(*_INK)
        c.setFont("Helvetica", 8.5)
        ndc = "undefined" if study.ndc is None else str(study.ndc)
        c.drawString(
            left + 150,
            y + 3,
            f"%GRR of total variation {study.grr_percent_of_total_variation:.2f}%   "
            f"%GRR of tolerance {study.grr_percent_of_tolerance:.2f}%   ndc {ndc}",
        )
        y -= 16
        c.setFont("Helvetica", 7.5)
        for reason in study.reasons:
            c.drawString(left + 6, y, "- " + reason)
            y -= 9.5
        c.drawString(left + 6, y, "- model: " + study.model_reason)
        y -= 16

        widths = (110, 35, 75, 75, 65, 65)
        header = [h.capitalize() if h == "source" else h for h in ANOVA_HEADER]

        tables = [study.anova_interaction] + ([study.anova_pooled] if study.model == "pooled" else [])
        for table in tables:
            used = " (used)" if table is study.anova else ""
            name = "with interaction" if table.model == "interaction" else "interaction pooled into repeatability"
            c.setFont("Helvetica-Bold", 9)
            c.drawString(left, y, f"ANOVA, {name}{used}")
            y = _draw_table(c, left, y - 4, header, anova_text_rows(table), widths) - 14

        c.setFont("Helvetica-Bold", 9)
        c.drawString(left, y, "Variance components")
        y = _draw_table(
            c,
            left,
            y - 4,
            ("Source", *COMPONENT_HEADER[1:4], "% total var.", "% tolerance"),
            component_text_rows(study),
            (110, 70, 65, 70, 65, 65),
        )
        c.setFont("Helvetica", 7)
        c.drawString(
            left,
            y - 9,
            "% total variation = sigma / sigma(TV); % tolerance = 6 sigma / tolerance width; "
            "ndc = floor(1.41 PV / GRR).",
        )
        y -= 24

        chart_h = min(120.0, (y - 34 * mm) / 2 - 30)
        chart_w = page_w - 2 * left - 95
        _draw_range_chart(c, study, (left + 30, y - chart_h - 12, chart_w, chart_h))
        y -= chart_h + 40
        _draw_means_chart(c, study, (left + 30, y - chart_h - 12, chart_w, chart_h))

        c.setFont("Helvetica-Oblique", 7.5)
        c.setFillColorRGB(*_INK)
        c.drawString(left, 14 * mm, CAUTION)
        c.setFont("Helvetica", 7)
        c.drawRightString(page_w - left, 10 * mm, f"surfinspect {__version__}")
        c.showPage()
        c.save()
