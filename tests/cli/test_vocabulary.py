"""One word for one thing: every output of a small signed batch and of inspect uses the chosen words.

Part verdicts accept / reject / review and region verdicts pass / fail / no-texture (DESIGN.md's
result JSON), ``not-inspected`` for a part whose image could not be read, sign-off meanings that
share no word with either (released / withheld / examined), *deviating* (not "defect"), *rotation*
(not "skew"). The PDF may print a word in capitals. Words are collected from the JSON, the CSV,
the console of every command, ``show`` and the PDF text (pypdf).
"""

from __future__ import annotations

import csv
import io
import json
import re

import cv2
import pytest

from surfinspect.cli.main import main
from surfinspect.measure import synth
from surfinspect.results import NOT_INSPECTED, SIGNOFF_MEANINGS, PartVerdict

pypdf = pytest.importorskip("pypdf")

#: The words DESIGN.md fixes for the result JSON; every other output uses the same.
PART_WORDS = {"accept", "reject", "review"}
REGION_WORDS = {"pass", "fail", "no-texture"}
#: Words that named one of these things before, or name it twice: none may appear in any output.
FORBIDDEN = re.compile(
    r"\b(accepted|rejected|approved|reviewed|needs? review|defects?|skew(ed)?|not inspected|no texture|"
    r"NOT INSPECTED|NO TEXTURE)\b",
    re.IGNORECASE,
)

RECIPE = """\
recipe: w-1
revision: 1
regions:
  - name: face
    rect: [8, 8, 112, 112]
    lay: perpendicular
    cell_px: 32
"""


@pytest.fixture(scope="module")
def outputs(tmp_path_factory):
    """Run inspect, batch, keygen, sign, show and show --out on four parts; collect every text."""
    root = tmp_path_factory.mktemp("vocabulary")
    folder = root / "parts"
    folder.mkdir()
    for name, image in {
        "w-1": synth.brushed_panel((128, 128), 90.0, seed=1),
        "w-2": synth.brushed_panel((128, 128), 99.0, seed=2),
        "w-3": synth.polished_blank((128, 128), seed=3),
    }.items():
        cv2.imwrite(str(folder / f"{name}.png"), synth.to_uint8(image))
    (folder / "w-4.png").write_bytes(b"\x89PNG\r\n\x1a\n" + b"\x00" * 40)
    recipe = root / "w.yaml"
    recipe.write_text(RECIPE)
    texts: dict[str, str] = {}
    return root, folder, recipe, texts


def _run(capsys, argv) -> tuple[int, str]:
    code = main(argv)
    got = capsys.readouterr()
    return code, got.out + got.err


def test_the_enums_hold_the_fixed_words():
    assert {v.value for v in PartVerdict} == PART_WORDS


