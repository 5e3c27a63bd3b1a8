"""The qualification commands end to end: ``gauge``, ``target`` and ``bias``."""

import json
import re

import numpy as np
import pytest

from surfinspect.cli import main


def _write_study(path, values):
    p, o, r = values.shape
    lines = ["part,appraiser,trial,value"]
    for i in range(p):
        for j in range(o):
            for k in range(r):
                lines.append(f"CP-14-{i + 1:02d},{'ABC'[j]},{k + 1},{float(values[i, j, k])!r}")
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def _study(seed, appraiser_sigma):
    rng = np.random.default_rng(seed)
    part = rng.normal(0, 2.0, 10)[:, None, None]
    appraiser = rng.normal(0, appraiser_sigma, 3)[None, :, None]
    return part + appraiser + rng.normal(0, 0.1, (10, 3, 3))


# Hand-worked in tests/test_gauge.py: %GRR of TV 38.980, of tolerance 30: 37.859, ndc 3.
HAND_TABLE = np.stack(
    [np.array([[2, 4], [6, 6], [10, 14]], float) - 0.5, np.array([[2, 4], [6, 6], [10, 14]], float) + 0.5], axis=2
)


def test_gauge_not_acceptable_exits_1_and_writes_json_and_pdf(tmp_path, capsys):
    study = _write_study(tmp_path / "study.csv", HAND_TABLE)
    out_json, out_pdf = tmp_path / "gauge.json", tmp_path / "gauge.pdf"
    code = main(["gauge", str(study), "--tolerance-width", "30", "--json", str(out_json), "--pdf", str(out_pdf)])
    assert code == 1
    doc = json.loads(out_json.read_text())
    assert doc["grr_percent_of_total_variation"] == pytest.approx(38.980, abs=1e-3)
    assert doc["grr_percent_of_tolerance"] == pytest.approx(37.859, abs=1e-3)
    assert doc["ndc"] == 3
    assert doc["components"]["repeatability"]["variance"] == pytest.approx(0.5)
    assert doc["verdict"] == "not-acceptable" and doc["model"] == "interaction"
    assert out_pdf.read_bytes().startswith(b"%PDF")
    printed = capsys.readouterr().out
    assert "verdict: gauge not-acceptable" in printed and "%GRR of tolerance:       37.86%" in printed


def test_gauge_acceptable_exits_0_and_conditional_exits_3(tmp_path):
    good = _write_study(tmp_path / "good.csv", _study(4, appraiser_sigma=0.02))
    assert main(["-q", "gauge", str(good), "--tolerance-width", "40"]) == 0
    # a larger appraiser effect brings %GRR of total variation into the 10-30 % band
    fair = _write_study(tmp_path / "fair.csv", _study(4, appraiser_sigma=0.3))
    out = tmp_path / "fair.json"
    code = main(["-q", "gauge", str(fair), "--tolerance-width", "40", "--json", str(out)])
    doc = json.loads(out.read_text())
    assert 10 <= doc["grr_percent_of_total_variation"] <= 30 and doc["ndc"] >= 5
    assert code == 3 and doc["verdict"] == "conditional"


def test_gauge_malformed_table_exits_2_naming_the_row_and_writes_nothing(tmp_path, capsys):
    study = _write_study(tmp_path / "study.csv", HAND_TABLE)
    lines = study.read_text().splitlines()
    lines[4] = lines[4].rsplit(",", 1)[0] + ",n/a"
    study.write_text("\n".join(lines) + "\n")
    out_json = tmp_path / "gauge.json"
    assert main(["gauge", str(study), "--tolerance-width", "30", "--json", str(out_json)]) == 2
    err = capsys.readouterr().err
    assert "study.csv:5: value: not a number (got 'n/a')" in err
    assert "Traceback" not in err
    assert not out_json.exists()


def _refused(capsys, argv, folder):
    """Run, expect exit 2, one line on stderr and no new file in ``folder``; return that line."""
    before = sorted(folder.rglob("*"))
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert len(err.splitlines()) == 1 and "Traceback" not in err, err
    assert sorted(folder.rglob("*")) == before
    return err.strip()


