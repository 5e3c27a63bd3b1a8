"""The recipe page's routes: the page, its reference photo, and three JSON actions (check, preview, save).

References are held in memory and reached by their SHA-256 only: the one
given with ``--recipe-image``, and the photos of archived parts opened with
"write a recipe on this photo" (the archive's object of that hash). The
JSON actions are POSTs with the CSRF token in a header, a JSON body (under
the station's body limit) and no path: a saved recipe goes into the
station's recipe folder under a file name checked against
:data:`recipe_page.FILE_NAME`.
"""

from __future__ import annotations

import json
import threading
from collections import OrderedDict
from pathlib import Path

from starlette.concurrency import run_in_threadpool
from starlette.exceptions import HTTPException
from starlette.requests import Request
from starlette.responses import JSONResponse, Response
from starlette.routing import Route

from ..errors import InputError, RecipeError
from . import recipe_page
from .security import SESSION_COOKIE

CSRF_HEADER = "x-csrf-token"
#: Archived photos kept in memory besides the configured reference (each holds its pixels as float32).
KEEP_ARCHIVED = 2
_SHA = set("0123456789abcdef")


def _comments(body: dict) -> list[str]:
    """The leading comment lines the page sends back (those of the recipe it loaded): printable, bounded."""
    comments = body.get("comments")
    if not isinstance(comments, list):
        return []
    return [c for c in (str(c)[:200] for c in comments[:20]) if recipe_page.printable(c)]


class Refused(Exception):
    """A JSON action refused before any work: answered as ``{"error": sentence}`` with ``status``."""

    def __init__(self, status: int, sentence: str):
        super().__init__(sentence)
        self.status = status
        self.sentence = sentence


def json_action(handler):
    """Answer a refused JSON action with its sentence as JSON (the page shows it), never an HTML page."""

    async def run(self, request: Request) -> Response:
        try:
            return await handler(self, request)
        except Refused as exc:
            return JSONResponse({"error": exc.sentence, "problems": []}, status_code=exc.status)
        except Exception:  # an answer the page can show, never a traceback (the server logs nothing secret)
            sentence = "The station could not do this (an internal error); nothing was saved. Reload the page."
            return JSONResponse({"error": sentence, "problems": []}, status_code=500)

    return run


