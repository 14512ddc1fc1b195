"""Domain errors: what went wrong, in the service's words, never an HTTP status.

Services raise these; one handler in ``app.problems`` maps each kind to an RFC 9457
problem document (404, 409, 422, ...), and the CLI prints them as lines. ``problems``
are (field path, reason) pairs naming every failing field.
"""

from __future__ import annotations

from collections.abc import Sequence

FieldProblem = tuple[str, str]

# At most this many problems are kept and answered per request; the rest are counted.
MAX_PROBLEMS = 100


class DomainError(Exception):
    """Base of every error a service reports to its caller."""

    def __init__(self, detail: str, problems: Sequence[FieldProblem] = ()) -> None:
        super().__init__(detail)
        self.detail = detail
        self.problems: list[FieldProblem] = list(problems)


class NotFound(DomainError):
    """The thing asked for does not exist; ``what`` names it ("campaign 'x'")."""

    def __init__(self, what: str) -> None:
        super().__init__(f"{what} does not exist")
        self.what = what


class InvalidInput(DomainError):
    """The input was refused; ``problems`` names the failing fields (the first MAX_PROBLEMS).

    ``total`` counts every problem found (at least ``len(problems)``); ``truncated`` says
    that the list stops short of it, or that the search stopped at the cap.
    """

    def __init__(
        self,
        problems: Sequence[FieldProblem],
        detail: str | None = None,
        *,
        total: int | None = None,
        truncated: bool = False,
    ) -> None:
        problems = list(problems)
        self.total = max(total or 0, len(problems))
        self.truncated = truncated or len(problems) > MAX_PROBLEMS
        problems = problems[:MAX_PROBLEMS]
        if detail is None:
            fields = ", ".join(f for f, _ in problems[:5])
            more = f" and {self.total - 5} more" if self.total > 5 else ""
            detail = f"{self.total} invalid field(s): {fields}{more}"
        super().__init__(detail, problems)


class ProblemList:
    """Collects (field, reason) problems up to ``limit``; past it, only counts them.

    Walkers ask ``full`` to stop descending into a payload once the cap is reached.
    """

    def __init__(self, limit: int = MAX_PROBLEMS) -> None:
        self.limit = limit
        self.items: list[FieldProblem] = []
        self.total = 0

    @property
    def full(self) -> bool:
        return self.total >= self.limit

    def add(self, field: str, reason: str) -> None:
        self.total += 1
        if len(self.items) < self.limit:
            self.items.append((field, reason))

    def extend(self, problems: Sequence[FieldProblem]) -> None:
        for field, reason in problems:
            self.add(field, reason)

    def __bool__(self) -> bool:
        return self.total > 0


class RateLimited(DomainError):
    """The caller has made too many requests of one kind; ``retry_after_s`` says when to retry."""

    def __init__(self, detail: str, retry_after_s: int) -> None:
        super().__init__(detail)
        self.retry_after_s = max(1, retry_after_s)


class TooManyJobs(DomainError):
    """A campaign or a token has as many queued jobs as it may have."""


class ShotConflict(DomainError):
    """A shot id is already stored (or repeated in a batch) with a different payload."""


class Conflict(DomainError):
    """The request conflicts with the current state of the thing (e.g. cancelling a finished job)."""


class AlreadyExists(DomainError):
    """A thing with this name exists already."""


class Unauthorized(DomainError):
    """No valid token was presented."""


class Forbidden(DomainError):
    """The token's role may not do this."""


class Unavailable(DomainError):
    """A dependency (the database) does not answer."""
