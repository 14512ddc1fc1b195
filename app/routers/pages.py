"""The dashboard: server-rendered pages (the one Jinja environment, autoescaped) and their
small JSON feeds.

Pages carry a strict Content-Security-Policy: scripts only from this server, no inline
script. Chart data travels as JSON in ``<script type="application/json">`` blocks
(encoded by ``json_for_html``, which escapes <, > and &) or from the JSON feeds, and
is read by app/static/js/wakeledger.js. Plotly's JavaScript is served from the
installed plotly package; the palette's CSS custom properties from /assets/palette.css.
"""

from __future__ import annotations

import gzip
import re
import secrets
from functools import lru_cache
from pathlib import Path as FilePath
from typing import Annotated, Any
from urllib.parse import quote, urlencode, urlsplit

import plotly
from fastapi import APIRouter, Depends, Form, Path, Query, Request
from fastapi.responses import FileResponse, HTMLResponse, RedirectResponse, Response
from fastapi.staticfiles import StaticFiles

from app.errors import Conflict, DomainError, Forbidden, InvalidInput, NotFound
from app.presentation.csv_writer import csv_lines
from app.presentation.palette import GLYPHS, css_variables
from app.presentation.templates import ASSET_FILES, environment
from app.routers.deps import (
    CSRF_FIELD,
    DB,
    SESSION_COOKIE,
    ExpensiveRead,
    PathCampaign,
    clear_session_cookie,
    principal_from_request,
    require_role,
    set_session_cookie,
)
from app.routers.responses import json_response, streamed_file
from app.schemas import TokenCreate
from app.services import administration, auth, exclusions
from app.services import jobs as job_service
from app.services.auth import TokenInfo
from app.services.campaigns import Campaign, find_campaign
from app.services.dashboard import alert_panel, overview, settings_form, shot_page, table
from app.services.detailed_runs import lifecycle as detailed_runs
from app.services.phase_spread import NEIGHBOUR_WINDOW_SHOTS

APP_DIR = FilePath(__file__).resolve().parent.parent
STATIC_DIR = APP_DIR / "static"
PLOTLY_JS = FilePath(plotly.__file__).resolve().parent / "package_data" / "plotly.min.js"

CONTENT_SECURITY_POLICY = "; ".join(
    (
        "default-src 'none'",
        "script-src 'self'",
        # Plotly sets inline styles on the elements it draws.
        "style-src 'self' 'unsafe-inline'",
        "img-src 'self' data: blob:",
        "font-src 'self'",
        "connect-src 'self'",
        "worker-src 'self' blob:",
        "base-uri 'none'",
        "form-action 'self'",
        "frame-ancestors 'none'",
    )
)
PAGE_HEADERS = {
    "Content-Security-Policy": CONTENT_SECURITY_POLICY,
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "same-origin",
    "X-Frame-Options": "DENY",
    "Cache-Control": "no-store",
}
LIVE_INTERVAL_MS = 2500

router = APIRouter(include_in_schema=False)


# ------------------------------------------------------------------------- rendering


def site(request: Request, path: str = "") -> str:
    """``path`` (of this app, "/campaigns") as the browser must ask for it: behind the path prefix
    of WAKELEDGER_ROOT_PATH when the app is served under one. Every URL a page, a feed or a
    redirect gives the browser goes through here (templates: ``{{ root }}/...``)."""
    return request.scope.get("root_path", "") + path


def render(request: Request, name: str, context: dict[str, Any], status_code: int = 200) -> Response:
    principal: TokenInfo | None = getattr(request.state, "principal", None)
    context = {
        "root": site(request),
        "principal": principal,
        "csrf_token": principal.csrf_token if principal is not None else None,
        "campaign": None,
        "active": "",
        "phase_window_shots": NEIGHBOUR_WINDOW_SHOTS - 1,
        "presentation": {"glyphs": GLYPHS},
        **context,
    }
    campaign: Campaign | None = context["campaign"]
    if campaign is not None and "summary" not in context:
        with request.app.state.session_factory() as session:
            context["summary"] = overview.campaign_summary_links(session, campaign)
    context.setdefault("summary", None)
    context["request"] = request
    html = environment().get_template(name).render(**context)
    return HTMLResponse(html, status_code=status_code, headers=PAGE_HEADERS)


