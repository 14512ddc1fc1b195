"""Pydantic schemas at the API edge.

Shot bodies are taken as plain JSON objects so that the raw payload is stored verbatim;
their envelope (``shot_id``, ``taken_at``, ``notes``, ``tags``) is checked by
``ShotEnvelope`` and the physics inputs by ``model.validate_shot`` (the ranges live only
in ``model.INPUT_FIELDS``).
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Sequence
from datetime import UTC, datetime
from typing import Annotated, Any, Literal
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from pydantic import (
    AfterValidator,
    AwareDatetime,
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    create_model,
    field_validator,
)

import model
from model.inputs import InputField


def dotted(loc: Sequence[Any]) -> str:
    """('body', 'shots', 3, 'taken_at') -> 'shots.3.taken_at'; other locations keep their prefix."""
    parts = list(loc)
    if parts and parts[0] == "body":
        parts = parts[1:]
    return ".".join(str(p) for p in parts) or "body"


def pydantic_problems(errors: Iterable[Any], prefix: str = "") -> list[tuple[str, str]]:
    """(field path, reason) of each pydantic error, under ``prefix`` (e.g. ``shots.3``)."""
    out = []
    for err in errors:
        path = dotted(err.get("loc", ()))
        if prefix:
            path = f"{prefix}.{path}" if path != "body" else prefix
        out.append((path, err.get("msg", "invalid")))
    return out


_NUMBER_TEXT = re.compile(r"^\s*[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?\s*$")


def _time_text_only(value: Any) -> Any:
    """A time is ISO 8601 text: a number (or a number as text) is not read as a Unix time."""
    if isinstance(value, datetime):
        return value
    if not isinstance(value, str) or _NUMBER_TEXT.match(value):
        raise ValueError("must be ISO 8601 text with a UTC offset, e.g. 2026-11-27T14:05:00Z (not a number)")
    return value


def _in_utc(value: datetime) -> datetime:
    try:
        return value.astimezone(UTC)
    except OverflowError:  # e.g. 0001-01-01T00:00+05:00 is before the first representable UTC instant
        raise ValueError("is outside the range of times this service can store") from None


# An instant as the API takes it: ISO 8601 text with an offset (numbers and naive times are
# refused), converted to UTC.
Instant = Annotated[AwareDatetime, BeforeValidator(_time_text_only), AfterValidator(_in_utc)]

SHOT_ID_PATTERN = r"^[A-Za-z0-9][A-Za-z0-9._:+-]{0,127}$"
SLUG_PATTERN = r"^[a-z0-9][a-z0-9-]{0,63}$"


class ShotEnvelope(BaseModel):
    """The bookkeeping part of a shot body. Other fields are not looked at here; they are
    kept verbatim in the raw payload (and the physics sections are checked by the model)."""

    model_config = ConfigDict(extra="ignore")

    shot_id: str = Field(pattern=SHOT_ID_PATTERN, description="unique within the campaign")
    taken_at: Instant = Field(description="ISO 8601 with a UTC offset; naive times and numbers are refused")
    notes: str = Field(default="", max_length=20000)
    tags: list[str] = Field(default_factory=list, max_length=100)


class CampaignCreate(BaseModel):
    model_config = ConfigDict(extra="forbid")

    slug: str = Field(pattern=SLUG_PATTERN)
    name: str = Field(min_length=1, max_length=200)
    timezone: str = Field(default="UTC", description="IANA zone used for shift days and weekly summaries")
    description: str = Field(default="", max_length=20000)
    settings: dict[str, Any] = Field(
        default_factory=dict, description="overrides of the model's default settings and limits"
    )

    @field_validator("timezone")
    @classmethod
    def _known_zone(cls, value: str) -> str:
        try:
            ZoneInfo(value)
        except (ZoneInfoNotFoundError, ValueError):
            raise ValueError(f"unknown IANA time zone {value!r}") from None
        return value


class CampaignOut(BaseModel):
    slug: str
    name: str
    timezone: str
    description: str
    settings: dict[str, Any] = Field(description="the campaign's overrides")
    effective_settings: dict[str, Any] = Field(description="defaults with the overrides applied")
    settings_version: int
    created_at: datetime
    shot_count: int | None = Field(default=None, description="stored shots, excluded shots left out")


class CampaignList(BaseModel):
    items: list[CampaignOut]


class JobOut(BaseModel):
    id: str
    kind: str
    campaign: str | None
    state: Literal["queued", "running", "succeeded", "failed", "cancelled"]
    done: int
    total: int
    message: str
    result: dict[str, Any]
    created_at: datetime
    started_at: datetime | None
    finished_at: datetime | None
    submitted_by: str = Field(default="", description="who queued it (as in the audit trail)")
    attempts: int = Field(default=0, description="how many times a worker has started it (resumptions included)")
    cancel_requested: bool = Field(default=False, description="a cancel was asked for; the worker stops it shortly")


class SettingsChangeOut(BaseModel):
    campaign: CampaignOut
    job: JobOut


class BatchIn(BaseModel):
    shots: list[Any] = Field(description="up to max_batch_shots shot bodies (each checked by the ingest service)")


class BatchItemOut(BaseModel):
    index: int
    shot_id: str
    outcome: Literal["created", "unchanged", "duplicate_in_batch"]
    status: str | None


class BatchOut(BaseModel):
    created: int
    unchanged: int
    duplicates_in_batch: int
    items: list[BatchItemOut]


class ShotPage(BaseModel):
    items: list[dict[str, Any]]
    next_cursor: str | None


class ExclusionIn(BaseModel):
    model_config = ConfigDict(extra="forbid")

    reason: str = Field(
        description="why the shot is left out of counts and summaries (required; one line, at most 500 characters)"
    )


class ExclusionOut(BaseModel):
    """A shot's exclusion state: an excluded shot is kept and shown, counted nowhere."""

    shot_id: str
    excluded: bool
    excluded_at: datetime | None
    excluded_reason: str | None
    excluded_by: str | None