class RecipeViews:
    """The recipe page over the configured reference (and archived part photos)."""

    def __init__(self, views):
        self.views = views  # app._Views: config, templates, csrf, render, archive access
        config = views.config
        self.folder = Path(config.recipe_dir) if config.recipe_dir else Path.cwd()
        self.references: OrderedDict[str, recipe_page.Reference] = OrderedDict()
        self.loaded: dict[str, recipe_page.Loaded | None] = {}
        self.configured: str | None = None
        self._lock = threading.Lock()
        if config.recipe_image is not None:
            ref = recipe_page.reference_from_file(config.recipe_image)
            self.references[ref.sha256] = ref
            self.configured = ref.sha256
            loaded = None
            if config.recipe_file is not None:
                path = Path(config.recipe_file)
                loaded = recipe_page.load_for_editing(path.read_text(encoding="utf-8"), str(path))
                loaded = recipe_page.Loaded(loaded.mapping, loaded.comments, path.name, loaded.revision)
            self.loaded[ref.sha256] = loaded

    def routes(self) -> list[Route]:
        return [
            Route("/recipe", self.page),
            Route("/recipe/reference/{sha}.img", self.image),
            Route("/recipe/check", self.check, methods=["POST"]),
            Route("/recipe/preview", self.preview, methods=["POST"]),
            Route("/recipe/save", self.save, methods=["POST"]),
            Route("/batch/{batch_id}/part/{position:int}/recipe", self.from_part),
        ]

    # -- pages

    def page(self, request: Request) -> Response:
        if self.configured is None:
            return self.views.render(request, "recipe_none.html", {"has_archive": self.views.config.archive_root})
        return self._page(request, self.references[self.configured], self.loaded.get(self.configured))

    def _page(self, request: Request, ref: recipe_page.Reference, loaded) -> Response:
        data = recipe_page.page_data(ref, loaded)
        data["reference"] = ref.sha256
        data["can_save"] = self._save_refusal() is None
        context = {
            "data": data,
            "ref": ref,
            "folder_name": self.folder.name or str(self.folder),
            "save_refusal": self._save_refusal(),
        }
        return self.views.render(request, "recipe.html", context)

    def from_part(self, request: Request) -> Response:
        """A recipe drawn on an archived part's photo, starting from the recipe its batch was run with."""
        with self.views._open() as arc:
            part = self.views._part(arc, request)
            if not part.image_sha256:
                raise HTTPException(404, "This part has no photo in the archive.")
            batch = arc.batch(part.batch_id)
            image = arc.read_object(part.image_sha256)
            recipe_text = arc.read_object(batch.recipe_sha256).decode("utf-8")
        with self._lock:
            ref = self.references.get(part.image_sha256)
            if ref is None:
                try:
                    ref = recipe_page.reference_from_bytes(image, part.part_key)
                except InputError as exc:
                    raise HTTPException(400, str(exc)) from None
                self._keep(ref)
        try:
            loaded = recipe_page.load_for_editing(recipe_text, f"{batch.recipe_name}.yaml")
        except RecipeError:
            loaded = None  # the recipe of an older release may not load today: start afresh on the photo
        return self._page(request, ref, loaded)

    def _keep(self, ref: recipe_page.Reference) -> None:
        self.references[ref.sha256] = ref
        archived = [k for k in self.references if k != self.configured]
        for sha in archived[:-KEEP_ARCHIVED]:
            del self.references[sha]

    def image(self, request: Request) -> Response:
        ref = self.references.get(request.path_params["sha"])
        if ref is None:
            raise HTTPException(404, "There is no reference photo with that hash on this station.")
        headers = {"cache-control": "private, max-age=31536000, immutable", "etag": f'"{ref.sha256}"'}
        return Response(ref.shown, media_type=ref.shown_type, headers=headers)

    # -- JSON actions

    async def _body(self, request: Request) -> tuple[dict, recipe_page.Reference]:
        """The JSON body of a POST whose CSRF header is valid, and the reference it names."""
        if not self.views.csrf.valid(request.cookies.get(SESSION_COOKIE), request.headers.get(CSRF_HEADER)):
            raise Refused(403, "The page is out of date or did not come from this station; reload the page.")
        if request.headers.get("content-type", "").split(";")[0].strip() != "application/json":
            raise Refused(415, "The request must be JSON (content type application/json).")
        try:
            body = json.loads(await request.body())
        except (ValueError, UnicodeDecodeError):
            raise Refused(400, "The request is not valid JSON.") from None
        if not isinstance(body, dict):
            raise Refused(400, "The request must be a JSON object.")
        sha = body.get("reference")
        ref = self.references.get(sha) if isinstance(sha, str) and set(sha) <= _SHA else None
        if ref is None:
            raise Refused(404, "There is no reference photo with that hash on this station; reload the page.")
        return body, ref

    @json_action
    async def check(self, request: Request) -> Response:
        body, ref = await self._body(request)
        name = str(body.get("file_name") or "")

        comments = _comments(body)

        def work():
            mapping = body.get("recipe")
            recipe, problems = recipe_page.check(mapping, name, ref, comments)
            text = recipe_page.file_text(mapping, ref, comments) if isinstance(mapping, dict) else ""
            return {"problems": problems, "frame": recipe_page.frame_view(recipe, ref), "text": text}

        return JSONResponse(await run_in_threadpool(work))

    @json_action
    async def preview(self, request: Request) -> Response:
        body, ref = await self._body(request)
        name = str(body.get("file_name") or "")
        try:
            view = await run_in_threadpool(recipe_page.preview, body.get("recipe"), body.get("index"), name, ref)
        except InputError as exc:
            return JSONResponse({"error": str(exc), "problems": list(exc.problems)}, status_code=422)
        return JSONResponse(view)

    @json_action
    async def save(self, request: Request) -> Response:
        body, ref = await self._body(request)
        refusal = self._save_refusal()
        if refusal:
            return JSONResponse({"error": refusal, "problems": [refusal]}, status_code=403)
        base = body.get("base_revision")
        base = base if isinstance(base, int) and not isinstance(base, bool) and 0 <= base < 2**31 - 1 else None
        comments = _comments(body)

        def work():
            return recipe_page.save(
                self.folder,
                str(body.get("file_name") or ""),
                body.get("recipe"),
                reference=ref,
                base_revision=base,
                comments=comments,
                overwrite=body.get("overwrite") is True,
            )

        try:
            saved = await run_in_threadpool(work)
        except recipe_page.SaveRefused as exc:
            return JSONResponse({"exists": True, "error": str(exc), "problems": []}, status_code=409)
        except InputError as exc:
            return JSONResponse({"error": str(exc), "problems": list(exc.problems)}, status_code=422)
        kept = f"; the file it replaced is kept as {saved.kept.name}" if saved.kept else ""
        return JSONResponse(
            {
                "saved": saved.path.name,
                "revision": saved.revision,
                "kept": saved.kept.name if saved.kept else None,
                "message": f"Saved {saved.path.name}, revision {saved.revision}{kept}.",
            }
        )

    def _save_refusal(self) -> str | None:
        config = self.views.config
        if config.read_only:
            return "This station is read-only: recipes are not saved here."
        if config.remote:
            return "Recipes are saved on a station that serves this computer only (start it without --host)."
        return None
