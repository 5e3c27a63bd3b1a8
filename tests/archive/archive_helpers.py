"""Small generated archives for the archive tests: images, hand-made results, keys and a register."""

from __future__ import annotations

import contextlib
import hashlib
import sqlite3
from dataclasses import dataclass

import numpy as np
import pytest

from surfinspect import results
from surfinspect.archive import signatures, signing
from surfinspect.archive import store as arc

RECIPE_TEXT = "recipe: lw-220-wall-panel\nrevision: 3\nregions: []\n"
BATCH = "LW220-0506"
PARTS = ["LW-220-001.png", "LW-220-002.png", "LW-220-003.png"]


def region(name: str, verdict: results.RegionVerdict, lay: float | None) -> results.RegionResult:
    return results.RegionResult(
        name=name,
        expected_lay_deg=90.0,
        tolerance_deg=3.0,
        lay_deg=lay,
        deviation_deg=None if lay is None else lay - 90.0,
        uncertainty_deg=None if lay is None else 0.2,
        coherence=0.61 if lay is not None else 0.01,
        deviating_area_fraction=0.0,
        patches=(),
        histogram=results.Histogram((0.0, 90.0, 180.0), (0.25, 0.75)),
        verdict=verdict,
        reasons=() if verdict is results.RegionVerdict.PASS else ("made by hand for the test",),
    )


def result_json(image_path, recipe_sha: str, regions) -> bytes:
    data = image_path.read_bytes()
    part = results.PartResult(
        name=image_path.stem,
        image=results.ImageInfo(str(image_path), hashlib.sha256(data).hexdigest(), 32, 32, 8),
        recipe=results.RecipeInfo("lw-220-wall-panel", 3, recipe_sha),
        verdict=results.part_verdict([r.verdict for r in regions]),
        regions=tuple(regions),
        inspected_at="2024-05-06T07:08:09Z",
        engine_version="0.1.0",
    )
    return results.dumps(part).encode("utf-8")


def write_images(folder, names, seed=0):
    import cv2

    rng = np.random.default_rng(seed)
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for name in names:
        path = folder / name
        cv2.imwrite(str(path), rng.integers(0, 256, (32, 32), dtype=np.uint8))
        paths.append(path)
    return paths


def fill_batch(root, batch_id, images, recipe_path, *, finish=True, station_key=None):
    """Record a batch of hand-made results: part 0 passes, part 1 fails, the last is an unreadable file."""
    recipe_sha = hashlib.sha256(recipe_path.read_bytes()).hexdigest()
    with arc.Archive(root, create=True) as a:
        plan = a.start_batch(
            batch_id,
            recipe_name="lw-220-wall-panel",
            recipe_revision=3,
            recipe_path=recipe_path,
            recipe_sha256=recipe_sha,
            parts=[(p.name, hashlib.sha256(p.read_bytes()).hexdigest()) for p in images],
            operator="K. LINDQVIST",
            station="line-2",
        )
        for i, path in enumerate(images):
            if path.name not in plan.pending:
                continue
            if i == len(images) - 1 and len(images) > 2:
                body = arc.error_record_json(
                    path.name, hashlib.sha256(path.read_bytes()).hexdigest(), f"{path}: not a readable image"
                )
                a.record_part(batch_id, path.name, result_json=body, image_path=path)
                continue
            verdict = results.RegionVerdict.PASS if i % 2 == 0 else results.RegionVerdict.FAIL
            regions = [
                region("face", verdict, 90.4 if i % 2 == 0 else 97.9),
                region("edge", results.RegionVerdict.PASS, 89.8),
            ]
            a.record_part(
                batch_id,
                path.name,
                result_json=result_json(path, recipe_sha, regions),
                image_path=path,
                overlay_png=b"png of " + path.name.encode(),
            )
        if finish:
            a.finish_batch(
                batch_id,
                report_pdf=b"%PDF report " + batch_id.encode(),
                regions_csv=b"csv\n",
                report_generated_at="2024-05-06T08:00:00Z",
                station_key=station_key,
            )


@dataclass
class Keys:
    owner: signing.SigningKey
    person: signing.SigningKey
    station: signing.SigningKey


def public(key: signing.SigningKey) -> signing.PublicKeyInfo:
    return signing.PublicKeyInfo("", key.public_key_raw)


