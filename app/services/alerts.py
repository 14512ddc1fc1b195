"""Alerts: a campaign's notification targets, queueing a delivery when a stored shot is
outside or carries a chosen flag, and the ``alert_delivery`` job that POSTs it.

- **Targets** (admins): an http or https URL (any host, loopback included: the receiver
  often runs on the same machine), the statuses (``model.STATUSES``) and the rule codes
  (``model.FLAG_CODES``) it wants. A shot matches a target when its status is one of the
  target's statuses or one of its fired rules (any severity) is one of the target's codes.
- **Firing.** Shots stored through the API (new shots, and corrections: a new revision)
  are matched inside the ingest's own write transaction, and each match queues one
  delivery job (``queue_job``), so the alert is stored atomically with the shot and no
  HTTP call is made in the request. Re-evaluations (a settings change, a model upgrade)
  do not fire: they would re-send a campaign's whole history. Backlog imports and the
  demo loader pass no ``AlertPolicy`` and fire nothing. At most ``per_request`` alerts
  per target are queued for one request; the rest are logged as one ``skipped`` line.
- **Delivering** happens in a worker: the body (built when the shot was stored) is POSTed
  as JSON with a timeout; a 2xx answer is delivered; no answer, a 408, 425, 429 or 5xx is
  retried with exponential backoff (``backoff_s``, doubling) until ``max_attempts``; any
  other answer fails at once. Every attempt is a row of ``alert_deliveries``. The job
  system does the waiting: the job is put back in the queue with a ``not_before``
  (``jobs.RetryLater``), so no worker sleeps through a backoff. Deliveries are not counted
  by the queue limits (``jobs.UNCOUNTED_KINDS``).
"""

from __future__ import annotations

import ipaddress
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from typing import Any
from urllib.parse import quote, urlsplit

import httpx
from sqlalchemy.orm import Session

import model
from app.advisory import ADVISORY_CAUTION
from app.database import begin_write, run_write
from app.errors import FieldProblem, InvalidInput, NotFound
from app.plain import finite_or_none
from app.services import jobs
from app.services.campaigns import require_campaign
from app.store import alerts as alert_store
from app.store import audit
from app.tables import AlertDelivery, AlertTarget, Campaign
from app.times import format_utc
from app.version import VERSION

KIND = "alert_delivery"
assert KIND in jobs.UNCOUNTED_KINDS  # deliveries never count against the queue limits
ACTOR = "wakeledger (alerts)"
MAX_URL_LENGTH = 2000
MAX_TARGETS_PER_CAMPAIGN = 50
RETRIED_STATUS_CODES = frozenset({408, 425, 429})  # and every 5xx
ERROR_TEXT_LIMIT = 500


@dataclass(frozen=True)
class AlertPolicy:
    """How alerts are built and sent (from the settings: ``WAKELEDGER_PUBLIC_URL``, ``WAKELEDGER_ALERT_*``)."""

    public_url: str = ""  # base of the shot link in the body; empty: the link is a path
    timeout_s: float = 5.0
    max_attempts: int = 5
    backoff_s: float = 10.0  # wait before the first retry; doubles with each further one
    per_request: int = 20  # alerts queued per target for one request, at most

    @classmethod
    def from_settings(cls, settings: Any) -> AlertPolicy:
        return cls(
            public_url=settings.public_url,
            timeout_s=settings.alert_timeout_seconds,
            max_attempts=settings.alert_attempts,
            backoff_s=settings.alert_backoff_seconds,
            per_request=settings.alerts_per_request,
        )


# --------------------------------------------------------------------------- targets


@dataclass(frozen=True)
class TargetOut:
    id: int
    url: str
    statuses: list[str]
    flags: list[str]
    created_at: datetime
    created_by: str

    def as_json(self) -> dict[str, Any]:
        return {
            "id": self.id,
            "url": self.url,
            "statuses": self.statuses,
            "flags": self.flags,
            "created_at": format_utc(self.created_at),
            "created_by": self.created_by,
        }


