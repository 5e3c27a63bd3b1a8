"""Signed acts: the owner, the signer register, sign-off and disposition refuse what they must."""

from __future__ import annotations

import json
import os

import pytest
from archive_helpers import BATCH, PARTS, RECIPE_TEXT, Keys, fill_batch, full_archive, public, render, sql, write_images

from surfinspect.archive import signatures, signing
from surfinspect.archive import store as arc
from surfinspect.archive.verify import verify_archive
from surfinspect.cli import main
from surfinspect.errors import InputError


@pytest.fixture
def unsigned(tmp_path):
    """A finished batch in an archive with a register, no sign-off yet."""
    return full_archive(tmp_path, signoff=False, disposition=False)


def test_nothing_is_signed_before_the_archive_has_an_owner(tmp_path):
    recipe = tmp_path / "r.yaml"
    recipe.write_text(RECIPE_TEXT)
    fill_batch(tmp_path / "ar", "B1", write_images(tmp_path / "in", PARTS), recipe)
    with arc.Archive(tmp_path / "ar") as a:
        with pytest.raises(InputError, match="nothing can be signed in this archive until it has an owner"):
            signatures.sign_batch(a, "B1", signing.SigningKey.generate(), meaning="released", render_edition=render)
        assert a.signoffs("B1") == []


def test_sign_refuses_an_unenrolled_key(unsigned):
    root, _ = unsigned
    with arc.Archive(root) as a:
        with pytest.raises(InputError, match=r"--key: this key \(fingerprint .*\) is not enrolled in the archive's"):
            signatures.sign_batch(a, BATCH, signing.SigningKey.generate(), meaning="released", render_edition=render)


def test_the_owners_key_is_told_apart_from_an_unenrolled_one(unsigned):
    # the owner certifies the register and signs nothing else; saying "not enrolled" to it while
    # `signers add` says "already enrolled" left a new owner going round in circles
    root, keys = unsigned
    with arc.Archive(root) as a:
        with pytest.raises(InputError, match=r"--key: this is the archive owner's key \(M\. QUALITY.*keygen"):
            signatures.sign_batch(a, BATCH, keys.owner, meaning="released", render_edition=render)
        with pytest.raises(InputError, match=r"--pub: this is the archive owner's key .*make a separate key"):
            signatures.enrol_signer(a, keys.owner, public(keys.owner), "M. QUALITY 2", "quality manager")
        assert a.signoffs(BATCH) == []


def test_sign_refuses_a_revoked_key_and_keeps_what_it_signed_before(unsigned):
    root, keys = unsigned
    with arc.Archive(root) as a:
        signatures.sign_batch(a, BATCH, keys.person, meaning="examined", render_edition=render)
        signatures.revoke_signer(a, keys.owner, keys.person.fingerprint[:12], "left the company")
        with pytest.raises(InputError, match=r"the key of R\. OSTERMANN .* was revoked at .*signs nothing any more"):
            signatures.sign_batch(a, BATCH, keys.person, meaning="released", render_edition=render)
        with pytest.raises(InputError, match="was already revoked"):
            signatures.revoke_signer(a, keys.owner, keys.person.fingerprint, "")
    report = verify_archive(root)
    assert report.problems == []  # the sign-off made before the revocation still holds


def test_station_key_signs_heads_only(unsigned):
    root, keys = unsigned
    with arc.Archive(root) as a:
        with pytest.raises(InputError, match="enrolled as a station key; it signs chain heads only"):
            signatures.sign_batch(a, BATCH, keys.station, meaning="released", render_edition=render)


def test_printed_name_comes_from_the_register_not_the_key_file(unsigned):
    root, keys = unsigned
    assert keys.person.label == "forged label"
    with arc.Archive(root) as a:
        row = signatures.sign_batch(a, BATCH, keys.person, meaning="released", render_edition=render)
        assert row.signer_name == "R. OSTERMANN" == json.loads(row.record_json)["signer_name"]
        edition = a.read_object(row.signed_report_sha256)
        assert b"/Reason (released)" in edition  # the PDF signature's reason (tests/archive/test_pdf_signature.py)


