"""Domain errors: what went wrong, in the service's words, never an HTTP status.

Services raise these; one handler in ``app.problems`` maps each kind to an RFC 9457
problem document (404, 409, 422, ...), and the CLI prints them as lines. ``problems``
are (field path, reason) pairs naming every failing field.
"""

from __future__ import annotations

from collections.abc import Sequence

FieldProblem = tuple[str, str]


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
    """The input was refused; ``problems`` names every failing field."""

    def __init__(self, problems: Sequence[FieldProblem], detail: str | None = None) -> None:
        problems = list(problems)
        if detail is None:
            fields = ", ".join(f for f, _ in problems[:5])
            more = f" and {len(problems) - 5} more" if len(problems) > 5 else ""
            detail = f"{len(problems)} invalid field(s): {fields}{more}"
        super().__init__(detail, problems)


class ShotConflict(DomainError):
    """A shot id is already stored (or repeated in a batch) with a different payload."""


class AlreadyExists(DomainError):
    """A thing with this name exists already."""


class Unauthorized(DomainError):
    """No valid token was presented."""


class Forbidden(DomainError):
    """The token's role may not do this."""


class Unavailable(DomainError):
    """A dependency (the database) does not answer."""
