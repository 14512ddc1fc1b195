"""RFC 9457 problem details: one error shape for every failure the API reports.

Body: ``type``, ``title``, ``status``, ``detail`` and, for input errors, ``errors``:
a list of ``{"field": "<dotted path>", "reason": "..."}`` naming every failing field.
Services raise domain errors (``app.errors``); ``install_problem_handlers`` maps each
kind to its status here, once. FastAPI/pydantic validation errors and
``model.ShotInputError`` are converted the same way, so a client parses one format.
"""

from __future__ import annotations

import logging
from collections.abc import Iterable, Sequence
from typing import Any

from fastapi import FastAPI, HTTPException, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from starlette.exceptions import HTTPException as StarletteHTTPException

from app.errors import (
    AlreadyExists,
    Conflict,
    DomainError,
    FieldProblem,
    Forbidden,
    InvalidInput,
    NotFound,
    RateLimited,
    ShotConflict,
    TooManyJobs,
    Unauthorized,
    Unavailable,
)
from app.schemas import pydantic_problems
from model import ShotInputError

PROBLEM_JSON = "application/problem+json"
log = logging.getLogger(__name__)

# Problem types (relative URIs, resolved against the API's base).
INVALID_INPUT = "/problems/invalid-input"
SHOT_CONFLICT = "/problems/shot-conflict"
NOT_FOUND = "/problems/not-found"
UNAUTHORIZED = "/problems/unauthorized"
FORBIDDEN = "/problems/forbidden"
BODY_TOO_LARGE = "/problems/body-too-large"
ALREADY_EXISTS = "/problems/already-exists"
CONFLICT = "/problems/conflict"
MALFORMED_BODY = "/problems/malformed-body"
UNSUPPORTED_MEDIA_TYPE = "/problems/unsupported-media-type"
RATE_LIMITED = "/problems/rate-limited"
TOO_MANY_JOBS = "/problems/too-many-jobs"
INTERNAL = "/problems/internal-error"


class ProblemError(HTTPException):
    """Raise anywhere below a router to answer with a problem document."""

    def __init__(
        self,
        status: int,
        title: str,
        detail: str = "",
        *,
        type_: str = "about:blank",
        errors: Iterable[FieldProblem] = (),
        headers: dict[str, str] | None = None,
        extra: dict[str, Any] | None = None,
    ) -> None:
        super().__init__(status_code=status, detail=detail, headers=headers)
        self.title = title
        self.type_ = type_
        self.errors = [{"field": f, "reason": r} for f, r in errors]
        self.extra = extra or {}

    def body(self) -> dict[str, Any]:
        body: dict[str, Any] = {
            "type": self.type_,
            "title": self.title,
            "status": self.status_code,
            "detail": self.detail,
        }
        if self.errors:
            body["errors"] = self.errors
        body.update(self.extra)
        return body


def invalid_input(problems: Sequence[FieldProblem], detail: str | None = None) -> ProblemError:
    """422 naming every failing field."""
    return _invalid(InvalidInput(problems, detail))


def _invalid(error: InvalidInput) -> ProblemError:
    """422 naming the failing fields; a capped list says how many problems there were."""
    extra = {"error_count": error.total, "errors_truncated": True} if error.truncated else None
    return ProblemError(422, "Invalid input", error.detail, type_=INVALID_INPUT, errors=error.problems, extra=extra)


def problem_response(exc: ProblemError) -> JSONResponse:
    return JSONResponse(exc.body(), status_code=exc.status_code, headers=exc.headers, media_type=PROBLEM_JSON)


_BEARER = {"WWW-Authenticate": 'Bearer realm="wakeledger"'}
# Domain error -> (status, title, problem type, headers).
_DOMAIN: list[tuple[type[DomainError], int, str, str, dict[str, str] | None]] = [
    (InvalidInput, 422, "Invalid input", INVALID_INPUT, None),
    (NotFound, 404, "Not found", NOT_FOUND, None),
    (ShotConflict, 409, "Shot conflict", SHOT_CONFLICT, None),
    (AlreadyExists, 409, "Already exists", ALREADY_EXISTS, None),
    (Conflict, 409, "Conflict", CONFLICT, None),
    (Unauthorized, 401, "Unauthorized", UNAUTHORIZED, _BEARER),
    (Forbidden, 403, "Forbidden", FORBIDDEN, None),
    (TooManyJobs, 429, "Too many jobs", TOO_MANY_JOBS, None),
    (Unavailable, 503, "Service unavailable", "about:blank", None),
]


def problem_of(error: DomainError) -> ProblemError:
    """The problem document of a domain error."""
    if isinstance(error, InvalidInput):
        return _invalid(error)
    if isinstance(error, RateLimited):
        return ProblemError(
            429,
            "Too many requests",
            error.detail,
            type_=RATE_LIMITED,
            headers={"Retry-After": str(error.retry_after_s)},
            extra={"retry_after_s": error.retry_after_s},
        )
    for kind, status, title, type_, headers in _DOMAIN:
        if isinstance(error, kind):
            return ProblemError(status, title, error.detail, type_=type_, errors=error.problems, headers=headers)
    return ProblemError(500, "Internal server error", "the error was logged", type_=INTERNAL)


STATUS_TITLES = {
    400: "Bad request",
    401: "Unauthorized",
    403: "Forbidden",
    404: "Not found",
    405: "Method not allowed",
    409: "Conflict",
    413: "Content too large",
    415: "Unsupported media type",
    422: "Invalid input",
    429: "Too many requests",
    503: "Service unavailable",
    500: "Internal server error",
}


def _as_problem(exc: Exception) -> ProblemError:
    """The problem document of anything a handler below receives."""
    if isinstance(exc, ProblemError):
        return exc
    if isinstance(exc, DomainError):
        return problem_of(exc)
    if isinstance(exc, RequestValidationError):
        return invalid_input(pydantic_problems(exc.errors()))
    if isinstance(exc, ShotInputError):
        return invalid_input([(str(f), str(r)) for f, r in exc.problems])
    if isinstance(exc, StarletteHTTPException):
        title = STATUS_TITLES.get(exc.status_code, "Error")
        detail = exc.detail if isinstance(exc.detail, str) else title
        return ProblemError(exc.status_code, title, detail, headers=getattr(exc, "headers", None))
    log.exception("unhandled error", exc_info=exc)
    return ProblemError(500, "Internal server error", "the error was logged", type_=INTERNAL)


def install_problem_handlers(app: FastAPI) -> None:
    """Every error the app raises answers as a problem document (HTTP errors, pydantic and
    model input errors, domain errors, and anything unexpected as a logged 500)."""

    async def on_error(_request: Request, exc: Exception) -> JSONResponse:
        return problem_response(_as_problem(exc))

    for kind in (ProblemError, DomainError, StarletteHTTPException, RequestValidationError, ShotInputError, Exception):
        app.add_exception_handler(kind, on_error)
