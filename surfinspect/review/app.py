"""The review station's routes: thin views over the archive, two signed write actions.

Objects are reached by the batch id (checked against the allowed form of a
batch id, then looked up in the index) and the part's position in the batch;
downloads are the objects the index names for that batch or part. No path
from a request reaches the file system (static files are served by
Starlette's ``StaticFiles`` from this package's folder, which refuses paths
outside it).
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import jinja2
from starlette.applications import Starlette
from starlette.concurrency import run_in_threadpool
from starlette.exceptions import HTTPException
from starlette.middleware import Middleware
from starlette.requests import Request
from starlette.responses import RedirectResponse, Response
from starlette.routing import Mount, Route
from starlette.staticfiles import StaticFiles
from starlette.templating import Jinja2Templates

from ..archive import signatures
from ..archive import store as archive
from ..archive.location import open_archive
from ..errors import InputError
from ..results import CAUTION
from . import actions, media, pages
from .recipe_routes import RecipeViews
from .security import CSRF_FIELD, SESSION_COOKIE, BodyLimit, Csrf, FailureThrottle, SecurityHeaders

__all__ = ["ReviewConfig", "create_app"]

HERE = Path(__file__).parent
_BATCH_ID = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$")
_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}$")


@dataclass(frozen=True)
class ReviewConfig:
    archive_root: str | Path | None  # a folder or a PostgreSQL URL, as --archive takes it; None: the recipe page only
    read_only: bool = False
    key_dir: Path | None = None
    remote: bool = False  # served on an address other than loopback
    recipe_image: Path | None = None  # the recipe page's reference photo (--recipe-image)
    recipe_file: Path | None = None  # an existing recipe to edit on it (--recipe)
    recipe_dir: Path | None = None  # where the recipe page saves (the folder of --recipe, else the current one)


def create_app(config: ReviewConfig, *, csrf_secret: bytes | None = None) -> Starlette:
    """The ASGI application over one archive."""
    env = jinja2.Environment(loader=jinja2.FileSystemLoader(str(HERE / "templates")), autoescape=True)
    templates = Jinja2Templates(env=env)
    templates.env.globals.update(looks=pages.VERDICT_LOOKS, verdicts=pages.VERDICTS, csrf_field=CSRF_FIELD)
    templates.env.globals["needs_disposition"] = pages.NEEDS_DISPOSITION
    templates.env.globals.update(meanings=signatures.MEANINGS, decisions=signatures.DECISIONS, config=config)
    templates.env.globals["caution"] = CAUTION
    templates.env.filters["angle"] = lambda v: "-" if v is None else f"{v:.2f}°"
    csrf = Csrf(csrf_secret)
    views = _Views(config, templates, csrf)
    recipes = RecipeViews(views)
    routes = [
        *recipes.routes(),
        Route("/", views.batches),
        Route("/batch/{batch_id}", views.batch),
        Route("/batch/{batch_id}/report.pdf", views.report),
        Route("/batch/{batch_id}/signed-{number:int}.pdf", views.signed_report),
        Route("/batch/{batch_id}/regions.csv", views.regions_csv),
        Route("/batch/{batch_id}/signoff", views.signoff, methods=["POST"]),
        Route("/batch/{batch_id}/part/{position:int}", views.part),
        Route("/batch/{batch_id}/part/{position:int}/overlay.png", views.overlay),
        Route("/batch/{batch_id}/part/{position:int}/thumb.png", views.thumb),
        Route("/batch/{batch_id}/part/{position:int}/result.json", views.result_json),
        Route("/batch/{batch_id}/part/{position:int}/disposition", views.disposition, methods=["POST"]),
        Mount("/static", app=StaticFiles(directory=str(HERE / "static")), name="static"),
    ]
    return Starlette(
        routes=routes,
        middleware=[Middleware(SecurityHeaders), Middleware(BodyLimit)],
        exception_handlers={HTTPException: views.http_error, Exception: views.server_error},
    )


class _Views:
    def __init__(self, config: ReviewConfig, templates: Jinja2Templates, csrf: Csrf):
        self.config = config
        self.templates = templates
        self.csrf = csrf
        self.throttle = FailureThrottle()
        # on another address than loopback the station's key folder is not offered: each act is done with
        # the person's own key file, uploaded with the form, and its passphrase
        self.key_dir = None if config.remote else config.key_dir

    # -- plumbing

    def _open(self) -> archive.Archive:
        if self.config.archive_root is None:
            raise HTTPException(404, "This station serves the recipe page only (it was started without --archive).")
        return open_archive(self.config.archive_root)

    def render(self, request: Request, name: str, context: dict, status: int = 200) -> Response:
        session = request.cookies.get(SESSION_COOKIE)
        fresh = session is None or len(session) > 128
        if fresh:
            session = Csrf.new_session()
        context = {**context, "csrf_token": self.csrf.token(session)}
        response = self.templates.TemplateResponse(request, name, context, status_code=status)
        response.headers["cache-control"] = "no-store"
        if fresh:
            response.set_cookie(SESSION_COOKIE, session, httponly=True, samesite="strict", path="/")
        return response

    @staticmethod
    def _batch_id(request: Request) -> str:
        batch_id = request.path_params["batch_id"]
        if not _BATCH_ID.match(batch_id):
            raise HTTPException(404, "There is no batch with that id in this archive.")
        return batch_id

    def _batch(self, arc: archive.Archive, request: Request) -> archive.BatchRow:
        row = arc.find_batch(self._batch_id(request))
        if row is None:
            raise HTTPException(404, "There is no batch with that id in this archive.")
        return row

    def _part(self, arc: archive.Archive, request: Request) -> archive.PartRow:
        batch = self._batch(arc, request)
        position = request.path_params["position"]
        for p in arc.parts(batch.batch_id):
            if p.position == position:
                return p
        raise HTTPException(404, f"Batch {batch.batch_id} has no part number {position}.")

    @staticmethod
    def _object(arc: archive.Archive, sha: str | None, media_type: str, filename: str | None = None) -> Response:
        if not sha:
            raise HTTPException(404, "This file is not in the archive (yet).")
        headers = {"cache-control": "private, max-age=31536000, immutable", "etag": f'"{sha}"'}
        if filename:
            headers["content-disposition"] = f'attachment; filename="{filename}"'
        return Response(arc.read_object(sha), media_type=media_type, headers=headers)

    # -- pages

    def batches(self, request: Request) -> Response:
        q = request.query_params.get("q", "")[:100]
        date_from = request.query_params.get("from", "")
        date_to = request.query_params.get("to", "")
        date_from = date_from if _DATE.match(date_from) else ""
        date_to = date_to if _DATE.match(date_to) else ""
        if self.config.archive_root is None:
            return self.render(
                request, "batches.html", {"rows": [], "q": q, "date_from": "", "date_to": "", "total": 0}
            )
        with self._open() as arc:
            rows = pages.batch_summaries(arc, q, date_from, date_to)
            total = len(arc.batches())
        context = {"rows": rows, "q": q, "date_from": date_from, "date_to": date_to, "total": total}
        return self.render(request, "batches.html", context)

    def batch(self, request: Request) -> Response:
        verdict = request.query_params.get("verdict", "")
        verdict = verdict if verdict in pages.VERDICTS else ""
        sort = "worst" if request.query_params.get("sort") == "worst" else "order"
        with self._open() as arc:
            context = self._batch_context(arc, request, verdict, sort)
        number = _done_number(request, "s")
        s = next((s for s in context["signoffs"] if s.signoff_no == number), None)
        context["done"] = f"sign-off #{s.signoff_no}, {s.meaning} by {s.signer_name}" if s else ""
        return self.render(request, "batch.html", context)

    def _batch_context(self, arc: archive.Archive, request: Request, verdict: str = "", sort: str = "order") -> dict:
        row = self._batch(arc, request)
        cards = pages.part_cards(arc, row.batch_id)
        charts, notes = pages.batch_charts(cards, pages.tolerances_of(arc, cards))
        signoffs = arc.signoffs(row.batch_id)
        return {
            "batch": row,
            "cards": pages.filter_and_sort(cards, verdict, sort),
            "all_count": len(cards),
            "counts": archive.verdict_counts([c.row for c in cards]),
            "verdict": verdict,
            "sort": sort,
            "charts": charts,
            "chart_notes": notes,
            "signoffs": signoffs,
            "newest_unsigned": pages.newest_unsigned(row, signoffs),
            "keys": [] if self.config.read_only else actions.folder_keys(arc, self.key_dir),
            "dispositions": [d for c in cards for d in c.dispositions],
        }

    def part(self, request: Request) -> Response:
        with self._open() as arc:
            row = self._part(arc, request)
            view = pages.part_view(arc, row.batch_id, row.position)
            keys = [] if self.config.read_only else actions.folder_keys(arc, self.key_dir)
            batch = arc.batch(row.batch_id)
        number = _done_number(request, "d")
        d = next((d for d in view.card.dispositions if d.disposition_no == number), None)
        done = f"disposition #{d.disposition_no}, {d.decision} by {d.signer_name}" if d else ""
        context = {"batch": batch, "view": view, "keys": keys, "done": done}
        return self.render(request, "part.html", context)

    # -- files

    def report(self, request: Request) -> Response:
        with self._open() as arc:
            b = self._batch(arc, request)
            return self._object(arc, b.report_sha256, "application/pdf", f"{b.batch_id}.report.pdf")

    def signed_report(self, request: Request) -> Response:
        number = request.path_params["number"]
        with self._open() as arc:
            b = self._batch(arc, request)
            s = next((s for s in arc.signoffs(b.batch_id) if s.signoff_no == number), None)
            if s is None:
                raise HTTPException(404, f"Batch {b.batch_id} has no sign-off number {number}.")
            return self._object(
                arc, s.signed_report_sha256, "application/pdf", f"{b.batch_id}.report.signed-{number}.pdf"
            )

    def regions_csv(self, request: Request) -> Response:
        with self._open() as arc:
            b = self._batch(arc, request)
            return self._object(arc, b.regions_csv_sha256, "text/csv; charset=utf-8", f"{b.batch_id}.regions.csv")

    def overlay(self, request: Request) -> Response:
        with self._open() as arc:
            return self._object(arc, self._part(arc, request).overlay_sha256, "image/png")

    def thumb(self, request: Request) -> Response:
        with self._open() as arc:
            p = self._part(arc, request)
            if not p.overlay_sha256:
                raise HTTPException(404, "This part has no picture (it could not be inspected).")
            data = media.thumbnail(arc, p.overlay_sha256)
        headers = {"cache-control": "private, max-age=31536000, immutable", "etag": f'"{p.overlay_sha256}-t"'}
        return Response(data, media_type="image/png", headers=headers)

    def result_json(self, request: Request) -> Response:
        with self._open() as arc:
            p = self._part(arc, request)
            stem = Path(p.part_key).stem
            return self._object(arc, p.result_sha256, "application/json", f"{stem}.json")

    # -- write actions

    async def _checked_form(self, request: Request):
        """The form of a POST whose CSRF token is valid; 403 before any field is used otherwise."""
        if self.config.read_only:
            raise HTTPException(403, "This review station is read-only; nothing can be recorded here.")
        try:
            form = await request.form(max_files=1, max_fields=16, max_part_size=64 * 1024)
        except HTTPException:
            raise
        except Exception:
            raise HTTPException(400, "The form could not be read.") from None
        if not self.csrf.valid(request.cookies.get(SESSION_COOKIE), str(form.get(CSRF_FIELD) or "")):
            raise HTTPException(403, "The form is out of date or did not come from this station; reload the page.")
        if self.throttle.blocked(_client(request)):
            raise HTTPException(429, "Too many failed key attempts from this computer; wait a few minutes.")
        upload = form.get("key_file")
        data = await upload.read(actions.MAX_KEY_BYTES + 1) if hasattr(upload, "read") else None
        fields = {k: str(v) for k, v in form.items() if isinstance(v, str)}
        return fields, data or None

    def _open_key(self, request: Request, arc: archive.Archive, fields: dict, upload: bytes | None):
        """The signer's key, opened with the passphrase typed; a failed attempt counts against the address."""
        try:
            return actions.open_key(
                arc,
                self.key_dir,
                fingerprint=fields.get("key", ""),
                upload=upload,
                passphrase=fields.get("passphrase", ""),
            )
        except InputError:
            self.throttle.failed(_client(request))
            raise

    async def disposition(self, request: Request) -> Response:
        return await self._act(request, self._disposition)

    async def _act(self, request: Request, do) -> Response:
        """Check the form (CSRF, throttle), then do the act in a worker thread (it hashes, signs, renders)."""
        fields, upload = await self._checked_form(request)
        return await run_in_threadpool(do, request, fields, upload)

    def _disposition(self, request: Request, fields: dict, upload: bytes | None) -> Response:
        with self._open() as arc:
            p = self._part(arc, request)
            try:
                key = self._open_key(request, arc, fields, upload)
                row = actions.record_disposition(
                    arc,
                    p.batch_id,
                    p.part_key,
                    key,
                    decision=fields.get("decision", ""),
                    comment=fields.get("comment", ""),
                )
            except InputError as exc:
                return self._refused(request, arc, p, exc, fields)
        target = f"/batch/{p.batch_id}/part/{p.position}?done=d{row.disposition_no}#disposition"
        return RedirectResponse(target, status_code=303)

    def _refused(self, request, arc, p, exc, fields) -> Response:
        view = pages.part_view(arc, p.batch_id, p.position)
        keys = actions.folder_keys(arc, self.key_dir)
        context: dict = {
            "batch": arc.batch(p.batch_id),
            "view": view,
            "keys": keys,
            "error": "; ".join(exc.problems),
            "form": {k: v for k, v in fields.items() if k in ("decision", "comment", "key")},
        }
        return self.render(request, "part.html", context, status=400)

    async def signoff(self, request: Request) -> Response:
        return await self._act(request, self._signoff)

    def _signoff(self, request: Request, fields: dict, upload: bytes | None) -> Response:
        with self._open() as arc:
            b = self._batch(arc, request)
            try:
                key = self._open_key(request, arc, fields, upload)
                row = actions.sign_batch(
                    arc, b.batch_id, key, meaning=fields.get("meaning", ""), comment=fields.get("comment", "")
                )
            except InputError as exc:
                return self._signoff_refused(request, arc, exc, fields)
        return RedirectResponse(f"/batch/{b.batch_id}?done=s{row.signoff_no}#signoff", status_code=303)

    def _signoff_refused(self, request: Request, arc: archive.Archive, exc: InputError, fields: dict) -> Response:
        """The batch page again with the reason and what was typed (never the passphrase)."""
        context = self._batch_context(arc, request)
        context["error"] = "; ".join(exc.problems)
        context["form"] = {k: v for k, v in fields.items() if k in ("meaning", "comment", "key")}
        return self.render(request, "batch.html", context, status=400)

    # -- errors

    async def http_error(self, request: Request, exc: HTTPException) -> Response:
        sentences = {404: "There is nothing at this address.", 405: "This address does not take that kind of request."}
        sentence = exc.detail if exc.detail and exc.detail != _default_phrase(exc.status_code) else None
        sentence = sentence or sentences.get(exc.status_code, "The request could not be served.")
        return self.render(request, "error.html", {"status": exc.status_code, "sentence": sentence}, exc.status_code)

    async def server_error(self, request: Request, exc: Exception) -> Response:
        sentence = "Something went wrong while reading the archive; run `surfinspect verify` on it to see what."
        return self.templates.TemplateResponse(
            request, "error.html", {"status": 500, "sentence": sentence, "csrf_token": ""}, status_code=500
        )


def _default_phrase(status: int) -> str:
    from http import HTTPStatus

    try:
        return HTTPStatus(status).phrase
    except ValueError:
        return ""


def _client(request: Request) -> str:
    return request.client.host if request.client else "unknown"


def _done_number(request: Request, letter: str) -> int | None:
    """The number of the act just recorded (``?done=s3``): the page shows it from the archive, not from the URL."""
    done = request.query_params.get("done", "")
    return int(done[1:]) if len(done) < 8 and done[:1] == letter and done[1:].isdigit() else None