class RevisionOut(BaseModel):
    revision: int
    payload: dict[str, Any]
    reason: str
    author: str
    created_at: datetime


class RevisionList(BaseModel):
    items: list[RevisionOut]


class TokenOut(BaseModel):
    """A token as admins see it (never the token itself: only its hash is stored)."""

    id: int
    name: str
    role: str
    state: Literal["active", "expired", "revoked"]
    created_at: datetime
    created_by: str
    expires_at: datetime | None
    last_used_at: datetime | None = Field(description="to the minute")
    revoked_at: datetime | None
    sessions: int = Field(description="browser sessions open now")


class TokenList(BaseModel):
    items: list[TokenOut]


class TokenCreate(BaseModel):
    model_config = ConfigDict(extra="forbid")

    name: str = Field(min_length=1, max_length=200, description="who or what uses it (shown in the audit trail)")
    role: Literal["viewer", "ingest", "admin"]
    expires_in_days: float | None = Field(
        default=None, gt=0, le=3660, allow_inf_nan=False, description="the token stops working after this many days"
    )


class TokenCreated(TokenOut):
    token: str = Field(description="the new token; shown once, never stored")


class AuditEntryOut(BaseModel):
    id: int
    at: datetime
    actor: str
    action: str
    campaign: str | None
    target: str
    detail: dict[str, Any]


class AuditPage(BaseModel):
    items: list[AuditEntryOut]
    next_before: int | None = Field(description="pass as before= for the next (older) page")


class JobList(BaseModel):
    items: list[JobOut]


# --- the shot body, described for the OpenAPI schema ------------------------------------------------
# Bodies are validated by the ingest service (app.services.ingest.payloads, the model's
# field table) and stored verbatim; these models describe the same fields for clients.


def _input_field(f: InputField) -> tuple[Any, Any]:
    unit = f" [{f.unit}]" if f.unit else ""
    text = f"{f.description}{unit}" + (f"; default {f.default}" if f.default is not None else "")
    constraints: dict[str, Any] = {}
    if f.kind == "enum":
        kind: Any = Literal[tuple(f.choices)]
    else:
        kind = int if f.kind == "integer" else float
        if f.minimum is not None:
            constraints["gt" if f.exclusive_minimum else "ge"] = f.minimum
        if f.maximum is not None:
            constraints["le"] = f.maximum
        constraints["allow_inf_nan"] = False
    required = f.required and not f.needed_for
    return (kind if required else kind | None), Field(... if required else None, description=text, **constraints)


def _section_model(section: str) -> type[BaseModel]:
    fields = {f.path.split(".", 1)[1]: _input_field(f) for f in model.INPUT_FIELDS if f.path.startswith(section + ".")}
    return create_model(  # type: ignore[call-overload]
        f"Shot{section.capitalize()}",
        __config__=ConfigDict(extra="forbid"),
        __doc__=f"The {section} section: only these fields (an unknown one is refused, with a suggestion).",
        **fields,
    )


ShotDriver = _section_model("driver")
ShotPlasma = _section_model("plasma")
ShotSeed = _section_model("seed")
ShotMeasured = _section_model("measured")


class ShotIn(BaseModel):
    """One shot as data acquisition posts it. Other top-level sections (e.g. ``daq``) are kept verbatim."""

    model_config = ConfigDict(extra="allow")

    shot_id: str = Field(pattern=SHOT_ID_PATTERN, description="unique within the campaign")
    taken_at: datetime = Field(description="ISO 8601 with a UTC offset, from 1990 to a day past the server's clock")
    notes: str = Field(default="", max_length=20000)
    tags: list[str] = Field(default_factory=list, max_length=100)
    driver: ShotDriver  # type: ignore[valid-type]
    plasma: ShotPlasma  # type: ignore[valid-type]
    seed: ShotSeed | None = None  # type: ignore[valid-type]
    measured: ShotMeasured | None = None  # type: ignore[valid-type]


class BatchInDoc(BaseModel):
    """A batch as documented (the shots are checked one by one by the ingest service)."""

    shots: list[ShotIn] = Field(description="up to max_batch_shots shots; all are stored or none")


class Problem(BaseModel):
    """RFC 9457 problem details: the shape of every error answer."""

    type: str
    title: str
    status: int
    detail: str
    errors: list[dict[str, str]] = Field(default_factory=list, description="{field, reason} of each failing field")
    error_count: int | None = Field(default=None, description="all problems found, when errors lists only the first")
    errors_truncated: bool | None = None
    retry_after_s: int | None = Field(default=None, description="429: seconds until a retry may succeed")