def make_register(root, keys: Keys) -> None:
    with arc.Archive(root, create=True) as a:
        signatures.init_owner(a, keys.owner, "M. QUALITY")
        signatures.enrol_signer(a, keys.owner, public(keys.person), "R. OSTERMANN", "inspector")
        signatures.enrol_signer(a, keys.owner, public(keys.station), "LINE 2", "station")


def render(signoff: results.SignOff) -> bytes:
    """A one-line archival PDF standing in for the signed edition (the sign-off then PDF-signs it)."""
    import io

    from surfinspect.pdfa.document import DocumentInfo, archival_canvas, finish_archival

    info = DocumentInfo(title=f"report {BATCH}")
    buf = io.BytesIO()
    c = archival_canvas(buf, info)
    c.drawString(40, 800, f"signed by {signoff.signer_name} {signoff.meaning}")
    c.showPage()
    c.save()
    return finish_archival(buf.getvalue(), info)


def full_archive(tmp_path, *, station=True, signoff=True, disposition=True, root=None):
    """An archive with a register, one batch (accept, reject, error) closed by a station key, a sign-off, a disposition.

    ``root``: where to make it (a :class:`Site`); by default the folder ``tmp_path / "archive"``.
    """
    recipe_path = tmp_path / "lw-220.yaml"
    recipe_path.write_text(RECIPE_TEXT)
    images = write_images(tmp_path / "in", PARTS)
    root = tmp_path / "archive" if root is None else root
    keys = Keys(
        signing.SigningKey.generate(), signing.SigningKey.generate("forged label"), signing.SigningKey.generate()
    )
    make_register(root, keys)
    fill_batch(root, BATCH, images, recipe_path, station_key=keys.station if station else None)
    with arc.Archive(root) as a:
        if signoff:
            signatures.sign_batch(a, BATCH, keys.person, meaning="released", comment="lot 17", render_edition=render)
        if disposition:
            signatures.record_disposition(a, BATCH, PARTS[1], keys.person, decision="rework", comment="rebrush")
    return root, keys


class Site(str):
    """An archive location as ``--archive`` takes it (a folder, or a PostgreSQL URL) that also behaves as
    the folder the stored files hang from (``site / "objects"``, ``site.parent``), so that one test body
    tampers with either backend. ``server`` and ``dbname`` are set for PostgreSQL."""

    def __new__(cls, folder, server=None, dbname=None):
        text = str(folder) if server is None else server.archive_url(dbname, folder / "objects")
        site = super().__new__(cls, text)
        site.folder, site.server, site.dbname = folder, server, dbname
        return site

    @property
    def is_postgres(self) -> bool:
        return self.server is not None

    @property
    def parent(self):
        return self.folder.parent

    def __truediv__(self, other):
        return self.folder / other

    @contextlib.contextmanager
    def connect(self):
        """A raw connection to the index, outside the tool (as a person with SQL access would tamper)."""
        if self.is_postgres:
            db = self.server.psql_conn(self.dbname)
        else:
            db = sqlite3.connect(self.folder / arc.INDEX_NAME)
        try:
            yield db
        finally:
            db.close()

    def statement(self, text: str) -> str:
        return text.replace("?", "%s") if self.is_postgres else text


def sql(root, statement, params=()):
    site = root if isinstance(root, Site) else Site(root)
    with site.connect() as db:
        if site.is_postgres:
            with db.transaction():
                db.execute(site.statement(statement), params)
        else:
            with db:
                db.execute(statement, params)


def query(root, statement, params=()):
    site = root if isinstance(root, Site) else Site(root)
    with site.connect() as db:
        return [tuple(r) for r in db.execute(site.statement(statement), params).fetchall()]


#: Archive tests that run against both index backends; PostgreSQL's skip, saying why, without a server.
BACKENDS = ["sqlite", pytest.param("postgres", marks=pytest.mark.postgres)]


def site_for(request, folder, backend) -> Site:
    """A new, empty archive location of ``backend`` (a database dropped after the test for PostgreSQL)."""
    if backend == "sqlite":
        return Site(folder)
    server = request.getfixturevalue("pg_server")
    name = server.create_database()
    request.addfinalizer(lambda: server.drop_database(name))
    return Site(folder, server, name)
