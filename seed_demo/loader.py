"""Load the invented demo campaign through the same services the API uses.

The campaign is created by the campaign service and the shots go through the ingest
service in batches, so the demo data is validated, evaluated and stored exactly like
shots posted by a DAQ. Loading is replay-safe: shots already stored with the same
payload come back ``unchanged``, so an interrupted load simply resumes.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
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


DEMO_DATABASE_PATH = "./wakeledger-demo.db"
DEMO_TOKEN_NAME = "demo-admin"


@dataclass(frozen=True)
class PreparedDemo:
    app: Any  # the FastAPI application, demo mode on
    database_url: str
    load: DemoLoadReport
    admin_token: str


def demo_database_url(path: str | Path = DEMO_DATABASE_PATH) -> str:
    """The demo always uses its own SQLite file, never the configured DATABASE_URL."""
    return f"sqlite:///{Path(path).expanduser().resolve()}"


def prepare_demo(path: str | Path, settings: Settings) -> PreparedDemo:
    """Migrate the demo database, load the demo campaign if it is empty, make a fresh admin token
    (revoking the earlier demo admin tokens)."""
    from app.database import upgrade_database
    from app.main import create_app
    from app.services.auth import create_token

    url = demo_database_url(path)
    upgrade_database(url)
    demo_settings = settings.model_copy(update={"database_url": url, "demo_mode": True, "migrate_on_start": False})
    app = create_app(demo_settings)
    factory = app.state.session_factory
    report = load_demo_campaign(factory)
    # Only the token's hash is stored, so a demo start cannot show an earlier token again;
    # the earlier demo-admin tokens are revoked, so only the one printed now is valid.
    with factory() as session:
        token = create_token(session, "admin", DEMO_TOKEN_NAME, actor="demo", replace_named=True)
    return PreparedDemo(app=app, database_url=url, load=report, admin_token=token)
