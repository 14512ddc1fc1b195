"""Request guards that run before routing (ASGI middleware), cheapest first:

- ``RefuseNulInUrl``: a NUL character in the path or the query (PostgreSQL cannot store
  or compare it) is a 400 naming where it is;
- ``AuthenticateBeforeBody``: a request to the API that carries a body is authenticated
  before anything reads the body, so an unauthenticated 13 MB upload costs a header check;
- ``BodySizeLimit``: 413 for bodies over the limit.
"""

from __future__ import annotations

from urllib.parse import parse_qsl

from starlette.concurrency import run_in_threadpool
from starlette.middleware.gzip import GZipMiddleware
from starlette.requests import Request
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from app.errors import DomainError, Unauthorized
from app.problems import BODY_TOO_LARGE, MALFORMED_BODY, ProblemError, problem_of, problem_response
from app.routers.deps import SAFE_METHODS, principal_from_request


class ServedUnderPrefix:
    """The app answers under a path prefix (WAKELEDGER_ROOT_PATH) behind a reverse proxy.

    Sets the ASGI ``root_path``: routing then takes a path with the prefix (a proxy that passes
    it on) or without (a proxy that strips it), and the pages build every URL behind it.
    """

    def __init__(self, app: ASGIApp, prefix: str) -> None:
        self.app, self.prefix = app, prefix

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] in ("http", "websocket") and not scope.get("root_path"):
            scope = {**scope, "root_path": self.prefix}
        await self.app(scope, receive, send)


class CompressPages:
    """gzip for what browsers load (pages, chart feeds, static files); the API's answers go out as
    they are: data acquisition and scripts read them on the local network, and compressing a large
    numeric answer (a 25 MB planner scan) costs a second of server CPU to save nothing there."""

    def __init__(self, app: ASGIApp, minimum_size: int = 1000, compresslevel: int = 1) -> None:
        self.app = app
        self.compressed = GZipMiddleware(app, minimum_size=minimum_size, compresslevel=compresslevel)

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] == "http":
            path, root = scope["path"], scope.get("root_path", "")
            if root and path.startswith(root + "/"):  # a proxy that passes the prefix on
                path = path[len(root) :]
            if not path.startswith("/api/"):
                await self.compressed(scope, receive, send)
                return
        await self.app(scope, receive, send)


class RefuseNulInUrl:
    """400 when the path or a query parameter holds a NUL character (``%00``)."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    @staticmethod
    def _where(scope: Scope) -> str | None:
        if "\x00" in scope.get("path", ""):
            return "path"
        query = scope.get("query_string", b"")
        if b"%00" in query or b"\x00" in query:
            for name, value in parse_qsl(query.decode("latin-1"), keep_blank_values=True):
                if "\x00" in name or "\x00" in value:
                    return name.replace("\x00", "\\u0000")
            return "query"
        return None

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        where = self._where(scope) if scope["type"] == "http" else None
        if where is None:
            await self.app(scope, receive, send)
            return
        error = ProblemError(
            400,
            "Bad request",
            "the URL contains a NUL character (%00)",
            type_=MALFORMED_BODY,
            errors=[(where, "contains a NUL character (U+0000)")],
        )
        await problem_response(error)(scope, receive, send)


class AuthenticateBeforeBody:
    """API requests with a body: 401 for a missing or invalid token before the body is read."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http" or scope["method"] in SAFE_METHODS or not scope["path"].startswith("/api/"):
            await self.app(scope, receive, send)
            return
        request = Request(scope)  # shares scope["state"]: the identity is resolved once per request
        try:
            who = await run_in_threadpool(principal_from_request, request)
            if who is None:
                raise Unauthorized("a bearer token is required")
        except DomainError as exc:
            await problem_response(problem_of(exc))(scope, receive, send)
            return
        await self.app(scope, receive, send)


class BodySizeLimit:
    """413 for bodies over ``limit`` bytes: by Content-Length up front, else while streaming."""

    def __init__(self, app: ASGIApp, limit: int) -> None:
        self.app, self.limit = app, limit

    def _too_large(self) -> ProblemError:
        return ProblemError(
            413, "Content too large", f"the request body exceeds {self.limit} bytes", type_=BODY_TOO_LARGE
        )

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        for name, value in scope.get("headers", ()):
            if name == b"content-length":
                try:
                    too_big = int(value) > self.limit
                except ValueError:
                    too_big = False
                if too_big:
                    await problem_response(self._too_large())(scope, receive, send)
                    return
        received = 0

        async def limited_receive() -> Message:
            nonlocal received
            message = await receive()
            if message["type"] == "http.request":
                received += len(message.get("body", b""))
                if received > self.limit:
                    # A ProblemError (an HTTPException) passes through FastAPI's body reader
                    # and reaches the problem handlers as a 413.
                    raise self._too_large()
            return message

        await self.app(scope, limited_receive, send)