def _target_out(target: AlertTarget) -> TargetOut:
    return TargetOut(
        target.id, target.url, list(target.statuses), list(target.flags), target.created_at, target.created_by
    )


def url_problem(url: str) -> str | None:
    """Why ``url`` cannot be a target (None when it can): http or https with a host; any host
    an admin names is allowed, loopback included."""
    if not url:
        return "is required: the http or https URL that receives the alerts"
    if len(url) > MAX_URL_LENGTH:
        return f"is {len(url)} characters long; at most {MAX_URL_LENGTH}"
    if any(c.isspace() or ord(c) < 32 or ord(c) == 127 for c in url):
        return "must not contain spaces or control characters"
    try:
        parts = urlsplit(url)
        parts.port  # noqa: B018 - raises ValueError for a port that is not a number in range
    except ValueError as exc:
        return f"is not a valid URL ({exc})"
    if parts.scheme.lower() not in ("http", "https"):
        return f"must start with http:// or https:// (got {parts.scheme + ':' if parts.scheme else 'no scheme'})"
    host = parts.hostname or ""
    if not host:
        return "names no host (e.g. http://127.0.0.1:9000/alerts)"
    if host.startswith("[") or ":" in host:
        try:
            ipaddress.ip_address(host.strip("[]"))
        except ValueError:
            return f"has a host that is not a valid address: {host!r}"
    try:
        httpx.URL(url)
    except Exception as exc:  # httpx refuses what it could not send
        return f"is not a URL that can be sent to ({exc})"
    return None


def _unique(values: Sequence[str]) -> list[str]:
    return list(dict.fromkeys(values))


def check_target(url: Any, statuses: Any, flags: Any) -> tuple[str, list[str], list[str]]:
    """The target's (url, statuses, flags), or InvalidInput naming each failing field."""
    problems: list[FieldProblem] = []
    if not isinstance(url, str):
        problems.append(("url", "must be text: the http or https URL that receives the alerts"))
        url = ""
    else:
        url = url.strip()
        if (why := url_problem(url)) is not None:
            problems.append(("url", why))
    lists: dict[str, list[str]] = {}
    for name, values, allowed, what in (
        ("statuses", statuses, model.STATUSES, "a status"),
        ("flags", flags, model.FLAG_CODES, "a rule code"),
    ):
        if not isinstance(values, list | tuple):
            problems.append((name, f"must be a list of {what}s"))
            lists[name] = []
            continue
        for i, value in enumerate(values):
            if value not in allowed:
                problems.append((f"{name}.{i}", f"{value!r} is not {what}; one of {', '.join(allowed)}"))
        lists[name] = _unique([v for v in values if v in allowed])
    if not problems and not lists["statuses"] and not lists["flags"]:
        problems.append(("statuses", "choose at least one status or one flag code, or the target never fires"))
    if problems:
        raise InvalidInput(problems)
    return url, lists["statuses"], lists["flags"]


def list_targets(session: Session, slug: str) -> list[TargetOut]:
    campaign = require_campaign(session, slug)
    return [_target_out(t) for t in alert_store.targets(session, campaign.id)]


def add_target(session: Session, slug: str, url: Any, statuses: Any, flags: Any, actor: str) -> TargetOut:
    """Register a target (audited as ``alerts.target.add``); InvalidInput names a failing field."""
    url, statuses, flags = check_target(url, statuses, flags)

    def work() -> AlertTarget:
        begin_write(session)
        campaign = require_campaign(session, slug)
        if len(alert_store.targets(session, campaign.id)) >= MAX_TARGETS_PER_CAMPAIGN:
            raise InvalidInput([("url", f"the campaign already has {MAX_TARGETS_PER_CAMPAIGN} targets; delete one")])
        target = alert_store.add_target(
            session,
            AlertTarget(
                campaign_id=campaign.id,
                url=url,
                statuses=statuses,
                flags=flags,
                created_at=datetime.now(UTC),
                created_by=actor,
            ),
        )
        audit.record(
            session,
            actor,
            "alerts.target.add",
            campaign_slug=slug,
            target=str(target.id),
            detail={"url": url, "statuses": statuses, "flags": flags},
        )
        return target

    return _target_out(run_write(session, work))