def test_every_output_uses_the_chosen_words(outputs, capsys, monkeypatch):
    root, folder, recipe, texts = outputs
    parts = [str(folder / f"w-{i}.png") for i in (1, 2, 3, 4)]
    code, texts["inspect console"] = _run(capsys, ["inspect", str(recipe), *parts, "--out", str(root / "ins")])
    assert code == 2  # one unreadable image given to inspect: an input error (README, exit codes)
    archive = str(root / "archive")
    code, texts["batch console"] = _run(
        capsys, ["batch", str(recipe), str(folder), "--archive", archive, "--batch-id", "B1"]
    )
    assert code == 1
    key = root / "signer.key"
    monkeypatch.setenv("VOCAB_PASS", "a passphrase")
    assert _run(capsys, ["keygen", "--name", "A. Signer", "--out", str(key), "--passphrase-env", "VOCAB_PASS"])[0] == 0
    owner = root / "owner.key"
    assert _run(capsys, ["keygen", "--out", str(owner), "--no-passphrase"])[0] == 0
    code, texts["owner"] = _run(
        capsys, ["owner", "init", "--archive", archive, "--name", "M. QUALITY", "--key", str(owner)]
    )
    assert code == 0
    add = ["signers", "add", "--archive", archive, "--pub", f"{key}.pub", "--name", "A. SIGNER", "--role", "inspector"]
    code, texts["signers add"] = _run(capsys, [*add, "--by", str(owner)])
    assert code == 0
    for meaning in SIGNOFF_MEANINGS:
        sign = ["sign", "--archive", archive, "--batch-id", "B1", "--key", str(key), "--meaning", meaning]
        code, texts[f"sign {meaning}"] = _run(capsys, [*sign, "--passphrase-env", "VOCAB_PASS"])
        assert code == 0
    disposition = ["disposition", "--archive", archive, "--batch-id", "B1", "--part", "w-4.png"]
    code, texts["disposition"] = _run(
        capsys, [*disposition, "--decision", "re-inspect", "--key", str(key), "--passphrase-env", "VOCAB_PASS"]
    )
    assert code == 0
    code, texts["show"] = _run(capsys, ["show", "--archive", archive])
    code, texts["show batch"] = _run(
        capsys, ["show", "--archive", archive, "--batch-id", "B1", "--out", str(root / "x")]
    )
    assert code == 0
    code, texts["verify"] = _run(capsys, ["verify", "--archive", archive])
    assert code == 0
    for command in ("inspect", "batch", "sign", "show", "demo", "check", "disposition", "verify"):
        with pytest.raises(SystemExit, match="0"):
            main([command, "--help"])
        texts[f"{command} --help"] = capsys.readouterr().out

    exported = root / "x"
    results = [json.loads(p.read_text()) for p in sorted(exported.glob("*.json"))]
    results += [json.loads(p.read_text()) for p in sorted((root / "ins").glob("*.json"))]
    judged = [r for r in results if r["schema"] == "surfinspect.part-result/1"]
    assert {r["verdict"] for r in judged} == PART_WORDS
    assert {r["verdict"] for r in results if r not in judged} == {NOT_INSPECTED}  # the archive's record of w-4
    assert {g["verdict"] for r in judged for g in r["regions"]} == {"pass", "fail", "no-texture"}
    assert all(g["lay_symbol"] == "perpendicular" for r in judged for g in r["regions"])
    rows = list(csv.DictReader(io.StringIO((exported / "regions.csv").read_text())))
    assert {r["part_verdict"] for r in rows} == PART_WORDS | {NOT_INSPECTED}
    assert {r["region_verdict"] for r in rows} == REGION_WORDS | {""}
    assert "deviating_area_fraction" in rows[0] and not any("defect" in k for k in rows[0])

    for pdf in sorted(exported.glob("report*.pdf")) + [root / "ins" / "report.pdf"]:
        texts[f"{pdf.parent.name}/{pdf.name}"] = "\n".join(page.extract_text() for page in pypdf.PdfReader(pdf).pages)
    signed = [t for n, t in texts.items() if n.startswith("x/report.signed")]
    assert len(signed) == 3
    # the printed block shows the first sign-off (later ones are incremental PDF signatures, README);
    # show names every meaning
    assert all(SIGNOFF_MEANINGS[0].upper() in text for text in signed)
    assert all(meaning in texts["show batch"] for meaning in SIGNOFF_MEANINGS)
    batch_pdf = texts["x/report.pdf"]
    for word in ("ACCEPT", "REJECT", "REVIEW", "NOT-INSPECTED", "PASS", "FAIL", "NO-TEXTURE"):
        assert word in batch_pdf, word
    # the console and show name the unreadable part with the same word
    for name in ("batch console", "show", "show batch"):
        assert NOT_INSPECTED in texts[name], name
    assert "1 accept, 1 reject, 1 review, 1 not-inspected" in texts["inspect console"]

    for name, text in texts.items():
        found = [m.group(0) for m in FORBIDDEN.finditer(text)]
        assert not found, f"{name}: {found}: {[ln for ln in text.splitlines() if FORBIDDEN.search(ln)]}"
        # "error" is never a verdict: only an error message's own prefix may say it
        verdict_like = [
            ln for ln in text.splitlines() if re.search(r"\berror\b", ln) and "surfinspect: error:" not in ln
        ]
        assert not verdict_like, f"{name}: {verdict_like}"


def test_the_demo_uses_the_chosen_words(tmp_path, capsys):
    out = tmp_path / "demo"
    code, console = _run(capsys, ["demo", "--out", str(out)])
    assert code == 1
    texts = {"demo console": console}
    for pdf in sorted(out.glob("*/report.pdf")):
        texts[pdf.parent.name] = "\n".join(page.extract_text() for page in pypdf.PdfReader(pdf).pages)
    results = [json.loads(p.read_text()) for p in sorted(out.glob("*/*.json"))]
    assert len(texts) == 3 and len(results) == 8
    assert {r["verdict"] for r in results} == PART_WORDS
    assert {g["verdict"] for r in results for g in r["regions"]} == REGION_WORDS
    assert "4 accept, 3 reject, 1 review" in console
    for name, text in texts.items():
        found = [m.group(0) for m in FORBIDDEN.finditer(text)]
        assert not found, f"{name}: {found}: {[ln for ln in text.splitlines() if FORBIDDEN.search(ln)]}"
        assert not re.search(r"\berror\b", text), name
