"""Settings from environment variables (prefix WAKELEDGER_, plus DATABASE_URL)."""

from __future__ import annotations

from datetime import timedelta
from functools import lru_cache
from typing import Literal

import limits
from pydantic import AliasChoices, Field, field_validator
from pydantic_settings import BaseSettings, SettingsConfigDict


class Settings(BaseSettings):
    model_config = SettingsConfigDict(env_prefix="WAKELEDGER_", extra="ignore")

    database_url: str = Field(
        default="sqlite:///./wakeledger.db",
        validation_alias=AliasChoices("DATABASE_URL", "WAKELEDGER_DATABASE_URL"),
    )
    # Largest request body accepted, in bytes (a 5,000-shot batch is about 5 MB).
    max_body_bytes: int = 16 * 1024 * 1024
    max_batch_shots: int = 5000
    # Demo mode: visitors may read pages and the read API without a token.
    demo_mode: bool = False
    # Cookie flag for the dashboard session; set true behind HTTPS.
    secure_cookies: bool = False
    # Run `db upgrade` at start-up.
    migrate_on_start: bool = True
    # Per-token budgets (``limits`` rate strings; empty: no limit) and where they are counted
    # (memory:// per process; a shared store such as redis://host:6379 for several app processes).
    rate_limit_writes: str = "1200/minute"
    rate_limit_expensive_reads: str = "300/minute"
    rate_limit_storage: str = "memory://"
    # How long a dashboard sign-in lasts (never longer than its token).
    session_hours: float = Field(default=12.0, gt=0)
    # `serve` and `demo` start one local `wakeledger worker` beside the server (false: run
    # workers yourself, on this host or others).
    local_worker: bool = True
    # Unfinished (queued or running) jobs a campaign, and a token, may have at once.
    max_jobs_per_campaign: int = Field(default=20, ge=1)
    max_jobs_per_token: int = Field(default=10, ge=1)
    # A worker's claim on a job lasts this long unless its heartbeat renews it; a job whose
    # worker died is taken over by another once the lease has run out.
    job_lease_seconds: float = Field(default=30.0, gt=0)
    job_heartbeat_seconds: float = Field(default=5.0, gt=0)
    worker_poll_seconds: float = Field(default=1.0, gt=0)
    # Workers run at this much lower CPU priority (nice) than the web server on a shared host.
    worker_niceness: int = Field(default=10, ge=0, le=19)
    # A long job (a detailed run) keeps a checkpoint this often, to resume from after a crash.
    job_checkpoint_seconds: float = Field(default=10.0, gt=0)
    # A shot's taken_at may lie at most this far past the server's clock (clock skew, time zones).
    max_future_hours: float = Field(default=24.0, gt=0)
    # The address the crew opens the dashboard at (e.g. https://ledger.example.org): alerts link
    # to shot pages under it. Empty: the link in an alert is a path only.
    public_url: str = ""
    # Alert deliveries (app.services.alerts): the receiver's time to answer, the attempts, the
    # wait before the first retry (doubling after each further failure), and how many alerts a
    # single request (e.g. a batch) may queue per target.
    alert_timeout_seconds: float = Field(default=5.0, gt=0, le=120)
    alert_attempts: int = Field(default=5, ge=1, le=20)
    alert_backoff_seconds: float = Field(default=10.0, ge=0)
    alerts_per_request: int = Field(default=20, ge=1)
    # At start-up the server computes, in the background, the overview (counts and chart feeds)
    # of this many campaigns with the latest shots, so the first viewer after a restart gets
    # them from memory instead of waiting for a read of the whole campaign. 0: off.
    warm_overview_campaigns: int = Field(default=3, ge=0)

    @field_validator("public_url")
    @classmethod
    def _http_base(cls, value: str) -> str:
        value = value.strip()
        if value and not value.lower().startswith(("http://", "https://")):
            raise ValueError("WAKELEDGER_PUBLIC_URL must start with http:// or https://")
        return value.rstrip("/")

    # Served under a path prefix behind a reverse proxy (e.g. "/wakeledger"; empty: at the root).
    # Every link and feed in the pages starts with it; the proxy passes the path on unchanged
    # or strips the prefix (both work: see DEVELOPERS.md).
    root_path: str = ""
    # Log lines as "text" or "json" (one JSON object a line: time, level, logger, message, and
    # for requests method, path, status, client).
    log_format: Literal["text", "json"] = "text"
    # Prometheus scraping without a token: "" (off: /metrics needs a viewer token), a path such
    # as "/metrics-open" served on the main port, or a port number ("9108", loopback only) or
    # "host:port" served by `wakeledger serve` on a listener of its own.
    open_metrics: str = ""

    @field_validator("rate_limit_writes", "rate_limit_expensive_reads")
    @classmethod
    def _readable_rate(cls, value: str) -> str:
        if value.strip():
            limits.parse(value)  # ValueError names the setting
        return value

    @field_validator("root_path")
    @classmethod
    def _prefix(cls, value: str) -> str:
        value = value.strip().rstrip("/")
        if value and not value.startswith("/"):
            raise ValueError("must start with / (e.g. /wakeledger)")
        return value

    @field_validator("open_metrics")
    @classmethod
    def _open_metrics(cls, value: str) -> str:
        value = value.strip()
        if value and not value.startswith("/"):
            port = value.rsplit(":", 1)[-1]
            if not port.isdigit() or not 0 < int(port) < 65536:
                raise ValueError("give a path (/metrics-open), a port (9108) or host:port")
        return value

    @property
    def max_future(self) -> timedelta:
        return timedelta(hours=self.max_future_hours)

    @property
    def session_lifetime(self) -> timedelta:
        return timedelta(hours=self.session_hours)


@lru_cache
def get_settings() -> Settings:
    return Settings()