@pytest.mark.parametrize(
    "at, says",
    [
        ("2001-01-01T00:00:00Z", "is before"),
        ("not a time at all", "is not a UTC time"),
        ("2024-05-06 08:00:00", "is not a UTC time"),
        ("2999-01-01T00:00:00Z", "lies in the future"),
    ],
)
def test_sign_refuses_a_time_that_is_not_real(unsigned, at, says):
    root, keys = unsigned
    with arc.Archive(root) as a:
        with pytest.raises(InputError, match=f"signed_at_utc: .*{says}"):
            signatures.sign_batch(a, BATCH, keys.person, meaning="released", render_edition=render, signed_at_utc=at)


def test_sign_refuses_a_tampered_index(unsigned):
    root, keys = unsigned
    sql(root, "UPDATE parts SET verdict = 'accept' WHERE part_key = ?", (PARTS[1],))
    with arc.Archive(root) as a:
        with pytest.raises(
            InputError, match=r"signing refused: the archive does not verify: parts row .*verdict is 'accept'"
        ):
            signatures.sign_batch(a, BATCH, keys.person, meaning="released", render_edition=render)
        assert a.signoffs(BATCH) == []


def test_sign_refuses_a_changed_report_file_of_the_batch(unsigned):
    root, keys = unsigned
    with arc.Archive(root) as a:
        path = a.object_path(a.batch(BATCH).report_sha256)
    os.chmod(path, 0o644)
    path.write_bytes(b"%PDF another report")
    with arc.Archive(root) as a:
        with pytest.raises(InputError, match=r"signing refused: .*stored file objects/.* \(batch report of batch"):
            signatures.sign_batch(a, BATCH, keys.person, meaning="released", render_edition=render)


def test_old_meanings_are_refused_and_new_ones_share_no_verdict_word(unsigned):
    root, keys = unsigned
    verdict_words = {"accept", "reject", "review", "pass", "fail", "no-texture", "no", "texture"}
    assert not {w for m in signatures.MEANINGS for w in m.split("-")} & verdict_words
    with arc.Archive(root) as a:
        with pytest.raises(
            InputError, match=r"--meaning: unknown meaning \(got 'approved', allowed released, withheld, examined\)"
        ):
            signatures.sign_batch(a, BATCH, keys.person, meaning="approved", render_edition=render)


def test_register_is_set_up_by_the_owner_only(unsigned):
    root, keys = unsigned
    stranger = signing.SigningKey.generate()
    with arc.Archive(root) as a:
        with pytest.raises(InputError, match="the archive already has an owner .*; the owner is set once"):
            signatures.init_owner(a, stranger, "SOMEONE")
        with pytest.raises(InputError, match=r"--by: this key .* is not the archive owner's key \(M\. QUALITY"):
            signatures.enrol_signer(a, stranger, public(stranger), "SOMEONE", "inspector")
        with pytest.raises(InputError, match="is already enrolled for R. OSTERMANN; a key is enrolled once"):
            signatures.enrol_signer(a, keys.owner, public(keys.person), "R. OSTERMANN 2", "inspector")
        with pytest.raises(InputError, match="'R. OSTERMANN' is already enrolled with key"):
            signatures.enrol_signer(a, keys.owner, public(stranger), "R. OSTERMANN", "inspector")
        with pytest.raises(InputError, match=r"--name: control/format character U\+202E"):
            signatures.enrol_signer(a, keys.owner, public(stranger), "A\u202eB", "inspector")
        with pytest.raises(InputError, match=r"--key-fingerprint: 'abc' names 0 enrolled key"):
            signatures.revoke_signer(a, keys.owner, "abc", "")


def test_disposition_is_signed_audited_and_verified(unsigned):
    root, keys = unsigned
    with arc.Archive(root) as a:
        with pytest.raises(InputError, match="is accept; a disposition is for a part judged reject or review"):
            signatures.record_disposition(a, BATCH, PARTS[0], keys.person, decision="scrap")
        with pytest.raises(InputError, match=r"--decision: unknown decision \(got 'bin'"):
            signatures.record_disposition(a, BATCH, PARTS[1], keys.person, decision="bin")
        with pytest.raises(InputError, match="station key"):
            signatures.record_disposition(a, BATCH, PARTS[1], keys.station, decision="scrap")
        row = signatures.record_disposition(a, BATCH, PARTS[2], keys.person, decision="re-inspect", comment="re-shoot")
        assert (row.decision, row.signer_name, row.part_key) == ("re-inspect", "R. OSTERMANN", PARTS[2])
    assert verify_archive(root).problems == []
    sql(root, "UPDATE dispositions SET decision = 'use-as-is'")
    problems = verify_archive(root).problems
    assert any("the index shows decision 'use-as-is', the signed record says 're-inspect'" in p for p in problems)