@pytest.mark.parametrize(
    ("flags", "message"),
    [
        (["--tolerance-width", "-1"], r"--tolerance-width: must be > 0 \(got -1\)$"),
        (["--tolerance-width", "0"], r"--tolerance-width: must be > 0 \(got 0\)$"),
        (["--tolerance-width", "nan"], r"--tolerance-width: must be > 0 \(got nan\)$"),
        (
            ["--tolerance-width", "30", "--interaction-alpha", "1"],
            r"--interaction-alpha: must be 0 < value < 1 \(got 1\)$",
        ),
        (["--tolerance-width", "30", "--resolution", "-0.1"], r"--resolution: must be >= 0 \(got -0.1\)$"),
    ],
)
def test_gauge_bad_flag_exits_2_naming_the_flag_not_the_table(tmp_path, capsys, flags, message):
    study = _write_study(tmp_path / "study.csv", HAND_TABLE)
    line = _refused(capsys, ["gauge", str(study), *flags], tmp_path)
    assert re.search(r"^surfinspect: error: " + message, line), line


def test_gauge_extra_trial_row_gives_two_lines_naming_it(tmp_path, capsys):
    study = _write_study(tmp_path / "study.csv", _study(4, appraiser_sigma=0.1))  # 10 x 3 x 3 on lines 2-91
    study.write_text(study.read_text() + "CP-14-01,A,4,0.5\n")
    assert main(["gauge", str(study), "--tolerance-width", "40"]) == 2
    err = capsys.readouterr().err.splitlines()
    assert len(err) == 2
    assert "study.csv:92: part 'CP-14-01', appraiser 'A', trial '4': a trial the other cells do not have" in err[0]
    assert "the study is not balanced (1 extra row)" in err[1] and "10 x 3 x 3 = 90 rows (got 91)" in err[1]


def test_gauge_recipe_with_a_table_of_values_exits_2(tmp_path, capsys):
    png, recipe = _render_target(tmp_path, lays="90")
    study = _write_study(tmp_path / "study.csv", HAND_TABLE)
    line = _refused(capsys, ["gauge", str(study), "--tolerance-width", "30", "--recipe", str(recipe)], tmp_path)
    assert "study.csv:1: header: the table holds measured values, so a recipe has nothing to measure" in line


def _unwritable(tmp_path, case, flag, ext):
    """An output path that cannot be written, and the one line expected for it."""
    if case == "a folder":
        path = tmp_path / "adir"
        path.mkdir()
        return path, f"surfinspect: error: {flag}: {path} is a folder (allowed: a file name)"
    if case == "no parent":
        path = tmp_path / "nope" / f"out.{ext}"
        return path, f"surfinspect: error: {flag}: {path}: the folder {path.parent} does not exist (create it first)"
    (tmp_path / "afile").write_text("x")
    path = tmp_path / "afile" / f"out.{ext}"
    return path, f"surfinspect: error: {flag}: {path}: {tmp_path / 'afile'} is a file, not a folder"


@pytest.mark.parametrize("case", ["a folder", "no parent", "parent is a file"])
@pytest.mark.parametrize(("flag", "ext"), [("--json", "json"), ("--pdf", "pdf")])
def test_gauge_unwritable_output_exits_2_before_any_work(tmp_path, capsys, case, flag, ext):
    study = _write_study(tmp_path / "study.csv", HAND_TABLE)
    path, expected = _unwritable(tmp_path, case, flag, ext)
    assert _refused(capsys, ["gauge", str(study), "--tolerance-width", "30", flag, str(path)], tmp_path) == expected


def test_gauge_outputs_must_not_overwrite_the_study_or_each_other(tmp_path, capsys):
    study = _write_study(tmp_path / "study.csv", HAND_TABLE)
    line = _refused(capsys, ["gauge", str(study), "--tolerance-width", "30", "--json", str(study)], tmp_path)
    assert line.endswith(f"--json: {study} is also the study table; it would be overwritten (choose another name)")
    line = _refused(
        capsys, ["gauge", str(study), "--tolerance-width", "30", "--pdf", str(tmp_path / "r.png")], tmp_path
    )
    assert line.endswith(f"--pdf: {tmp_path / 'r.png'}: the name must end in .pdf")
    same = str(tmp_path / "r.pdf")
    line = _refused(capsys, ["gauge", str(study), "--tolerance-width", "30", "--json", same, "--pdf", same], tmp_path)
    assert line.endswith(f"--pdf: {same} is also the --json file; it would be overwritten (choose another name)")