# --------------------------------------------------------------------------- access


class SignInRequired(Exception):
    pass


class PageNotFound(Exception):
    """A page of something that does not exist (answered with the not-found page)."""

    def __init__(self, what: str) -> None:
        super().__init__(what)
        self.what = what


def _principal(request: Request) -> TokenInfo | None:
    try:
        return principal_from_request(request)
    except DomainError:
        return None  # a stale or revoked cookie: treat as signed out


def _safe_next(target: str | None) -> str:
    """Only same-site paths after sign-in (no //host or scheme)."""
    if not target or not target.startswith("/") or target.startswith("//") or "\\" in target:
        return "/campaigns"
    return target


def _prefixed_panel(request: Request, panel: dict[str, Any]) -> dict[str, Any]:
    """The detailed-run panel with its API address behind the path prefix."""
    config = {**panel["config"], "runs_url": site(request, panel["config"]["runs_url"])}
    return {**panel, "config": config}


def _app_path(request: Request) -> str:
    """The request's path within the app (without the path prefix, whether the proxy kept it or not)."""
    path, root = request.url.path, site(request)
    return path[len(root) :] if root and (path == root or path.startswith(root + "/")) else path


def _sign_in_redirect(request: Request) -> RedirectResponse:
    target = _app_path(request) + (f"?{request.url.query}" if request.url.query else "")
    return RedirectResponse(site(request, "/sign-in?" + urlencode({"next": target})), status_code=303)


def viewer(request: Request) -> TokenInfo:
    info = _principal(request)
    if info is None or not info.can("viewer"):
        raise SignInRequired()
    request.state.principal = info
    return info


Reader = Annotated[TokenInfo, Depends(viewer)]
FeedReader = Annotated[TokenInfo, Depends(require_role("viewer"))]  # feeds answer 401 instead of redirecting


def page_campaign(slug: str, session: DB, _who: Reader) -> Campaign:
    """The campaign of a page's path, or the not-found page."""
    campaign = find_campaign(session, slug)
    if campaign is None:
        raise PageNotFound(f"Campaign {slug!r}")
    return campaign


PageCampaign = Annotated[Campaign, Depends(page_campaign)]


def _cross_site(request: Request) -> bool:
    """A form posted from another site (besides the SameSite=Lax cookie, check Origin)."""
    origin = request.headers.get("origin")
    if not origin or origin == "null":
        return origin == "null"
    return urlsplit(origin).netloc != request.headers.get("host", request.url.netloc)


def _refuse_cross_site(request: Request) -> Response:
    return render(
        request,
        "error.html",
        {"title": "Refused", "message": "This form was sent from another site, so nothing was changed."},
        403,
    )


def _refused_form(request: Request, sent_csrf: Any) -> Response | None:
    """The refusal page of a state-changing form post that is cross-site or lacks the
    session's CSRF token, or None when the post may go ahead."""
    if _cross_site(request):
        return _refuse_cross_site(request)
    who: TokenInfo | None = getattr(request.state, "principal", None)
    if who is None or not auth.csrf_matches(who, sent_csrf if isinstance(sent_csrf, str) else None):
        return render(
            request,
            "error.html",
            {
                "title": "Refused",
                "message": "This form's security token does not match your sign-in (the page may be "
                "older than your session), so nothing was changed. Reload the page and try again.",
            },
            403,
        )
    return None


def install_page_handlers(app: Any) -> None:
    """Signed-out visitors go to the sign-in page; missing things get the not-found page."""

    async def on_sign_in_required(request: Request, _exc: Exception) -> Response:
        return _sign_in_redirect(request)

    async def on_page_not_found(request: Request, exc: Exception) -> Response:
        what = exc.what if isinstance(exc, PageNotFound) else str(exc)
        return render(request, "error.html", {"title": "Not found", "message": f"{what} does not exist."}, 404)

    app.add_exception_handler(SignInRequired, on_sign_in_required)
    app.add_exception_handler(PageNotFound, on_page_not_found)