# ------------------------------------------------------------- the commands


def _keygen(tmp_path, name, *extra):
    path = tmp_path / f"{name}.key"
    assert main(["-q", "keygen", "--out", str(path), *extra]) == 0
    return path


def test_keygen_encrypts_by_default_and_never_takes_a_passphrase_from_argv(tmp_path, monkeypatch, capsys):
    monkeypatch.setattr("sys.stdin", open(os.devnull))  # no terminal attached
    assert main(["keygen", "--out", str(tmp_path / "k.key")]) == 2
    assert "no terminal to ask on; give --passphrase-env VAR, or --no-passphrase" in capsys.readouterr().err
    assert not (tmp_path / "k.key").exists()
    monkeypatch.setenv("PASS", "grain runs up")
    key = _keygen(tmp_path, "k", "--passphrase-env", "PASS")
    assert json.loads(key.read_text())["passphrase_protected"] is True
    plain = _keygen(tmp_path, "plain", "--no-passphrase")
    assert json.loads(plain.read_text())["passphrase_protected"] is False
    assert main(["keygen", "--out", str(tmp_path / "x.key"), "--passphrase", "secret"]) == 2


def test_keygen_asks_twice_on_a_terminal(tmp_path, monkeypatch):
    import getpass

    answers = iter(["one", "two"])
    monkeypatch.setattr("surfinspect.cli._keys._terminal", lambda: True)
    monkeypatch.setattr(getpass, "getpass", lambda prompt="": next(answers))
    assert main(["-q", "keygen", "--out", str(tmp_path / "k.key")]) == 2  # the two entries differ
    answers = iter(["same", "same", "same"])
    assert main(["-q", "keygen", "--out", str(tmp_path / "k.key")]) == 0
    assert signing.load_signing_key(tmp_path / "k.key", passphrase=b"same").fingerprint


def test_a_protected_key_is_opened_with_a_no_echo_prompt_on_a_terminal(tmp_path, monkeypatch):
    import getpass

    from surfinspect.cli import _keys

    path = tmp_path / "k.key"
    key = signing.write_key_pair(path, "", passphrase=b"grain")
    prompts = []
    monkeypatch.setattr(getpass, "getpass", lambda prompt="": prompts.append(prompt) or "grain")
    monkeypatch.setattr(_keys, "_terminal", lambda: False)
    with pytest.raises(InputError, match="passphrase-protected and no terminal is attached; give --passphrase-env"):
        _keys.open_key(str(path), None, "--key")
    monkeypatch.setattr(_keys, "_terminal", lambda: True)
    assert _keys.open_key(str(path), None, "--key").fingerprint == key.fingerprint
    assert prompts == [f"passphrase for {path}: "]


