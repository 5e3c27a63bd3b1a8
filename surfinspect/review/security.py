"""What keeps the review station safe to leave open: CSRF tokens, request size limits, response headers.

CSRF: every visitor gets a random session cookie (HttpOnly, SameSite=Strict);
the token a form carries is the HMAC-SHA-256 of that cookie under a secret
made when the server starts, so a page on another site can neither read nor
forge it, and a token does not outlive a restart. Checked before any form
field is used; a POST without a valid token is refused with 403 and nothing
is recorded (OWASP CSRF Prevention Cheat Sheet, "signed double-submit cookie").
"""

from __future__ import annotations

import hashlib
import hmac
import secrets

from starlette.datastructures import MutableHeaders
from starlette.types import ASGIApp, Message, Receive, Scope, Send

SESSION_COOKIE = "surfinspect_review"
CSRF_FIELD = "csrf_token"
#: The largest request body accepted (a form with an uploaded key file is a few KiB).
MAX_BODY_BYTES = 256 * 1024
#: Content-Security-Policy: every asset from this server, no inline script, nothing framed.
CSP = (
    "default-src 'self'; img-src 'self' data:; style-src 'self'; script-src 'self'; "
    "object-src 'none'; frame-ancestors 'none'; base-uri 'none'; form-action 'self'"
)


class Csrf:
    """Session cookies and the tokens derived from them."""

    def __init__(self, secret: bytes | None = None):
        self._secret = secret or secrets.token_bytes(32)

    @staticmethod
    def new_session() -> str:
        return secrets.token_urlsafe(32)

    def token(self, session: str) -> str:
        return hmac.new(self._secret, session.encode("ascii", "replace"), hashlib.sha256).hexdigest()

    def valid(self, session: str | None, token: str | None) -> bool:
        if not session or not token:
            return False
        return hmac.compare_digest(self.token(session), token)


class BodyLimit:
    """ASGI middleware: refuse (413) a request whose body is over ``limit`` bytes, declared or streamed.

    A declared length over the limit is refused before a byte is read; any
    other body is read whole (at most ``limit`` bytes) before the application
    sees it, so no handler ever meets a cut-off request.
    """

    def __init__(self, app: ASGIApp, limit: int = MAX_BODY_BYTES):
        self.app = app
        self.limit = limit

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http" or scope["method"] in ("GET", "HEAD"):
            await self.app(scope, receive, send)
            return
        declared = dict(scope["headers"]).get(b"content-length")
        if declared is not None and (not declared.isdigit() or int(declared) > self.limit):
            await _plain(send, 413, "The request is larger than this station accepts.")
            return
        body = bytearray()
        while True:
            message = await receive()
            if message["type"] != "http.request":
                return  # the client went away
            body += message.get("body", b"")
            if len(body) > self.limit:
                await _plain(send, 413, "The request is larger than this station accepts.")
                return
            if not message.get("more_body", False):
                break
        sent = False

        async def replay() -> Message:
            nonlocal sent
            if sent:
                return await receive()
            sent = True
            return {"type": "http.request", "body": bytes(body), "more_body": False}

        await self.app(scope, replay, send)


async def _plain(send: Send, status: int, sentence: str) -> None:
    body = sentence.encode("utf-8")
    await send(
        {
            "type": "http.response.start",
            "status": status,
            "headers": [(b"content-type", b"text/plain; charset=utf-8"), (b"content-length", str(len(body)).encode())],
        }
    )
    await send({"type": "http.response.body", "body": body})


class SecurityHeaders:
    """ASGI middleware adding the headers every response carries (CSP, no sniffing, no framing, no referrer)."""

    def __init__(self, app: ASGIApp):
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return

        async def with_headers(message: Message) -> None:
            if message["type"] == "http.response.start":
                headers = MutableHeaders(scope=message)
                headers.setdefault("content-security-policy", CSP)
                headers.setdefault("x-content-type-options", "nosniff")
                headers.setdefault("x-frame-options", "DENY")
                headers.setdefault("referrer-policy", "no-referrer")
            await send(message)

        await self.app(scope, receive, with_headers)


class FailureThrottle:
    """Refuse further key attempts from an address after ``limit`` failed ones within ``window_s`` seconds.

    A guessed passphrase costs one request; this keeps guessing slow (common
    practice, no source: a handful of tries per few minutes, as a login form).
    """

    def __init__(self, limit: int = 5, window_s: float = 300.0, clock=None):
        import time

        self.limit = limit
        self.window_s = window_s
        self._clock = clock or time.monotonic
        self._failures: dict[str, list[float]] = {}

    def _recent(self, who: str) -> list[float]:
        now = self._clock()
        kept = [t for t in self._failures.get(who, []) if now - t < self.window_s]
        self._failures[who] = kept
        return kept

    def blocked(self, who: str) -> bool:
        return len(self._recent(who)) >= self.limit

    def failed(self, who: str) -> None:
        self._recent(who).append(self._clock())
