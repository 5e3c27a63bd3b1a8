"""Reading a crossed study table from CSV: round trips, decimal commas, every problem named by file and line."""

import numpy as np
import pytest
from test_gauge import INTERACTION_TABLE

from surfinspect.errors import InputError
from surfinspect.qualify.study_table import read_study_csv


def _write(tmp_path, text, name="study.csv"):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def _csv(values, parts=None, appraisers=None, delimiter=","):
    p, o, r = values.shape
    lines = [delimiter.join(("part", "appraiser", "trial", "value"))]
    for i in range(p):
        for j in range(o):
            for k in range(r):
                lines.append(delimiter.join((f"LW-220-{i + 1:02d}", "AB"[j], str(k + 1), repr(float(values[i, j, k])))))
    return "\n".join(lines) + "\n"


def test_read_study_csv_round_trip(tmp_path):
    path = _write(tmp_path, _csv(INTERACTION_TABLE))
    table = read_study_csv(path)
    assert table.parts == ("LW-220-01", "LW-220-02", "LW-220-03")
    assert table.appraisers == ("A", "B")
    assert table.trials == ("1", "2")
    np.testing.assert_array_equal(table.values, INTERACTION_TABLE)


def test_read_study_csv_semicolon_and_decimal_comma(tmp_path):
    text = _csv(INTERACTION_TABLE, delimiter=";").replace(".", ",")
    table = read_study_csv(_write(tmp_path, "\ufeff" + text))  # spreadsheet export with a byte-order mark
    np.testing.assert_array_equal(table.values, INTERACTION_TABLE)


def _lines(values):
    return _csv(values).splitlines()


@pytest.mark.parametrize(
    ("edit", "message"),
    [
        (
            lambda ls: ["part,appraiser,value"] + [",".join(x.split(",")[:2] + x.split(",")[3:]) for x in ls[1:]],
            r"study\.csv:1: header: columns must be .*missing trial",
        ),
        (lambda ls: [ls[0] + ",note"] + [x + ",ok" for x in ls[1:]], r"study\.csv:1: header: .*unknown note"),
        (lambda ls: ls[:3] + ["LW-220-01,B,1,abc"] + ls[4:], r"study\.csv:4: value: not a number \(got 'abc'\)"),
        (lambda ls: ls[:3] + ["LW-220-01,B,1,nan"] + ls[4:], r"study\.csv:4: value: not a finite number"),
        (lambda ls: ls[:3] + ["LW-220-01,B,1"] + ls[4:], r"study\.csv:4: row has 3 fields"),
        (lambda ls: ls[:3] + [",B,1,4.0"] + ls[4:], r"study\.csv:4: part: empty"),
        # missing trial 2 of LW-220-02 / A (line 7)
        (lambda ls: ls[:6] + ls[7:], r"study\.csv:6: part 'LW-220-02', appraiser 'A' has no trial 2"),
        # LW-220-03 measured by A only (its B rows, lines 12 and 13, removed)
        (lambda ls: ls[:11], r"study\.csv:10: part 'LW-220-03' is measured by appraiser\(s\) A only; missing B"),
        (
            lambda ls: ls + ["LW-220-01,A,1,2.0"],
            r"study\.csv:14: part 'LW-220-01', appraiser 'A', trial '1' repeats line 2",
        ),
        (lambda ls: [ls[0]], r"header but no measurements"),
    ],
)
def test_malformed_study_tables_name_the_file_and_row(tmp_path, edit, message):
    path = _write(tmp_path, "\n".join(edit(_lines(INTERACTION_TABLE))) + "\n")
    with pytest.raises(InputError, match=message):
        read_study_csv(path)


def test_every_problem_is_listed(tmp_path):
    lines = _lines(INTERACTION_TABLE)
    lines[2] = "LW-220-01,A,2,x"
    lines[5] = "LW-220-02,A,1,y"
    with pytest.raises(InputError, match=r"study\.csv:3: value: not a number .*and 1 more") as info:
        read_study_csv(_write(tmp_path, "\n".join(lines)))
    assert len(info.value.problems) == 2 and info.value.problems[1].startswith(f"{tmp_path / 'study.csv'}:6:")


def _crossed_rows(parts=5, appraisers=("ann", "bob", "cy"), trials=2):
    """Header plus one row per part, appraiser and trial: line n + 1 of the file is item n."""
    rows = ["part,appraiser,trial,value"]
    for i in range(parts):
        for j, appraiser in enumerate(appraisers):
            for k in range(trials):
                rows.append(f"P{i + 1},{appraiser},{k + 1},{i + 0.1 * j + 0.01 * k}")
    return rows


def _problems(tmp_path, rows, **kwargs):
    with pytest.raises(InputError) as info:
        read_study_csv(_write(tmp_path, "\n".join(rows) + "\n"), **kwargs)
    return info.value.problems