def test_register_commands_and_sign_refusals(tmp_path, monkeypatch, capsys):
    recipe = tmp_path / "r.yaml"
    recipe.write_text(RECIPE_TEXT)
    root = tmp_path / "ar"
    monkeypatch.setenv("PASS", "lay runs up")
    owner = _keygen(tmp_path, "owner", "--passphrase-env", "PASS")
    person = _keygen(tmp_path, "person", "--passphrase-env", "PASS", "--name", "FORGED NAME")
    init = ["-q", "owner", "init", "--archive", str(root), "--passphrase-env", "PASS"]
    assert main([*init, "--name", "M. QUALITY", "--key", str(owner)]) == 0
    assert main([*init, "--name", "X", "--key", str(person)]) == 2  # the owner is set once
    fill_batch(root, BATCH, write_images(tmp_path / "in", PARTS), recipe)
    sign = [
        "sign",
        "--archive",
        str(root),
        "--batch-id",
        BATCH,
        "--key",
        str(person),
        "--meaning",
        "released",
        "--passphrase-env",
        "PASS",
    ]
    capsys.readouterr()
    assert main(sign) == 2
    assert "is not enrolled in the archive's signer register" in capsys.readouterr().err
    add = [
        "signers",
        "add",
        "--archive",
        str(root),
        "--pub",
        f"{person}.pub",
        "--name",
        "R. OSTERMANN",
        "--role",
        "inspector",
    ]
    assert main(["-q", *add, "--by", str(person), "--passphrase-env", "PASS"]) == 2  # not the owner's key
    assert main(["-q", *add, "--by", str(owner), "--passphrase-env", "PASS"]) == 0
    assert main(["signers", "list", "--archive", str(root)]) == 0
    listing = capsys.readouterr().out
    assert "owner: M. QUALITY" in listing and "R. OSTERMANN" in listing and "active" in listing
    os.chmod(person, 0o644)
    assert main(sign) == 2
    assert f"run: chmod 600 {person}" in capsys.readouterr().err
    os.chmod(person, 0o600)
    assert main(sign) == 0
    out = capsys.readouterr()
    assert "released by R. OSTERMANN" in out.out and "calls its holder 'FORGED NAME'" in out.err
    fingerprint = signing.load_signing_key(person, passphrase=b"lay runs up").fingerprint
    assert (
        main(
            [
                "-q",
                "signers",
                "revoke",
                "--archive",
                str(root),
                "--key-fingerprint",
                fingerprint[:10],
                "--by",
                str(owner),
                "--passphrase-env",
                "PASS",
            ]
        )
        == 0
    )
    assert main(sign) == 2
    assert "was revoked at" in capsys.readouterr().err
    assert main(["-q", "verify", "--archive", str(root)]) == 0


def test_batch_with_a_station_key_signs_its_close(tmp_path, monkeypatch):
    recipe = tmp_path / "r.yaml"
    recipe.write_text(RECIPE_TEXT)
    keys = Keys(signing.SigningKey.generate(), signing.SigningKey.generate(), signing.SigningKey.generate())
    root = tmp_path / "ar"
    from archive_helpers import make_register

    make_register(root, keys)
    stranger = signing.SigningKey.generate()
    with pytest.raises(InputError, match="--station-key: this key .* is not enrolled"):
        fill_batch(root, "B0", write_images(tmp_path / "in", PARTS), recipe, station_key=stranger)
    fill_batch(root, "B1", write_images(tmp_path / "in", PARTS), recipe, station_key=keys.station)
    report = verify_archive(root)
    assert report.problems == [] and not any("without a station key" in w for w in report.warnings)


def test_a_signoff_survives_parts_recorded_meanwhile_but_not_a_rewritten_history(unsigned, tmp_path, monkeypatch):
    """Signing takes seconds (verify, the PDF); a running batch records parts meanwhile into the same archive."""
    root, keys = unsigned
    recipe = tmp_path / "r2.yaml"
    recipe.write_text(RECIPE_TEXT)
    images = write_images(tmp_path / "in2", ["Q1.png", "Q2.png", "Q3.png"], seed=3)

    def render_while_a_batch_runs(signoff):
        fill_batch(root, "B2", images, recipe, finish=False)
        return render(signoff)

    with arc.Archive(root) as a:
        row = signatures.sign_batch(a, BATCH, keys.person, meaning="released", render_edition=render_while_a_batch_runs)
    assert row.signoff_no == 1 and verify_archive(root).problems == []

    # sign-off 2 extends the stored edition (no rendering): the history is rewritten while its PDF is signed
    real_sign_pdf = signatures.sign_pdf

    def sign_pdf_while_history_is_rewritten(*args, **kwargs):
        with arc.Archive(root) as other:  # another process, at the head the record was signed over
            seq = other.chain_head()[0]
        # change the first hex digit (a fixed '0' would change nothing when the hash starts with 0)
        flip = "CASE substr(sha256, 1, 1) WHEN '0' THEN '1' ELSE '0' END || substr(sha256, 2)"
        sql(root, f"UPDATE events SET sha256 = {flip} WHERE seq = ?", (seq,))
        return real_sign_pdf(*args, **kwargs)

    with arc.Archive(root) as a:
        monkeypatch.setattr(signatures, "sign_pdf", sign_pdf_while_history_is_rewritten)
        with pytest.raises(InputError, match="the archive changed while the record was being signed"):
            signatures.sign_batch(a, BATCH, keys.person, meaning="released", render_edition=render)
        assert len(a.signoffs(BATCH)) == 1