def test_target_pdf_and_bad_angle(tmp_path, capsys):
    out = tmp_path / "targets.pdf"
    assert main(["target", "--lay", "0,30,60,90", "--period-mm", "1", "--size-mm", "40", "30", "--out", str(out)]) == 0
    assert out.read_bytes().startswith(b"%PDF")
    assert (
        main(
            ["target", "--lay", "0,190", "--period-mm", "1", "--size-mm", "40", "30", "--out", str(tmp_path / "x.pdf")]
        )
        == 2
    )
    assert "--lay: 190 is outside the allowed range" in capsys.readouterr().err
    assert not (tmp_path / "x.pdf").exists()


_TARGET = ["target", "--lay", "0,90", "--period-mm", "1", "--size-mm", "18", "18"]


@pytest.mark.parametrize("case", ["a folder", "no parent", "parent is a file"])
@pytest.mark.parametrize(("png", "ext"), [((), "pdf"), (("--png",), "png")])
def test_target_unwritable_out_exits_2(tmp_path, capsys, case, png, ext):
    path, expected = _unwritable(tmp_path, case, "--out", ext)
    assert _refused(capsys, [*_TARGET, *png, "--out", str(path)], tmp_path) == expected


@pytest.mark.parametrize(
    ("flags", "message"),
    [
        (["--png", "--out", "{d}/t.pdf"], "--out: {d}/t.pdf: the name must end in .png"),
        (["--out", "{d}/t.png"], "--out: {d}/t.png: the name must end in .pdf"),
        (
            ["--png", "--out", "{d}/t.png", "--recipe", "{d}/t.png"],
            "--recipe: {d}/t.png: the name must end in .yaml or .yml",
        ),
        (
            ["--png", "--out", "{d}/t.png", "--recipe", "{d}/t.yaml", "--tolerance-deg", "0"],
            "--tolerance-deg: must be 0 < tolerance <= 45 degrees (got 0)",
        ),
        (
            ["--png", "--out", "{d}/t.png", "--recipe", "{d}/t.yaml", "--tolerance-deg", "-1"],
            "--tolerance-deg: must be 0 < tolerance <= 45 degrees (got -1)",
        ),
        (["--png", "--dpi", "100000", "--out", "{d}/t.png"], "--dpi: must be 50 <= dpi <= 4800 (got 100000)"),
        (["--raster-dpi", "10", "--out", "{d}/t.pdf"], "--raster-dpi: must be 50 <= dpi <= 4800 (got 10)"),
        # two 150 x 250 mm gratings in one column: sheet 15 + 150 + 15 = 180 mm wide and
        # 15 + 22 + 2 * (250 + 9 + 14) - 14 + 15 = 584 mm high; at 4800 / 25.4 px per mm: 34016 x 110362 px
        (
            ["--png", "--dpi", "4800", "--size-mm", "150", "250", "--out", "{d}/t.png"],
            "--dpi: a sheet of 34016 x 110362 px at 4800 dpi would be 3,754 megapixels (allowed at most 200",
        ),
        (
            ["--png", "--dpi", "100", "--out", "{d}/t.png"],
            "--period-mm: 1 mm is 3.94 px at 100 dpi (--dpi); allowed at least 4",
        ),
        (["--lay", "180", "--out", "{d}/t.pdf"], "--lay: 180 is outside the allowed range 0 <= lay < 180 degrees"),
    ],
)
def test_target_bad_flags_exit_2_and_write_nothing(tmp_path, capsys, flags, message):
    line = _refused(capsys, [*_TARGET, *(f.format(d=tmp_path) for f in flags)], tmp_path)
    assert message.format(d=tmp_path) in line