def delete_target(session: Session, slug: str, target_id: int, actor: str) -> TargetOut:
    """Remove a target (audited as ``alerts.target.delete``); its queued deliveries are then
    skipped, and its log lines stay. NotFound when the campaign has no such target."""

    def work() -> TargetOut:
        begin_write(session)
        campaign = require_campaign(session, slug)
        target = alert_store.get_target(session, campaign.id, target_id)
        if target is None:
            raise NotFound(f"alert target {target_id} of campaign {slug!r}")
        out = _target_out(target)
        alert_store.delete_target(session, target.id)
        audit.record(
            session,
            actor,
            "alerts.target.delete",
            campaign_slug=slug,
            target=str(target_id),
            detail={"url": out.url},
        )
        return out

    return run_write(session, work)


# --------------------------------------------------------------------------- firing


@dataclass(frozen=True)
class AlertShot:
    """A shot as just stored: what an alert says about it."""

    shot_id: str
    revision: int
    taken_at: datetime
    status: str
    flags: list[dict[str, Any]] = field(default_factory=list)  # code, severity, value, limit, sentence


def shots_from_columns(
    shot_ids: Sequence[str],
    revisions: Sequence[int],
    taken_ats: Sequence[datetime],
    shot_pks: Sequence[int],
    statuses: Sequence[str],
    flag_columns: Mapping[str, Sequence[Any]],
) -> list[AlertShot]:
    """AlertShots from ingest's evaluation and flag columns (``evaluation_columns``)."""
    by_pk: dict[int, list[dict[str, Any]]] = {}
    for pk, code, severity, value, limit, message in zip(
        flag_columns["shot_pk"],
        flag_columns["code"],
        flag_columns["severity"],
        flag_columns["value"],
        flag_columns["limit_value"],
        flag_columns["message"],
        strict=True,
    ):
        by_pk.setdefault(pk, []).append(
            {
                "code": code,
                "severity": severity,
                "value": finite_or_none(value),
                "limit": finite_or_none(limit),
                "sentence": message,
            }
        )
    return [
        AlertShot(shot_id, revision, taken_at, status, by_pk.get(pk, []))
        for shot_id, revision, taken_at, pk, status in zip(
            shot_ids, revisions, taken_ats, shot_pks, statuses, strict=True
        )
    ]


def matches(target: AlertTarget, shot: AlertShot) -> bool:
    """The shot's status is one the target asked for, or one of its fired rules is."""
    return shot.status in target.statuses or any(f["code"] in target.flags for f in shot.flags)


def shot_link(public_url: str, slug: str, shot_id: str) -> str:
    path = f"/campaigns/{quote(slug, safe='')}/shots/{quote(shot_id, safe='')}"
    return public_url.rstrip("/") + path if public_url else path


def alert_body(campaign: Campaign, shot: AlertShot, event: str, public_url: str) -> dict[str, Any]:
    """The JSON an alert carries (``delivery_id`` and ``attempt`` are added when it is sent)."""
    return {
        "event": event,
        "campaign": campaign.slug,
        "campaign_name": campaign.name,
        "shot_id": shot.shot_id,
        "revision": shot.revision,
        "taken_at": format_utc(shot.taken_at),
        "status": shot.status,
        "flags": shot.flags,
        "link": shot_link(public_url, campaign.slug, shot.shot_id),
        "model_version": model.MODEL_VERSION,
        "settings_version": campaign.settings_version,
        "advisory": ADVISORY_CAUTION,
    }