# ------------------------------------------------------------------------ assets


ASSET_FILES["/assets/plotly.min.js"] = PLOTLY_JS
IMMUTABLE = "public, max-age=31536000, immutable"  # a versioned URL (?v=) never changes


def _asset_cache(request: Request) -> str:
    return IMMUTABLE if request.query_params.get("v") else "public, max-age=3600"


@lru_cache(maxsize=1)
def _plotly_gzip() -> bytes:
    # Compressed once per process (4.8 MB -> ~1.4 MB), not on every first visit.
    return gzip.compress(PLOTLY_JS.read_bytes(), compresslevel=9, mtime=0)


@router.get("/assets/plotly.min.js")
def plotly_js(request: Request) -> Response:
    headers = {"Cache-Control": _asset_cache(request), "Vary": "Accept-Encoding", "X-Content-Type-Options": "nosniff"}
    if "gzip" in request.headers.get("accept-encoding", "").lower():
        return Response(_plotly_gzip(), media_type="text/javascript", headers={**headers, "Content-Encoding": "gzip"})
    return FileResponse(PLOTLY_JS, media_type="text/javascript", headers=headers)


class VersionedStaticFiles(StaticFiles):
    """app/static, with a year's caching for versioned URLs (``asset()`` in templates)."""

    async def get_response(self, path: str, scope: Any) -> Response:
        response = await super().get_response(path, scope)
        if response.status_code == 200:
            response.headers["Cache-Control"] = _asset_cache(Request(scope))
        return response


@router.get("/assets/palette.css")
def palette_css() -> Response:
    """The one palette as CSS custom properties (app.presentation.palette)."""
    return Response(
        css_variables() + "\n",
        media_type="text/css",
        headers={"Cache-Control": "public, max-age=3600", "X-Content-Type-Options": "nosniff"},
    )


# ----------------------------------------------------------------------- sign-in


@router.get("/")
def home(request: Request) -> Response:
    return RedirectResponse(site(request, "/campaigns" if _principal(request) else "/sign-in"), status_code=303)


# The sign-in form carries a one-off value that must match this cookie (double submit): a
# page on another site cannot sign a browser in with a token of its choosing.
SIGN_IN_COOKIE = "wakeledger_sign_in"


def _sign_in_page(request: Request, next_path: str, error: str | None, status_code: int = 200) -> Response:
    nonce = secrets.token_urlsafe(24)
    response = render(request, "sign_in.html", {"next": next_path, "error": error, "nonce": nonce}, status_code)
    response.set_cookie(
        SIGN_IN_COOKIE,
        nonce,
        httponly=True,
        samesite="strict",
        secure=request.app.state.settings.secure_cookies,
        path=site(request, "/sign-in"),
        max_age=3600,
    )
    return response


@router.get("/sign-in")
def sign_in_form(request: Request, next: str = "/campaigns") -> Response:
    return _sign_in_page(request, _safe_next(next), None)


@router.post("/sign-in")
def sign_in(
    request: Request,
    session: DB,
    token: str = Form(""),
    next: str = Form("/campaigns"),
    nonce: str = Form(""),
) -> Response:
    if _cross_site(request):
        return _refuse_cross_site(request)
    expected = request.cookies.get(SIGN_IN_COOKIE)
    if not expected or not secrets.compare_digest(expected, nonce):
        return _sign_in_page(
            request, _safe_next(next), "The sign-in form had expired; please paste the token again.", 400
        )
    settings = request.app.state.settings
    new = auth.start_session(session, token.strip(), settings.session_lifetime)
    if new is None:
        return _sign_in_page(request, _safe_next(next), "That token is unknown, revoked or expired.", 401)
    response = RedirectResponse(site(request, _safe_next(next)), status_code=303)
    set_session_cookie(response, new, settings)
    response.delete_cookie(SIGN_IN_COOKIE, path=site(request, "/sign-in"))
    return response