def _render_target(tmp_path, lays="0,30,60,90,150", kind=()):
    png, recipe = tmp_path / "target.png", tmp_path / "target.yaml"
    code = main(
        [
            "-q",
            "target",
            "--lay",
            lays,
            "--period-mm",
            "1",
            "--size-mm",
            "18",
            "18",
            "--png",
            "--dpi",
            "250",
            "--out",
            str(png),
            "--recipe",
            str(recipe),
            *kind,
        ]
    )
    assert code == 0
    return png, recipe


def test_bias_of_rendered_target_is_under_005_deg(tmp_path):
    # Issue requirement: a target rendered at a known dpi, read back and measured: bias under 0.05 deg.
    png, recipe = _render_target(tmp_path)
    out = tmp_path / "bias.json"
    assert main(["-q", "bias", str(recipe), str(png), str(png), "--json", str(out), "--max-bias", "0.05"]) == 0
    doc = json.loads(out.read_text())
    assert [b["nominal_deg"] for b in doc["per_nominal"]] == [0, 30, 60, 90, 150]
    for b in doc["per_nominal"]:
        assert b["n"] == 2 and abs(b["bias_deg"]) < 0.05
    assert doc["linearity"]["n"] == 10
    assert len(doc["measurements"]) == 10 and doc["missing"] == []


def test_bias_beyond_max_exits_1(tmp_path, capsys):
    png, recipe = _render_target(tmp_path, lays="30")
    out = tmp_path / "bias.json"
    # Declaring the 30 deg grating as 29 deg makes a bias of +1 deg
    code = main(["bias", str(recipe), str(png), "--nominal-lay", "29", "--max-bias", "0.05", "--json", str(out)])
    assert code == 1
    (only,) = json.loads(out.read_text())["per_nominal"]
    assert only["nominal_deg"] == 29 and only["bias_deg"] == pytest.approx(1.0, abs=0.05)
    assert "bias at 29° is +" in capsys.readouterr().out


def test_bias_region_without_texture_exits_3(tmp_path, capsys):
    from PIL import Image

    from surfinspect.measure.synth import polished_blank, to_uint8

    png, recipe = _render_target(tmp_path, lays="0,90")
    with Image.open(png) as im:
        shape = (im.height, im.width)
    blank = tmp_path / "blank.png"
    Image.fromarray(to_uint8(polished_blank(shape, seed=3))).save(blank)
    assert main(["bias", str(recipe), str(png), str(blank)]) == 3
    assert "blank.png: region lay-0: no measurable texture" in capsys.readouterr().err


@pytest.mark.parametrize("case", ["a folder", "no parent", "parent is a file"])
def test_bias_unwritable_json_exits_2_before_any_work(tmp_path, capsys, case):
    png, recipe = _render_target(tmp_path, lays="0")
    path, expected = _unwritable(tmp_path, case, "--json", "json")
    assert _refused(capsys, ["bias", str(recipe), str(png), "--json", str(path)], tmp_path) == expected
    line = _refused(capsys, ["bias", str(recipe), str(png), "--json", str(png)], tmp_path)
    assert line.endswith(f"--json: {png} is also an input image; it would be overwritten (choose another name)")


@pytest.mark.parametrize("max_bias", ["-1", "0"])
def test_bias_max_bias_must_be_positive(tmp_path, capsys, max_bias):
    png, recipe = _render_target(tmp_path, lays="0")
    line = _refused(
        capsys, ["bias", str(recipe), str(png), "--max-bias", max_bias, "--json", str(tmp_path / "b.json")], tmp_path
    )
    assert line == f"surfinspect: error: --max-bias: must be > 0 (got {max_bias})"


def test_bias_unknown_region_exits_2(tmp_path, capsys):
    png, recipe = _render_target(tmp_path, lays="0")
    assert main(["bias", str(recipe), str(png), "--region", "face"]) == 2
    assert "--region: face not in" in capsys.readouterr().err


