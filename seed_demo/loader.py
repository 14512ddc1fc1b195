"""Load the invented demo campaign through the same services the API uses.

The campaign is created by the campaign service and the shots go through the ingest
service in batches, so the demo data is validated, evaluated and stored exactly like
shots posted by a DAQ. Loading is replay-safe: shots already stored with the same
payload come back ``unchanged``, so an interrupted load simply resumes.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from datetime import timedelta
from pathlib import Path
from typing import Any

from sqlalchemy.orm import Session, sessionmaker

from app.config import Settings
from app.schemas import CampaignCreate
from app.services.campaigns import create_campaign
from app.services.ingest import ingest_shots
from app.store import campaigns as campaign_store
from seed_demo.generator import demo_campaign_spec, generate_demo_shots
from seed_demo.scenario import CAMPAIGN_SLUG, DEMO_SEED

DEMO_BATCH_SIZE = 500
DEMO_ACTOR = "demo-loader"


@dataclass(frozen=True)
class DemoLoadReport:
    campaign_slug: str
    campaign_created: bool
    shots_created: int
    shots_unchanged: int
    shots_in_campaign: int
    skipped: bool  # the campaign already held the whole demo: nothing was done
    seconds: float


def _shot_count(session: Session, campaign_id: int) -> int:
    return campaign_store.shot_counts(session).get(campaign_id, 0)


def load_demo_campaign(
    session_factory: sessionmaker[Session],
    *,
    seed: int = DEMO_SEED,
    batch_size: int = DEMO_BATCH_SIZE,
    actor: str = DEMO_ACTOR,
) -> DemoLoadReport:
    """Create the demo campaign if missing and ingest its shots unless it already holds them."""
    start = time.perf_counter()
    spec = demo_campaign_spec()
    with session_factory() as session:
        campaign = campaign_store.get_campaign(session, CAMPAIGN_SLUG)
        created = campaign is None
        if campaign is None:
            campaign = create_campaign(session, CampaignCreate(**spec), actor)
        campaign_id = campaign.id
        before = _shot_count(session, campaign_id)

    payloads = generate_demo_shots(seed)
    if before >= len(payloads):
        return DemoLoadReport(CAMPAIGN_SLUG, created, 0, 0, before, True, time.perf_counter() - start)

    shots_created = shots_unchanged = 0
    for first in range(0, len(payloads), batch_size):
        # One transaction per batch, as a DAQ posting batches would do.
        with session_factory() as session:
            result = ingest_shots(session, CAMPAIGN_SLUG, payloads[first : first + batch_size], actor, batch=True)
        shots_created += result.count("created")
        shots_unchanged += result.count("unchanged") + result.count("duplicate_in_batch")

    with session_factory() as session:
        total = _shot_count(session, campaign_id)
    return DemoLoadReport(
        CAMPAIGN_SLUG, created, shots_created, shots_unchanged, total, False, time.perf_counter() - start
    )


DEMO_TOKEN_NAME = "demo-admin"
# A demo admin token stops working after this long. Earlier demo tokens are not revoked: a
# second `wakeledger demo` on the same database (another port) must not lock out the first.
DEMO_TOKEN_LIFETIME = timedelta(days=7)


class DemoRefused(Exception):
    """The database holds campaigns of its own: the demo (open to readers without a token) refuses it."""


@dataclass(frozen=True)
class PreparedDemo:
    app: Any  # the FastAPI application, demo mode on
    database_url: str
    load: DemoLoadReport
    admin_token: str
    revision_before: str | None  # the schema's revision before the demo migrated it (None: new database)


def demo_database_url(path: str | Path) -> str:
    """The URL of a SQLite file given by its path (``wakeledger demo --db PATH``)."""
    return f"sqlite:///{Path(path).expanduser().resolve()}"


def _absolute(url: str) -> str:
    """A SQLite URL with an absolute path, so that the printed URL works from any directory."""
    from app.database import sqlite_file

    path = sqlite_file(url)
    return demo_database_url(path) if path is not None else url


def prepare_demo(database: str | Path, settings: Settings) -> PreparedDemo:
    """Migrate the database (a URL, or the path of a SQLite file), load the demo campaign unless it
    is there, and make a new admin token valid for DEMO_TOKEN_LIFETIME (earlier ones keep working).

    DemoRefused when the database holds other campaigns: demo mode lets anyone read them.
    """
    from app.database import upgrade_database
    from app.main import create_app
    from app.services.auth import create_token

    url = demo_database_url(database) if isinstance(database, Path) or "://" not in database else database
    url = _absolute(url)
    before, _after = upgrade_database(url)
    demo_settings = settings.model_copy(update={"database_url": url, "demo_mode": True, "migrate_on_start": False})
    app = create_app(demo_settings)
    factory = app.state.session_factory
    with factory() as session:
        others = sorted(c.slug for c in campaign_store.list_campaigns(session) if c.slug != CAMPAIGN_SLUG)
    if others:
        app.state.engine.dispose()
        raise DemoRefused(
            f"the database holds other campaigns ({', '.join(others[:3])}{', ...' if len(others) > 3 else ''}), "
            "which demo mode would show to anyone without a token: give the demo its own database "
            "(--db ./wakeledger-demo.db)"
        )
    report = load_demo_campaign(factory)
    with factory() as session:
        token = create_token(session, "admin", DEMO_TOKEN_NAME, actor="demo", expires_in=DEMO_TOKEN_LIFETIME)
    return PreparedDemo(app=app, database_url=url, load=report, admin_token=token, revision_before=before)