@router.post("/sign-out")
async def sign_out(request: Request, _who: Reader, session: DB) -> Response:
    refused = _refused_form(request, (await request.form()).get(CSRF_FIELD))
    if refused is not None:
        return refused
    auth.end_session(session, request.cookies.get(SESSION_COOKIE))
    response = RedirectResponse(site(request, "/sign-in"), status_code=303)
    clear_session_cookie(response)
    return response


# ---------------------------------------------------------------------- campaigns


@router.get("/campaigns")
def campaign_list(request: Request, _who: Reader, session: DB) -> Response:
    return render(request, "campaigns.html", {"cards": overview.campaign_cards(session), "active": "campaigns"})


def _live(request: Request, slug: str, cursor: int, page: str, **extra: Any) -> dict[str, Any]:
    return {
        "url": site(request, f"/campaigns/{quote(slug)}/live"),
        "cursor": cursor,
        "interval_ms": LIVE_INTERVAL_MS,
        "page": page,
        **extra,
    }


@router.get("/campaigns/{slug}")
def campaign_overview(request: Request, campaign: PageCampaign, session: DB) -> Response:
    slug = campaign.slug
    data = overview.overview(session, campaign, site(request, f"/campaigns/{quote(slug)}/shots/{{shot_id}}"))
    regime = {
        "url": site(request, f"/campaigns/{quote(slug)}/regime.json"),
        "x": data.regime_axes[0],
        "y": data.regime_axes[1],
    }
    return render(
        request,
        "overview.html",
        {
            "campaign": campaign,
            "data": data,
            "live": _live(request, slug, data.live_cursor, "overview"),
            "regime": regime,
            "active": "overview",
        },
    )


@router.get("/campaigns/{slug}/regime.json")
def regime_feed(x: str, y: str, _who: FeedReader, campaign: PathCampaign, session: DB) -> Response:
    return json_response(overview.regime_feed(session, campaign, x, y))


@router.get("/campaigns/{slug}/charts/{name}.json")
def chart_feed(name: str, _who: FeedReader, campaign: PathCampaign, session: DB) -> Response:
    if name not in overview.CHART_FEEDS:
        raise NotFound(f"chart {name!r} of campaign {campaign.slug!r}")
    return json_response(overview.chart_feed(session, campaign, name))


@router.get("/campaigns/{slug}/live")
def live_feed(
    request: Request,
    _who: FeedReader,
    campaign: PathCampaign,
    session: DB,
    since: Annotated[int, Query(ge=0, le=2**63 - 1)] = 0,
    fields: str = "",
) -> Response:
    shot_url = site(request, f"/campaigns/{quote(campaign.slug)}/shots/{{shot_id}}")
    return json_response(overview.live_update(session, campaign, since, shot_url, overview.live_extra(fields)))


# ---------------------------------------------------------------------- shot table


def _table_query(request: Request, campaign: Campaign) -> tuple[table.TableQuery, list[tuple[str, str]]]:
    try:
        return table.parse_table_query(dict(request.query_params), campaign), []
    except InvalidInput as exc:
        return table.TableQuery(table.ShotFilter(), params={}), exc.problems


@router.get("/campaigns/{slug}/shots")
def shot_table(request: Request, campaign: PageCampaign, session: DB) -> Response:
    slug = campaign.slug
    query, problems = _table_query(request, campaign)
    page = table.table_page(session, campaign, query) if not problems else None
    live = _live(
        request,
        slug,
        page.live_cursor if page else 0,
        "table",
        # New rows only belong at the top of the default view (newest first, no filter).
        prepend=bool(page) and page is not None and page.page == 1 and query.sort == "taken_at" and query.descending,
        filter={
            "status": query.filter.status,
            "flag": query.filter.flag_code,
            "seed": query.filter.seed_method,
            "text": query.filter.text,
            "bounded": bool(query.filter.taken_to or query.filter.taken_from),
            "only_excluded": query.filter.excluded == "only",  # a new shot is never an excluded one
        },
    )
    return render(
        request,
        "shots.html",
        {
            "campaign": campaign,
            "page": page,
            "query": query,
            "problems": problems,
            "live": live,
            "flag_codes": table.FLAG_CODES,
            "seed_methods": table.SEED_METHODS,
            "excluded_choices": table.EXCLUDED_CHOICES,
            "columns": table.table_columns(),
            "table_notes_chars": table.TABLE_NOTES_CHARS,
            "link": lambda **changes: site(request, _table_link(slug, query.params, changes)),
            "csv_link": site(request)
            + f"/campaigns/{quote(slug)}/shots.csv"
            + (f"?{urlencode(query.params)}" if query.params else ""),
            "active": "shots",
        },
        422 if problems else 200,
    )