def test_one_extra_trial_row_is_named_alone_with_a_summary(tmp_path):
    # 5 x 3 x 2 = 30 rows on lines 2-31; the extra trial of P1 / ann is line 32.
    rows = _crossed_rows() + ["P1,ann,3,0.5"]
    with pytest.raises(
        InputError,
        match=r"study\.csv:32: part 'P1', appraiser 'ann', trial '3': a trial the other "
        r"cells do not have \(the study's trials: 1, 2\) \(and 1 more\)",
    ):
        read_study_csv(_write(tmp_path, "\n".join(rows)))
    problems = _problems(tmp_path, rows)
    assert len(problems) == 2
    assert problems[1].endswith(
        "study.csv: the study is not balanced (1 extra row): a crossed study has one value "
        "per part, appraiser and trial, 5 x 3 x 2 = 30 rows (got 31)"
    )


def test_rows_of_an_appraiser_the_other_parts_lack_are_named_together(tmp_path):
    rows = _crossed_rows() + ["P3,dan,1,0.1", "P3,dan,2,0.3"]
    problems = _problems(tmp_path, rows)
    assert len(problems) == 2
    assert problems[0].endswith(
        "study.csv:32: part 'P3', appraiser 'dan': an appraiser the other parts do not have "
        "(2 rows: lines 32, 33; the study's appraisers: ann, bob, cy)"
    )
    assert "(2 extra rows)" in problems[1] and "5 x 3 x 2 = 30 rows (got 32)" in problems[1]


def test_many_balance_problems_are_listed_up_to_the_limit_then_counted(tmp_path):
    from surfinspect.qualify.study_table import MAX_BALANCE_LINES

    # trial 2 of ann dropped for every part: 5 cells miss a trial, plus P5 measured by ann and bob only
    rows = [r for r in _crossed_rows() if not r.endswith(tuple(f",ann,2,{i}.01" for i in range(5)))]
    rows = [r for r in rows if not r.startswith("P5,cy,")]
    problems = _problems(tmp_path, rows)
    assert len(problems) == MAX_BALANCE_LINES + 1
    assert "part 'P5' is measured by appraiser(s) ann, bob only; missing cy" in problems[0]
    assert all("has no trial 2" in p for p in problems[1:MAX_BALANCE_LINES])
    # 5 trials of ann and the 2 trials of P5 / cy are missing: 7 values, 6 problems, 5 listed
    assert "(7 missing values; 1 more not listed)" in problems[-1] and "(got 23)" in problems[-1]


def test_a_recipe_for_a_table_of_values_is_refused(tmp_path):
    with pytest.raises(
        InputError,
        match=r"study\.csv:1: header: the table holds measured values, so a recipe has "
        r"nothing to measure",
    ):
        read_study_csv(_write(tmp_path, "\n".join(_crossed_rows())), measure=lambda path: 0.0)


def test_single_appraiser_study_is_refused(tmp_path):
    text = "part,appraiser,trial,value\nP1,A,1,1\nP1,A,2,2\nP2,A,1,3\nP2,A,2,4\n"
    with pytest.raises(InputError, match="at least 2 appraisers"):
        read_study_csv(_write(tmp_path, text))


def test_missing_file_is_an_input_error(tmp_path):
    with pytest.raises(InputError, match=r"nope\.csv: cannot read the study table"):
        read_study_csv(tmp_path / "nope.csv")


def test_image_table_is_checked_before_any_image_is_measured(tmp_path):
    measured = []
    text = "part,appraiser,trial,image\nP1,A,1,a.png\nP1,A,2,b.png\nP1,B,1,c.png\nP2,A,1,d.png\n"
    with pytest.raises(InputError, match="part 'P2' is measured by appraiser") as info:
        read_study_csv(_write(tmp_path, text), measure=lambda p: measured.append(p) or 0.0)
    assert any("has no trial 2" in p for p in info.value.problems)
    assert measured == []


def test_image_table_values_come_from_measure_with_paths_beside_the_table(tmp_path):
    rows = ["part,appraiser,trial,image"]
    for i in range(2):
        for a in "AB":
            for k in (1, 2):
                rows.append(f"P{i},{a},{k},img/P{i}-{a}-{k}.png")
    seen = []

    def fake_measure(path):
        seen.append(path)
        part, appraiser, trial = path.stem.split("-")
        return int(part[1]) * 10 + (appraiser == "B") + 0.1 * int(trial)

    table = read_study_csv(_write(tmp_path, "\n".join(rows)), measure=fake_measure)
    assert seen[0] == tmp_path / "img" / "P0-A-1.png"
    np.testing.assert_allclose(table.values[1, 1], [11.1, 11.2])


def test_image_table_without_measure_and_failed_measurement(tmp_path):
    text = "part,appraiser,trial,image\n" + "".join(
        f"P{i},{a},{k},x.png\n" for i in (1, 2) for a in "AB" for k in (1, 2)
    )
    path = _write(tmp_path, text)
    with pytest.raises(InputError, match="lists images; give a recipe and region"):
        read_study_csv(path)

    def refuse(p):
        raise InputError(f"{p}: image file not found")

    with pytest.raises(InputError, match=r"study\.csv:2: image: .*x\.png: image file not found \(and 7 more\)"):
        read_study_csv(path, measure=refuse)


def test_header_with_both_value_and_image_is_refused(tmp_path):
    with pytest.raises(InputError, match="both value and image"):
        read_study_csv(_write(tmp_path, "part,appraiser,trial,value,image\nP1,A,1,1,x.png\n"))
