"""Reading a gauge study table (part, appraiser, trial, value or image) from CSV, with every problem listed at once."""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Sequence

import numpy as np

from ..errors import InputError

__all__ = ["StudyTable", "read_study_csv"]


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
            header, value_column = _read_header(record, f"{name}:{line}", allowed, measure)
            continue
        row = _read_row(record, header, value_column, delimiter, f"{name}:{line}", problems)
        if row is not None:
            rows.append((line, *row))
    if header is None:  # pragma: no cover - a non-blank first line is a header
        raise InputError(f"{name}: no header row")
    _raise_all(problems)
    layout = _balanced_layout(name, rows)
    values = _study_values(name, path.parent, rows, layout, value_column, delimiter, measure)
    return StudyTable(name, layout.parts, layout.appraisers, layout.trials, values)


def _read_header(record: list[str], at: str, allowed: str, measure: Measure | None) -> tuple[list[str], str]:
    """The header's column names and its value column (``value`` or ``image``), checked against ``measure``."""
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
        raise InputError(f"{at}: header: columns must be {allowed} (got {', '.join(header)}; {'; '.join(found)})")
    value_column = values_given[0]
    if value_column == "image" and measure is None:
        raise InputError(f"{at}: header: the table lists images; give a recipe and region to measure them")
    if value_column == "value" and measure is not None:
        # a recipe given for a table of values would be ignored without a word
        raise InputError(
            f"{at}: header: the table holds measured values, so a recipe has nothing to measure "
            "(allowed: a recipe with an image column, or a value column without a recipe)"
        )
    return header, value_column


def _read_row(
    record: list[str], header: list[str], value_column: str, delimiter: str, at: str, problems: list[str]
) -> tuple[str, str, str, str] | None:
    """(part, appraiser, trial, raw value or image) of one row, or None with its problems added."""
    if len(record) != len(header):
        problems.append(f"{at}: row has {len(record)} fields (allowed {len(header)}: {', '.join(header)})")
        return None
    cells = {key: cell.strip() for key, cell in zip(header, record)}
    empty = [key for key in LABEL_COLUMNS + (value_column,) if not cells[key]]
    for key in empty:
        problems.append(f"{at}: {key}: empty (a {'value' if key == 'value' else 'label'} is required)")
    if value_column == "value" and cells["value"]:
        number = cells["value"].replace(",", ".") if delimiter == ";" else cells["value"]
        try:
            value = float(number)
        except ValueError:
            problems.append(f"{at}: value: not a number (got {cells['value']!r})")
            return None
        if not math.isfinite(value):
            problems.append(f"{at}: value: not a finite number (got {cells['value']!r})")
            return None
    if empty:
        return None
    return cells["part"], cells["appraiser"], cells["trial"], cells[value_column]


def _study_values(
    name: str, folder: Path, rows, layout: _Layout, value_column: str, delimiter: str, measure: Measure | None
) -> np.ndarray:
    """The (P, A, R) values: read from the table, or measured from its images once its structure is checked."""
    problems: list[str] = []
    values = np.empty(layout.shape)
    for (line, part, appraiser, trial, raw), index in zip(rows, layout.indices):
        if value_column == "value":
            values[index] = float(raw.replace(",", ".") if delimiter == ";" else raw)
            continue
        image = Path(raw) if Path(raw).is_absolute() else folder / raw
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
    return values


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
    t = _Tally.of(rows)
    appraisers_of_part = {part: frozenset(a for p, a in t.lines_of_cell if p == part) for part in t.parts}
    study_appraisers = _intended_set(list(appraisers_of_part.values()), list(t.appraisers))
    cells = [cell for cell in t.lines_of_cell if cell[1] in study_appraisers]
    study_trials = _intended_set([frozenset(tr for _, tr in t.lines_of_cell[c]) for c in cells], list(t.trials))
    extra_appraisers, extra_trials, missing_trials, extra_rows, missing_cell_values = _cell_problems(
        t, study_appraisers, study_trials
    )
    missing_appraisers, missing_part_values = _part_problems(t, appraisers_of_part, study_appraisers, study_trials)
    extra_rows += len(t.repeated)
    missing_values = missing_cell_values + missing_part_values
    # Categories in this order, each by line: what is wrong with a part before what is wrong with a cell.
    balance = [
        f"{name}:{line}: {text}"
        for group in (t.repeated, extra_appraisers, missing_appraisers, extra_trials, missing_trials)
        for line, text in sorted(group, key=lambda item: item[0])
    ]
    problems = balance[:MAX_BALANCE_LINES]
    if len(t.parts) < 2:
        problems.append(f"{name}: the study needs at least 2 parts (got {len(t.parts)})")
    if len(study_appraisers) < 2:
        problems.append(f"{name}: the study needs at least 2 appraisers or setups (got {len(study_appraisers)})")
    if len(study_trials) < 2:
        problems.append(f"{name}: the study needs at least 2 trials per part and appraiser (got {len(study_trials)})")
    if balance:
        counted = [_plural(extra_rows, "extra row")] if extra_rows else []
        counted += [_plural(missing_values, "missing value")] if missing_values else []
        listed = f"; {len(balance) - MAX_BALANCE_LINES} more not listed" if len(balance) > MAX_BALANCE_LINES else ""
        shape = (len(t.parts), len(study_appraisers), len(study_trials))
        problems.append(
            f"{name}: the study is not balanced ({', '.join(counted)}{listed}): a crossed study has one value "
            f"per part, appraiser and trial, {shape[0]} x {shape[1]} x {shape[2]} = {math.prod(shape)} rows "
            f"(got {len(rows)})"
        )
    _raise_all(problems)
    indices = tuple((t.parts[p], t.appraisers[a], t.trials[tr]) for _, p, a, tr, _ in rows)
    return _Layout(tuple(t.parts), tuple(t.appraisers), tuple(t.trials), indices)