def _table_link(slug: str, params: dict[str, str], changes: dict[str, Any]) -> str:
    merged = {**params, **{k: str(v) for k, v in changes.items() if v is not None}}
    merged = {k: v for k, v in merged.items() if v != ""}
    return f"/campaigns/{quote(slug)}/shots" + (f"?{urlencode(merged)}" if merged else "")


@router.get("/campaigns/{slug}/shots.csv")
def shot_table_csv(slug: str, request: Request, _who: Reader, _budget: ExpensiveRead) -> Response:
    factory = request.app.state.session_factory
    with factory() as session:
        campaign = find_campaign(session, slug)
        if campaign is None:
            raise PageNotFound(f"Campaign {slug!r}")
        query, problems = _table_query(request, campaign)
    if problems:
        return Response("; ".join(f"{p}: {r}" for p, r in problems), status_code=422, media_type="text/plain")

    def pieces() -> Any:
        with factory() as session:  # the stream outlives the request's session
            yield from csv_lines(table.csv_chunks(session, campaign, query))

    return streamed_file(pieces(), "text/csv; charset=utf-8", f"{slug}-shots.csv")


# ------------------------------------------------------------------------ one shot


def _shot_page(
    request: Request,
    campaign: Campaign,
    session: DB,
    shot_id: str,
    exclusion_errors: list[tuple[str, str]] | None = None,
    status_code: int = 200,
) -> Response:
    detail = shot_page.shot_detail(session, campaign, shot_id)
    if detail is None:
        raise PageNotFound(f"Shot {shot_id!r} in campaign {campaign.slug!r}")
    return render(
        request,
        "shot.html",
        {
            "campaign": campaign,
            "d": detail,
            "active": "shots",
            "detailed": _prefixed_panel(request, detailed_runs.shot_panel(session, campaign, detail.shot)),
            "exclusion_errors": exclusion_errors or [],
            "reason_max": exclusions.MAX_REASON_CHARS,
        },
        status_code,
    )


@router.get("/campaigns/{slug}/shots/{shot_id}")
def shot_detail(shot_id: str, request: Request, campaign: PageCampaign, session: DB) -> Response:
    return _shot_page(request, campaign, session, shot_id)


async def _exclusion_form(request: Request, campaign: Campaign, session: DB, shot_id: str, exclude: bool) -> Response:
    """The shot page's exclude and restore forms (ingest sessions): the change, then back to the page."""
    form = await request.form()
    what = "Excluding shots" if exclude else "Restoring excluded shots"
    refused = _role_only(request, "ingest", what) or _refused_form(request, form.get(CSRF_FIELD))
    if refused is not None:
        return refused
    actor = request.state.principal.actor
    try:
        if exclude:
            exclusions.exclude_shot(session, campaign.slug, shot_id, form.get("reason"), actor)
        else:
            exclusions.restore_shot(session, campaign.slug, shot_id, actor)
    except NotFound:
        raise PageNotFound(f"Shot {shot_id!r} in campaign {campaign.slug!r}") from None
    except (InvalidInput, Conflict) as exc:
        problems = exc.problems or [("reason", exc.detail)]
        return _shot_page(request, campaign, session, shot_id, problems, 409 if isinstance(exc, Conflict) else 422)
    return RedirectResponse(site(request, f"/campaigns/{quote(campaign.slug)}/shots/{quote(shot_id)}"), status_code=303)


@router.post("/campaigns/{slug}/shots/{shot_id}/exclude")
async def shot_exclude(shot_id: str, request: Request, campaign: PageCampaign, session: DB) -> Response:
    return await _exclusion_form(request, campaign, session, shot_id, exclude=True)