def campaign_targets(session: Session, campaign_id: int) -> list[AlertTarget]:
    """The campaign's targets (ingest asks first, and builds its AlertShots only when there are some)."""
    return alert_store.targets(session, campaign_id)


def queue_alerts(
    session: Session,
    campaign: Campaign,
    targets: Sequence[AlertTarget],
    shots: Sequence[AlertShot],
    event: str,
    policy: AlertPolicy,
) -> int:
    """Queue one delivery job per (target, matching shot) in the caller's write transaction;
    past ``policy.per_request`` per target, log one ``skipped`` line instead. How many were queued."""
    queued = 0
    now = datetime.now(UTC)
    for target in targets:
        matching = [s for s in shots if matches(target, s)]
        for shot in matching[: policy.per_request]:
            jobs.queue_job(
                session,
                KIND,
                campaign.id,
                {
                    "target_id": target.id,
                    "url": target.url,
                    "shot_id": shot.shot_id,
                    "revision": shot.revision,
                    "body": alert_body(campaign, shot, event, policy.public_url),
                    "max_attempts": policy.max_attempts,
                    "backoff_s": policy.backoff_s,
                    "timeout_s": policy.timeout_s,
                },
                actor=ACTOR,
            )
            queued += 1
        left_out = matching[policy.per_request :]
        if left_out:
            alert_store.log_attempt(
                session,
                campaign_id=campaign.id,
                target_id=target.id,
                target_url=target.url,
                job_id=None,
                shot_id=left_out[0].shot_id,
                shot_revision=left_out[0].revision,
                attempt=0,
                attempted_at=now,
                status_code=None,
                error=f"{len(left_out)} more matching shot(s) of the same request, from this one on, were not "
                f"sent (at most {policy.per_request} alerts per target and request); see the shot table",
                outcome="skipped",
                next_attempt_at=None,
            )
    return queued


# --------------------------------------------------------------------------- delivering


class DeliveryFailed(Exception):
    """The last attempt of a delivery failed (the job fails with this message)."""


def _send(url: str, body: dict[str, Any], timeout_s: float, delivery_id: str, attempt: int) -> tuple[int | None, str]:
    """POST the body; (HTTP status or None, error text or "")."""
    headers = {
        "User-Agent": f"wakeledger/{VERSION}",
        "X-Wakeledger-Delivery": delivery_id,
        "X-Wakeledger-Attempt": str(attempt),
    }
    try:
        response = httpx.post(url, json=body, headers=headers, timeout=timeout_s, follow_redirects=False)
    except httpx.TimeoutException:
        return None, f"no answer within {timeout_s:g} s"
    except Exception as exc:  # refused, reset, a name that does not resolve, a URL httpx cannot send...
        return None, f"{type(exc).__name__}: {exc}"[:ERROR_TEXT_LIMIT]
    if 200 <= response.status_code < 300:
        return response.status_code, ""
    reason = response.reason_phrase or "error"
    return response.status_code, f"HTTP {response.status_code} {reason}"[:ERROR_TEXT_LIMIT]


def _retried(status_code: int | None) -> bool:
    return status_code is None or status_code >= 500 or status_code in RETRIED_STATUS_CODES


def backoff(backoff_s: float, attempt: int) -> timedelta:
    """The wait after failed attempt ``attempt`` (1, 2, ...): backoff_s · 2^(attempt-1)."""
    return timedelta(seconds=backoff_s * 2 ** (attempt - 1))


