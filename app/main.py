"""The FastAPI application: ``create_app(settings=None)``.

Routers are listed once in ``_include_routers``; add yours there. The app holds no job
and no state of its own: jobs run in worker processes (``app.services.workers``), so
several app processes may serve behind one proxy.
"""

from __future__ import annotations

import gc
import threading
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager

from fastapi import FastAPI

from app.advisory import ADVISORY_CAUTION
from app.config import Settings, get_settings
from app.database import make_engine, make_session_factory, upgrade_database
from app.problems import install_problem_handlers
from app.routers import (
    alerts,
    api,
    calibration,
    detailed_runs,
    open_metrics,
    openapi,
    pages,
    plan_pages,
    plans,
    summary,
)
from app.routers.guards import AuthenticateBeforeBody, BodySizeLimit, CompressPages, RefuseNulInUrl, ServedUnderPrefix
from app.services import reevaluation
from app.services.dashboard import overview
from app.services.rate_limits import RateLimiter
from app.version import VERSION


def _include_routers(app: FastAPI, settings: Settings) -> None:
    app.include_router(api.router)
    app.include_router(api.ops_router)  # /healthz and /metrics at the root as well
    app.include_router(pages.router)
    pages.install_page_handlers(app)
    app.mount("/static", pages.VersionedStaticFiles(directory=pages.STATIC_DIR), name="static")
    app.include_router(summary.router)
    app.include_router(calibration.router)
    app.include_router(calibration.page_router)
    app.include_router(detailed_runs.router)
    app.include_router(plans.router)
    app.include_router(plan_pages.router)
    app.include_router(alerts.router)
    openapi.install_docs(app, pages.PAGE_HEADERS)
    if settings.open_metrics.startswith("/"):  # scraping without a token (WAKELEDGER_OPEN_METRICS)
        app.add_api_route(
            settings.open_metrics, open_metrics.open_metrics_route, methods=["GET"], include_in_schema=False
        )


def create_app(settings: Settings | None = None) -> FastAPI:
    settings = settings or get_settings()
    engine = make_engine(settings.database_url)
    factory = make_session_factory(engine)

    @asynccontextmanager
    async def lifespan(_app: FastAPI) -> AsyncIterator[None]:
        if settings.migrate_on_start:
            upgrade_database(settings.database_url)
        # Shots evaluated by an older model version (wakeledger was upgraded) are re-evaluated
        # (queued once, under the campaign's lock, however many app processes start).
        with factory() as session:
            reevaluation.queue_model_upgrades(session)
        if getattr(_app.state, "freeze_after_start", False):  # set by `wakeledger serve`
            # What the start-up made (modules, routes: a few hundred thousand objects) lives as
            # long as the server; out of the collector's sight, the full collection that a large
            # read sets off walks only what came since (0.1 s less CPU in a first load of the
            # overview at 100,000 shots).
            gc.collect()
            gc.freeze()
        warming = threading.Thread(
            target=overview.warm_overviews,
            args=(factory, settings.warm_overview_campaigns),
            name="wakeledger-warm-overviews",
            daemon=True,
        )
        if settings.warm_overview_campaigns:
            warming.start()
        yield
        if warming.is_alive():
            warming.join(timeout=60)  # its reads hold connections the engine is about to close
        engine.dispose()

    app = FastAPI(
        title="wakeledger",
        version=VERSION,
        summary="Shot ledger and self-modulation model check",
        description=ADVISORY_CAUTION,
        lifespan=lifespan,
        docs_url=None,  # /docs is served from this host's own assets (app.routers.openapi)
        redoc_url=None,
    )
    app.state.settings = settings
    app.state.engine = engine
    app.state.session_factory = factory
    app.state.rate_limiter = RateLimiter.configured(
        settings.rate_limit_writes, settings.rate_limit_expensive_reads, settings.rate_limit_storage
    )
    install_problem_handlers(app)
    _include_routers(app, settings)
    # The last added runs first: NUL check, then authentication, then the size limit.
    app.add_middleware(BodySizeLimit, limit=settings.max_body_bytes)
    app.add_middleware(AuthenticateBeforeBody)
    app.add_middleware(RefuseNulInUrl)
    # Pages, JSON feeds and our static files go out gzip-compressed to browsers that accept
    # it (plotly.min.js is sent pre-compressed, app.routers.pages); API answers are not. Level 1:
    # on a 2-core server the CPU is scarcer than the bytes (JSON of numbers shrinks ~5x at any level).
    app.add_middleware(CompressPages, minimum_size=1000, compresslevel=1)
    if settings.root_path:  # served under a path prefix (WAKELEDGER_ROOT_PATH); runs first
        app.add_middleware(ServedUnderPrefix, prefix=settings.root_path)
    return app