@router.post("/campaigns/{slug}/shots/{shot_id}/restore")
async def shot_restore(shot_id: str, request: Request, campaign: PageCampaign, session: DB) -> Response:
    return await _exclusion_form(request, campaign, session, shot_id, exclude=False)


# ------------------------------------------------------------------------ settings


def _role_only(request: Request, role: str, what: str) -> Response | None:
    """The page that refuses a signed-in session below ``role`` (403), or None."""
    who: TokenInfo = request.state.principal
    if who.can(role):
        return None
    title = "Admins only" if role == "admin" else f"The {role} role only"
    return render(
        request,
        "error.html",
        {"title": title, "message": f"{what} needs the {role} role; you are signed in as {who.role}."},
        403,
    )


def _admins_only(request: Request, what: str = "Changing the limits and model settings") -> Response | None:
    """The page that refuses a signed-in viewer or ingester (403), or None for an admin."""
    return _role_only(request, "admin", what)


_JOB_ID = re.compile(r"[0-9a-fA-F-]{1,64}")


@router.get("/campaigns/{slug}/settings")
def settings_page(request: Request, campaign: PageCampaign, session: DB, job: str | None = None) -> Response:
    refused = _admins_only(request)
    if refused is not None:
        return refused
    form = settings_form.settings_form(session, campaign)
    job_id = job if job and _JOB_ID.fullmatch(job) else form.latest_job_id
    return _settings_page(request, session, campaign, form, job_id=job_id)


def _settings_page(
    request: Request,
    session: DB,
    campaign: Campaign,
    form: settings_form.SettingsForm,
    *,
    errors: dict[str, str] | None = None,
    job_id: str | None = None,
    alerts: alert_panel.AlertPanel | None = None,
    status_code: int = 200,
) -> Response:
    context = {
        "campaign": campaign,
        "form": form,
        "errors": errors or {},
        "saved": False,
        "job_id": job_id,
        "alerts": alerts or alert_panel.alert_panel(session, campaign),
        "active": "settings",
    }
    return render(request, "settings.html", context, status_code)


@router.post("/campaigns/{slug}/settings")
async def settings_save(request: Request, campaign: PageCampaign, session: DB) -> Response:
    refused = _admins_only(request)
    if refused is not None:
        return refused
    form = await request.form()
    refused = _refused_form(request, form.get(CSRF_FIELD))
    if refused is not None:
        return refused
    submitted = {k: v for k, v in form.items() if isinstance(v, str) and k != CSRF_FIELD}
    outcome = settings_form.save_settings(session, campaign, submitted, request.state.principal.actor)
    if outcome.errors:
        return _settings_page(request, session, campaign, outcome.form, errors=outcome.errors, status_code=422)
    return RedirectResponse(
        site(request, f"/campaigns/{quote(campaign.slug)}/settings?job={quote(outcome.job_id or '')}"), status_code=303
    )


@router.post("/campaigns/{slug}/settings/webhooks")
async def settings_add_webhook(request: Request, campaign: PageCampaign, session: DB) -> Response:
    form = await request.form()
    refused = _admins_only(request, "Adding alert targets") or _refused_form(request, form.get(CSRF_FIELD))
    if refused is not None:
        return refused
    submitted = alert_panel.TargetForm(
        url=str(form.get("url") or ""),
        statuses=[v for v in form.getlist("statuses") if isinstance(v, str)],
        flags=[v for v in form.getlist("flags") if isinstance(v, str)],
    )
    errors = alert_panel.add_from_form(session, campaign, submitted, request.state.principal.actor)
    if errors:
        panel = alert_panel.alert_panel(session, campaign, submitted, errors)
        form_view = settings_form.settings_form(session, campaign)
        return _settings_page(request, session, campaign, form_view, alerts=panel, status_code=422)
    return RedirectResponse(site(request, f"/campaigns/{quote(campaign.slug)}/settings#alerts"), status_code=303)