def test_gauge_study_of_images_measures_each_with_the_recipe(tmp_path):
    from PIL import Image

    from surfinspect.measure.engine import inspect_image
    from surfinspect.measure.imaging import read_image
    from surfinspect.measure.synth import sine_grating, to_uint8
    from surfinspect.recipe import load_recipe

    (tmp_path / "panel.yaml").write_text(
        "recipe: lw-220-study\nrevision: 1\ndatum: image\nregions:\n"
        "  - name: face\n    rect: [8, 8, 80, 80]\n    lay_deg: 90\n    tolerance_deg: 3.0\n"
    )
    offsets = [-1.0, 0.3, 1.2, -0.4]  # each panel's true deviation from 90 deg
    rows = ["part,appraiser,trial,image"]
    for i, offset in enumerate(offsets):
        for j, setup in enumerate("AB"):
            for k in (1, 2):
                rng = np.random.default_rng(100 * i + 10 * j + k)
                pixels = sine_grating((96, 96), 90 + offset + 0.05 * j, 6.0) + rng.normal(0, 0.02, (96, 96))
                name = f"LW-220-{i}-{setup}{k}.png"
                Image.fromarray(to_uint8(np.clip(pixels, 0, 1))).save(tmp_path / name)
                rows.append(f"LW-220-{i},{setup},{k},{name}")
    (tmp_path / "study.csv").write_text("\n".join(rows) + "\n")
    out = tmp_path / "study.json"
    code = main(
        [
            "-q",
            "gauge",
            str(tmp_path / "study.csv"),
            "--tolerance-width",
            "6",
            "--recipe",
            str(tmp_path / "panel.yaml"),
            "--json",
            str(out),
        ]
    )
    doc = json.loads(out.read_text())
    assert code != 2 and doc["parts"] == [f"LW-220-{i}" for i in range(4)]
    values = np.array(doc["values"])
    np.testing.assert_allclose(values[:, 0, 0], offsets, atol=0.05)
    # the value is the engine's deviation for that image, measured independently here
    image = read_image(tmp_path / "LW-220-2-B1.png")
    direct = inspect_image(image.pixels, load_recipe(tmp_path / "panel.yaml")).regions[0].deviation_deg
    assert values[2, 1, 0] == pytest.approx(direct, abs=1e-6)


def test_gauge_image_table_needs_a_recipe(tmp_path, capsys):
    (tmp_path / "study.csv").write_text("part,appraiser,trial,image\nP1,A,1,a.png\n")
    assert main(["gauge", str(tmp_path / "study.csv"), "--tolerance-width", "6"]) == 2
    assert "lists images; give a recipe" in capsys.readouterr().err


def test_small_study_warns_and_json_keys_have_no_spaces(tmp_path, capsys):
    # 3 parts x 2 appraisers x 2 trials: smaller than the usual 10 x 3 x 2-3 (AIAG MSA, 4th ed.)
    study = _write_study(tmp_path / "small.csv", HAND_TABLE)
    out = tmp_path / "g.json"
    main(["gauge", str(study), "--tolerance-width", "30", "--json", str(out), "--basis", "larger"])
    err = capsys.readouterr().err
    assert "small study: 3 parts (usually at least 10), 2 appraisers (usually at least 3)" in err
    doc = json.loads(out.read_text())
    assert doc["warnings"] and doc["basis"] == "larger"

    def keys(node):
        if isinstance(node, dict):
            for k, v in node.items():
                yield k
                yield from keys(v)
        elif isinstance(node, list):
            for v in node:
                yield from keys(v)

    assert not [k for k in keys(doc) if " " in k]
    assert doc["components"]["part_x_appraiser"]["name"] == "part x appraiser"
    # both ANOVA tables are in the JSON; the used one is "anova"
    assert doc["anova"] == doc["anova_with_interaction"] and len(doc["anova_pooled"]) == len(doc["anova"]) - 1


def test_the_usual_study_size_gives_no_warning(tmp_path, capsys):
    study = _write_study(tmp_path / "usual.csv", _study(4, 0.05))
    main(["gauge", str(study), "--tolerance-width", "40"])
    assert "small study" not in capsys.readouterr().err


def test_old_tolerance_flag_is_refused_naming_the_new_one(tmp_path, capsys):
    study = _write_study(tmp_path / "s.csv", HAND_TABLE)
    assert main(["gauge", str(study), "--tolerance-width", "30", "--tolerance", "30"]) == 2
    assert "--tolerance: renamed --tolerance-width (the full width USL - LSL" in capsys.readouterr().err