@dataclass
class _Tally:
    """The labels of a study table in order of first appearance, its repeated rows and its cells' rows."""

    parts: dict[str, int]
    appraisers: dict[str, int]
    trials: dict[str, int]
    repeated: list[tuple[int, str]]
    first_line_of_part: dict[str, int]
    lines_of_cell: dict[tuple[str, str], list[tuple[int, str]]]  # (part, appraiser): [(line, trial)]

    @classmethod
    def of(cls, rows: list[tuple[int, str, str, str, str]]) -> _Tally:
        t = cls({}, {}, {}, [], {}, {})
        seen: dict[tuple[str, str, str], int] = {}
        for line, part, appraiser, trial, _ in rows:
            t.parts.setdefault(part, len(t.parts))
            t.appraisers.setdefault(appraiser, len(t.appraisers))
            t.trials.setdefault(trial, len(t.trials))
            t.first_line_of_part.setdefault(part, line)
            key = (part, appraiser, trial)
            if key in seen:
                t.repeated.append(
                    (
                        line,
                        f"part {part!r}, appraiser {appraiser!r}, trial {trial!r} repeats line {seen[key]} "
                        "(allowed: one value per part, appraiser and trial)",
                    )
                )
                continue
            seen[key] = line
            t.lines_of_cell.setdefault((part, appraiser), []).append((line, trial))
        return t


def _cell_problems(t: _Tally, study_appraisers: frozenset[str], study_trials: frozenset[str]):
    """Per cell: rows of an appraiser or a trial the study does not have, and missing trials.

    Returns the three lists of (line, text), the number of extra rows and the number of missing values.
    """
    shown_appraisers = ", ".join(a for a in t.appraisers if a in study_appraisers)
    shown_trials = ", ".join(tr for tr in t.trials if tr in study_trials)
    extra_appraisers: list[tuple[int, str]] = []
    extra_trials: list[tuple[int, str]] = []
    missing_trials: list[tuple[int, str]] = []
    extra_rows = missing_values = 0
    for (part, appraiser), cell_rows in t.lines_of_cell.items():
        if appraiser not in study_appraisers:
            extra_rows += len(cell_rows)
            where = ", ".join(str(line) for line, _ in cell_rows)
            extra_appraisers.append(
                (
                    cell_rows[0][0],
                    f"part {part!r}, appraiser {appraiser!r}: an appraiser the other parts do not have "
                    f"({_plural(len(cell_rows), 'row')}: {'line' if len(cell_rows) == 1 else 'lines'} {where}; "
                    f"the study's appraisers: {shown_appraisers})",
                )
            )
            continue
        for line, trial in cell_rows:
            if trial not in study_trials:
                extra_rows += 1
                extra_trials.append(
                    (
                        line,
                        f"part {part!r}, appraiser {appraiser!r}, trial {trial!r}: a trial the other cells do not have "
                        f"(the study's trials: {shown_trials})",
                    )
                )
        absent = [tr for tr in t.trials if tr in study_trials and tr not in {x for _, x in cell_rows}]
        if absent:
            missing_values += len(absent)
            missing_trials.append(
                (
                    cell_rows[0][0],
                    f"part {part!r}, appraiser {appraiser!r} has no trial {', '.join(absent)} "
                    f"(trials in the study: {shown_trials})",
                )
            )
    return extra_appraisers, extra_trials, missing_trials, extra_rows, missing_values


def _part_problems(
    t: _Tally,
    appraisers_of_part: dict[str, frozenset[str]],
    study_appraisers: frozenset[str],
    study_trials: frozenset[str],
) -> tuple[list[tuple[int, str]], int]:
    """Parts not measured by every appraiser of the study, at each part's first line; and the values missing."""
    missing_appraisers: list[tuple[int, str]] = []
    missing_values = 0
    for part, line in t.first_line_of_part.items():
        absent = [a for a in t.appraisers if a in study_appraisers and a not in appraisers_of_part[part]]
        if absent:
            missing_values += len(absent) * len(study_trials)
            present = [a for a in t.appraisers if a in study_appraisers and a in appraisers_of_part[part]]
            by = f"by appraiser(s) {', '.join(present)} only" if present else "by none of the study's appraisers"
            missing_appraisers.append(
                (
                    line,
                    f"part {part!r} is measured {by}; missing {', '.join(absent)} "
                    "(a crossed study needs every part measured by every appraiser)",
                )
            )
    return missing_appraisers, missing_values
