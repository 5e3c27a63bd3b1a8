"""A demo archive for the review tests: the LW-220 demo parts run with ``surfinspect batch``, an owner and
an enrolled inspector, built once per session and copied for each test that writes."""

from __future__ import annotations

import shutil
from dataclasses import dataclass
from pathlib import Path

from surfinspect.cli.main import main

ROOT = Path(__file__).resolve().parents[2]
PASSPHRASE = "grain-is-vertical"  # the test inspector's passphrase (test data)
OWNER_PASSPHRASE = "owner-of-the-archive"
BATCH_ID = "LW-220-DEMO"


@dataclass(frozen=True)
class DemoArchive:
    root: Path
    keys: Path  # the station's key folder: inspector.key, inspector.key.pub
    owner_key: Path
    batch_id: str = BATCH_ID

    def copy(self, dest: Path) -> "DemoArchive":
        shutil.copytree(self.root, dest / "archive")
        shutil.copytree(self.keys, dest / "keys")
        return DemoArchive(dest / "archive", dest / "keys", self.owner_key, self.batch_id)


def run_cli(args: list[str], monkeypatch=None, env: dict | None = None) -> int:
    import os

    saved = {k: os.environ.get(k) for k in (env or {})}
    os.environ.update(env or {})
    try:
        return main(args)
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v


def build_demo_archive(base: Path) -> DemoArchive:
    images = base / "images"
    images.mkdir()
    for p in sorted((ROOT / "demo_parts").glob("lw-220-*.png")):
        shutil.copy(p, images / p.name)
    archive, keys, owner_dir = base / "archive", base / "keys", base / "owner"
    keys.mkdir()
    owner_dir.mkdir()
    env = {"RV_PASS": PASSPHRASE, "RV_OWNER": OWNER_PASSPHRASE}
    recipe = str(ROOT / "recipes" / "lw-220-wall-panel.yaml")
    assert (
        run_cli(["-q", "batch", recipe, str(images), "--archive", str(archive), "--batch-id", BATCH_ID, "--jobs", "2"])
        == 1
    )
    owner_key = owner_dir / "qm.key"
    assert run_cli(["-q", "keygen", "--out", str(owner_key), "--passphrase-env", "RV_OWNER"], env=env) == 0
    assert run_cli(["-q", "owner", "init", "--archive", str(archive), "--name", "M. QUALITY", "--key", str(owner_key),
                    "--passphrase-env", "RV_OWNER"], env=env) == 0  # fmt: skip
    person = keys / "inspector.key"
    assert run_cli(["-q", "keygen", "--out", str(person), "--passphrase-env", "RV_PASS"], env=env) == 0
    assert run_cli(["-q", "signers", "add", "--archive", str(archive), "--pub", f"{person}.pub", "--name", "R. OSTERMANN",
                    "--role", "inspector", "--by", str(owner_key), "--passphrase-env", "RV_OWNER"], env=env) == 0  # fmt: skip
    return DemoArchive(archive, keys, owner_key)