def run_delivery(ctx: jobs.JobContext) -> dict[str, Any]:
    """The ``alert_delivery`` job: one attempt, logged; RetryLater after a retryable failure."""
    p = ctx.params
    factory = ctx.factory
    campaign_id = ctx.campaign_id
    assert campaign_id is not None

    def log(**values: Any) -> None:
        with factory() as session:

            def work() -> None:
                begin_write(session)
                exists = alert_store.target_by_id(session, p["target_id"]) is not None  # it may be deleted by now
                alert_store.log_attempt(
                    session,
                    campaign_id=campaign_id,
                    target_id=p["target_id"] if exists else None,
                    target_url=p["url"],
                    job_id=ctx.job_id,
                    shot_id=p["shot_id"],
                    shot_revision=p.get("revision", 1),
                    **values,
                )

            run_write(session, work)

    with factory() as session:
        target_exists = alert_store.target_by_id(session, p["target_id"]) is not None
        attempt = len(alert_store.attempts_of(session, ctx.job_id)) + 1
    max_attempts = int(p.get("max_attempts", 5))
    if not target_exists:
        log(attempt=attempt, attempted_at=ctx.clock(), error="the target was deleted; not sent", outcome="skipped")
        return {"outcome": "skipped"}
    ctx.check()
    body = {**p["body"], "delivery_id": ctx.job_id, "attempt": attempt}
    started = ctx.clock()
    status_code, error = _send(p["url"], body, float(p.get("timeout_s", 5.0)), ctx.job_id, attempt)
    if not error:
        log(attempt=attempt, attempted_at=started, status_code=status_code, outcome="delivered")
        return {"outcome": "delivered", "status_code": status_code, "attempts": attempt}
    if _retried(status_code) and attempt < max_attempts:
        after = ctx.clock() + backoff(float(p.get("backoff_s", 10.0)), attempt)
        log(
            attempt=attempt,
            attempted_at=started,
            status_code=status_code,
            error=error,
            outcome="retrying",
            next_attempt_at=after,
        )
        raise jobs.RetryLater(
            after, f"attempt {attempt} of {max_attempts} failed ({error}); retried at {format_utc(after)}"
        )
    log(attempt=attempt, attempted_at=started, status_code=status_code, error=error, outcome="failed")
    why = "not retried" if not _retried(status_code) else f"after {attempt} attempt(s)"
    raise DeliveryFailed(f"{error} ({why})")


# --------------------------------------------------------------------------- the settings page


@dataclass(frozen=True)
class DeliveryLine:
    at: datetime
    target_id: int | None
    target_url: str
    shot_id: str
    revision: int
    attempt: int
    status_code: int | None
    error: str
    outcome: str
    next_attempt_at: datetime | None

    def as_json(self) -> dict[str, Any]:
        return {
            "at": format_utc(self.at),
            "target_id": self.target_id,
            "target_url": self.target_url,
            "shot_id": self.shot_id,
            "shot_revision": self.revision,
            "attempt": self.attempt,
            "status_code": self.status_code,
            "error": self.error,
            "outcome": self.outcome,
            "next_attempt_at": format_utc(self.next_attempt_at) if self.next_attempt_at else None,
        }


def delivery_log(session: Session, slug: str, limit: int = 50) -> list[DeliveryLine]:
    """The latest delivery attempts of the campaign named by ``slug``, newest first (NotFound otherwise)."""
    return recent_deliveries(session, require_campaign(session, slug), limit)


def recent_deliveries(session: Session, campaign: Campaign, limit: int = 50) -> list[DeliveryLine]:
    """The campaign's latest delivery attempts, newest first (the settings page's log)."""
    rows: list[AlertDelivery] = alert_store.recent_deliveries(session, campaign.id, limit)
    return [
        DeliveryLine(
            r.attempted_at,
            r.target_id,
            r.target_url,
            r.shot_id,
            r.shot_revision,
            r.attempt,
            r.status_code,
            r.error,
            r.outcome,
            r.next_attempt_at,
        )
        for r in rows
    ]


def deliveries_of_job(session: Session, job_id: str) -> list[AlertDelivery]:
    """Every logged attempt of one delivery job (tests and the admin's look at one alert)."""
    return alert_store.attempts_of(session, job_id)