@router.post("/campaigns/{slug}/settings/webhooks/{webhook_id}/delete")
async def settings_delete_webhook(
    webhook_id: Annotated[int, Path(ge=1, le=2**31 - 1)], request: Request, campaign: PageCampaign, session: DB
) -> Response:
    form = await request.form()
    refused = _admins_only(request, "Deleting alert targets") or _refused_form(request, form.get(CSRF_FIELD))
    if refused is not None:
        return refused
    try:
        alert_panel.delete_from_form(session, campaign, webhook_id, request.state.principal.actor)
    except NotFound as exc:
        raise PageNotFound(exc.what.capitalize()) from None
    return RedirectResponse(site(request, f"/campaigns/{quote(campaign.slug)}/settings#alerts"), status_code=303)


# ------------------------------------------------------------------------ administration


def _admin_page(
    request: Request,
    session: DB,
    *,
    new_token: Any = None,
    errors: list[tuple[str, str]] | None = None,
    status_code: int = 200,
) -> Response:
    params = request.query_params
    before = params.get("before")
    audit_filter = {"campaign": params.get("campaign") or None, "action": params.get("action") or None}
    audit = administration.audit_page(
        session,
        campaign=audit_filter["campaign"],
        action=audit_filter["action"],
        before=int(before) if before and before.isdigit() and len(before) < 19 else None,
    )
    older = {k: v for k, v in audit_filter.items() if v} | {"before": str(audit.next_before)}
    return render(
        request,
        "admin.html",
        {
            "tokens": administration.token_list(session).items,
            "jobs": job_service.job_list(session),
            "audit": audit,
            "audit_filter": audit_filter,
            "older_link": site(request, "/admin?") + urlencode(older) + "#audit",
            "roles": auth.ROLES,
            "new_token": new_token,
            "errors": errors or [],
            "active": "admin",
        },
        status_code,
    )


@router.get("/admin")
def admin_page(request: Request, _who: Reader, session: DB) -> Response:
    return _admins_only(request, "The administration page") or _admin_page(request, session)


@router.post("/admin/tokens")
async def admin_create_token(request: Request, who: Reader, session: DB) -> Response:
    form = await request.form()
    refused = _admins_only(request, "Creating tokens") or _refused_form(request, form.get(CSRF_FIELD))
    if refused is not None:
        return refused
    days = str(form.get("expires_in_days") or "").strip()
    try:
        data = TokenCreate(
            name=str(form.get("name") or "").strip(),
            role=str(form.get("role") or ""),  # type: ignore[arg-type]
            expires_in_days=float(days) if days else None,
        )
    except (ValueError, TypeError) as exc:
        problems = exc.errors() if hasattr(exc, "errors") else []
        listed = [(".".join(str(p) for p in e["loc"]), e["msg"]) for e in problems] or [("expires_in_days", str(exc))]
        return _admin_page(request, session, errors=listed, status_code=422)
    created = administration.create_token(session, data, who)
    return _admin_page(request, session, new_token=created)


@router.post("/admin/tokens/{token_id}/revoke")
async def admin_revoke_token(
    token_id: Annotated[int, Path(ge=1, le=2**31 - 1)], request: Request, who: Reader, session: DB
) -> Response:
    form = await request.form()
    refused = _admins_only(request, "Revoking tokens") or _refused_form(request, form.get(CSRF_FIELD))
    if refused is not None:
        return refused
    administration.revoke_token(session, token_id, who)
    return RedirectResponse(site(request, "/admin#tokens"), status_code=303)


@router.post("/admin/jobs/{job_id}/cancel")
async def admin_cancel_job(job_id: str, request: Request, who: Reader, session: DB) -> Response:
    form = await request.form()
    refused = _admins_only(request, "Cancelling jobs") or _refused_form(request, form.get(CSRF_FIELD))
    if refused is not None:
        return refused
    try:
        job_service.cancel_job(session, job_id, who)
    except (Conflict, Forbidden) as exc:
        return _admin_page(request, session, errors=[("job", exc.detail)], status_code=409)
    return RedirectResponse(site(request, "/admin#jobs"), status_code=303)
