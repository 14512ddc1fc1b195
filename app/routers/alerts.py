"""REST routes of a campaign's alert targets (admins): /api/v1/campaigns/{slug}/webhooks.

A target is an http or https URL that receives a JSON body for every shot stored through
the API that is of one of its ``statuses`` or carries one of its ``flags`` (rule codes);
deliveries run in the job workers (``app.services.alerts``).
"""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Path, Query
from pydantic import BaseModel, ConfigDict, Field

from app.routers.deps import DB, Admin
from app.routers.json_body import StrictJSONRoute
from app.services import alerts

router = APIRouter(prefix="/api/v1", tags=["alerts"], route_class=StrictJSONRoute)

WEBHOOKS = "/campaigns/{slug}/webhooks"
WebhookId = Annotated[int, Path(ge=1, le=2**31 - 1, description="the target's id")]


class WebhookIn(BaseModel):
    model_config = ConfigDict(extra="forbid")

    url: str = Field(description="http or https URL that receives the alerts (any host, loopback included)")
    statuses: list[str] = Field(
        default=["outside"], description="statuses that fire an alert (nominal, marginal, outside)"
    )
    flags: list[str] = Field(default=[], description="rule codes that fire an alert when they fire on a shot")


class WebhookOut(BaseModel):
    id: int
    url: str
    statuses: list[str]
    flags: list[str]
    created_at: str
    created_by: str


class WebhookList(BaseModel):
    items: list[WebhookOut]


class DeliveryOut(BaseModel):
    at: str
    target_id: int | None
    target_url: str
    shot_id: str
    shot_revision: int
    attempt: int
    status_code: int | None
    error: str
    outcome: str
    next_attempt_at: str | None


class DeliveryList(BaseModel):
    items: list[DeliveryOut]


@router.post(WEBHOOKS, status_code=201, response_model=WebhookOut)
def add_webhook(slug: str, data: WebhookIn, session: DB, who: Admin) -> dict[str, Any]:
    """Register a notification target; 422 names the failing field (url, statuses.N, flags.N)."""
    return alerts.add_target(session, slug, data.url, data.statuses, data.flags, who.actor).as_json()


@router.get(WEBHOOKS, response_model=WebhookList)
def list_webhooks(slug: str, session: DB, _who: Admin) -> dict[str, Any]:
    return {"items": [t.as_json() for t in alerts.list_targets(session, slug)]}


@router.get(WEBHOOKS + "/deliveries", response_model=DeliveryList)
def list_deliveries(
    slug: str, session: DB, _who: Admin, limit: Annotated[int, Query(ge=1, le=500)] = 50
) -> dict[str, Any]:
    """The latest delivery attempts, newest first: time, target, shot, HTTP status or error, attempt, outcome."""
    return {"items": [d.as_json() for d in alerts.delivery_log(session, slug, limit)]}


@router.delete(WEBHOOKS + "/{webhook_id}", response_model=WebhookOut)
def delete_webhook(slug: str, webhook_id: WebhookId, session: DB, who: Admin) -> dict[str, Any]:
    """Remove a target; its queued deliveries are skipped, its log lines stay."""
    return alerts.delete_target(session, slug, webhook_id, who.actor).as_json()
