"""The dashboard: server-rendered pages (Jinja2, autoescaped) and their small JSON feeds.

Pages carry a strict Content-Security-Policy: scripts only from this server, no inline
script. Chart data travels as JSON in ``<script type="application/json">`` blocks
(encoded by ``json_for_html``, which escapes <, > and &) or from the JSON feeds, and
is read by app/static/js/wakeledger.js. Plotly's JavaScript is served from the
installed plotly package.
"""

from __future__ import annotations

import csv
import io
import json
import math
import re
from collections.abc import Iterator
from datetime import date, datetime
from pathlib import Path
from typing import Any
from urllib.parse import quote, urlencode, urlsplit

import jinja2
import plotly
from fastapi import APIRouter, Depends, Form, Request
from fastapi.responses import FileResponse, RedirectResponse, Response, StreamingResponse
from fastapi.templating import Jinja2Templates
from markupsafe import Markup
from sqlalchemy.orm import Session

from app.advisory import add_caution_global
from app.deps import get_session
from app.problems import ProblemError
from app.services import auth
from app.services import dashboard as dash
from app.services.auth import TokenInfo
from app.services.charts import STATUS_STYLES
from app.store import dashboard as store
from app.tables import Campaign

APP_DIR = Path(__file__).resolve().parent.parent
STATIC_DIR = APP_DIR / "static"
PLOTLY_JS = Path(plotly.__file__).resolve().parent / "package_data" / "plotly.min.js"

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

router = APIRouter(include_in_schema=False)


# ------------------------------------------------------------------------- rendering


def _plain(value: Any) -> Any:
    """JSON-ready values: NaN and infinity become null, dates become ISO text."""
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, (datetime, date)):
        return value.isoformat()
    if hasattr(value, "tolist"):  # numpy arrays and scalars
        return _plain(value.tolist())
    return value


_HTML_UNSAFE = {ord("<"): "\\u003c", ord(">"): "\\u003e", ord("&"): "\\u0026",
                0x2028: "\\u2028", 0x2029: "\\u2029"}


def _json_default(value: Any) -> Any:
    if isinstance(value, (datetime, date)):
        return value.isoformat()
    if hasattr(value, "tolist"):  # numpy arrays and scalars
        return _plain(value.tolist())
    if hasattr(value, "__dataclass_fields__"):
        return _plain({k: getattr(value, k) for k in value.__dataclass_fields__})
    raise TypeError(f"cannot write {type(value).__name__} as JSON")


def json_text(value: Any) -> str:
    """Compact JSON; NaN and infinity become null (chart builders already send plain numbers)."""
    try:
        return json.dumps(value, separators=(",", ":"), allow_nan=False, ensure_ascii=False, default=_json_default)
    except ValueError:  # a NaN somewhere: clean the whole value once
        return json.dumps(_plain(value), separators=(",", ":"), allow_nan=False, ensure_ascii=False,
                          default=_json_default)


def json_for_html(value: Any) -> Markup:
    """JSON safe inside <script type="application/json">: no character can close the element."""
    text = json_text(value)
    for char, escaped in _HTML_UNSAFE.items():
        text = text.replace(chr(char), escaped)
    return Markup(text)


def json_response(value: Any, status_code: int = 200) -> Response:
    return Response(json_text(value).encode("utf-8"), status_code=status_code, media_type="application/json",
                    headers={"Cache-Control": "no-store", "X-Content-Type-Options": "nosniff"})


def _environment() -> jinja2.Environment:
    env = jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(APP_DIR / "templates")),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    env.filters["json_for_html"] = json_for_html
    env.filters["num"] = dash.format_number
    env.filters["urlpart"] = lambda v: quote(str(v), safe="")
    env.filters["localtime"] = dash.local_time_text
    env.globals["status_styles"] = STATUS_STYLES
    env.globals["phase_window_shots"] = dash.NEIGHBOUR_WINDOW_SHOTS
    return add_caution_global(env)


templates = Jinja2Templates(env=_environment())


def render(request: Request, name: str, context: dict[str, Any], status_code: int = 200) -> Response:
    context = {"principal": getattr(request.state, "principal", None), "campaign": None,
               "active": "", **context}
    campaign: Campaign | None = context["campaign"]
    if campaign is not None and "summary" not in context:
        with request.app.state.session_factory() as session:
            context["summary"] = dash.campaign_summary_links(session, campaign)
    context.setdefault("summary", None)
    response = templates.TemplateResponse(request, name, context, status_code=status_code)
    response.headers.update(PAGE_HEADERS)
    return response


# --------------------------------------------------------------------------- access


class SignInRequired(Exception):
    pass


def _principal(request: Request) -> TokenInfo | None:
    try:
        return auth.principal_from_request(request)
    except ProblemError:
        return None  # a stale or revoked cookie: treat as signed out


def _safe_next(target: str | None) -> str:
    """Only same-site paths after sign-in (no //host or scheme)."""
    if not target or not target.startswith("/") or target.startswith("//") or "\\" in target:
        return "/campaigns"
    return target


def _sign_in_redirect(request: Request) -> RedirectResponse:
    target = request.url.path + (f"?{request.url.query}" if request.url.query else "")
    return RedirectResponse("/sign-in?" + urlencode({"next": target}), status_code=303)


def viewer(request: Request) -> TokenInfo:
    info = _principal(request)
    if info is None or not info.can("viewer"):
        raise SignInRequired()
    request.state.principal = info
    return info


def feed_viewer(request: Request) -> TokenInfo:
    """The JSON feeds answer 401 instead of redirecting."""
    return auth.require_role("viewer")(request)


def _cross_site(request: Request) -> bool:
    """A form posted from another site (besides the SameSite=Lax cookie, check Origin)."""
    origin = request.headers.get("origin")
    if not origin or origin == "null":
        return origin == "null"
    return urlsplit(origin).netloc != request.headers.get("host", request.url.netloc)


def _refuse_cross_site(request: Request) -> Response:
    return render(request, "error.html", {"title": "Refused",
                  "message": "This form was sent from another site, so nothing was changed."}, 403)


def _campaign_or_none(session: Session, slug: str) -> Campaign | None:
    return store.campaign_by_slug(session, slug)


def _not_found(request: Request, what: str) -> Response:
    return render(request, "error.html", {"title": "Not found", "message": f"{what} does not exist."}, 404)


def install_page_handlers(app: Any) -> None:
    """Signed-out visitors are sent to the sign-in page; called by app.main."""

    async def on_sign_in_required(request: Request, _exc: SignInRequired) -> Response:
        return _sign_in_redirect(request)

    app.add_exception_handler(SignInRequired, on_sign_in_required)


# ------------------------------------------------------------------------ assets


@router.get("/assets/plotly.min.js")
def plotly_js() -> FileResponse:
    return FileResponse(PLOTLY_JS, media_type="text/javascript",
                        headers={"Cache-Control": "public, max-age=86400"})


# ----------------------------------------------------------------------- sign-in


@router.get("/")
def home(request: Request) -> Response:
    return RedirectResponse("/campaigns" if _principal(request) else "/sign-in", status_code=303)


@router.get("/sign-in")
def sign_in_form(request: Request, next: str = "/campaigns") -> Response:
    return render(request, "sign_in.html", {"next": _safe_next(next), "error": None})


@router.post("/sign-in")
def sign_in(request: Request, token: str = Form(""), next: str = Form("/campaigns"),
            session: Session = Depends(get_session)) -> Response:
    info = auth.resolve_token(session, token.strip())
    if info is None:
        return render(request, "sign_in.html",
                      {"next": _safe_next(next), "error": "That token is unknown or revoked."}, 401)
    response = RedirectResponse(_safe_next(next), status_code=303)
    auth.set_session_cookie(response, token.strip(), request.app.state.settings)
    return response


@router.post("/sign-out")
def sign_out(request: Request) -> Response:
    if _cross_site(request):
        return _refuse_cross_site(request)
    response = RedirectResponse("/sign-in", status_code=303)
    auth.clear_session_cookie(response)
    return response


# ---------------------------------------------------------------------- campaigns


@router.get("/campaigns")
def campaign_list(request: Request, _who: TokenInfo = Depends(viewer), session: Session = Depends(get_session)) -> Response:
    return render(request, "campaigns.html", {"cards": dash.campaign_cards(session), "active": "campaigns"})


@router.get("/campaigns/{slug}")
def campaign_overview(slug: str, request: Request, _who: TokenInfo = Depends(viewer),
                      session: Session = Depends(get_session)) -> Response:
    campaign = _campaign_or_none(session, slug)
    if campaign is None:
        return _not_found(request, f"Campaign {slug!r}")
    data = dash.overview(session, campaign)
    live = {"url": f"/campaigns/{quote(slug)}/live", "cursor": data.live_cursor, "interval_ms": 2500,
            "page": "overview"}
    regime = {"url": f"/campaigns/{quote(slug)}/regime.json", "x": data.regime_axes[0], "y": data.regime_axes[1]}
    return render(request, "overview.html", {"campaign": campaign, "data": data, "live": live,
                                             "regime": regime, "active": "overview"})


@router.get("/campaigns/{slug}/regime.json")
def regime_feed(slug: str, x: str, y: str, _who: TokenInfo = Depends(feed_viewer),
                session: Session = Depends(get_session)) -> Response:
    campaign = _campaign_or_none(session, slug)
    if campaign is None:
        return json_response({"title": "Not found", "detail": f"campaign {slug!r} does not exist"}, 404)
    bad = [name for name in (x, y) if name not in store.NUMERIC_COLUMNS]
    if bad:
        return json_response({"title": "Invalid input", "detail": f"cannot plot {', '.join(bad)}",
                              "errors": [{"field": "x" if b == x else "y", "reason": "not a numeric input or output"} for b in bad]}, 422)
    return json_response(dash.chart_feed(session, campaign, "regime", x=x, y=y))


@router.get("/campaigns/{slug}/charts/{name}.json")
def chart_feed(slug: str, name: str, _who: TokenInfo = Depends(feed_viewer),
               session: Session = Depends(get_session)) -> Response:
    campaign = _campaign_or_none(session, slug)
    if campaign is None or name not in dash.CHART_FEEDS:
        return json_response({"title": "Not found", "detail": f"no chart {name!r} for campaign {slug!r}"}, 404)
    return json_response(dash.chart_feed(session, campaign, name))


@router.get("/campaigns/{slug}/live")
def live_feed(slug: str, since: int = 0, fields: str = "", _who: TokenInfo = Depends(feed_viewer),
              session: Session = Depends(get_session)) -> Response:
    campaign = _campaign_or_none(session, slug)
    if campaign is None:
        return json_response({"title": "Not found", "detail": f"campaign {slug!r} does not exist"}, 404)
    extra = [f for f in fields.split(",") if f in store.NUMERIC_COLUMNS][:4]
    shot_url = f"/campaigns/{quote(slug)}/shots/{{shot_id}}"
    return json_response(dash.live_update(session, campaign, since, shot_url, extra))


# ---------------------------------------------------------------------- shot table


def _table_query(request: Request, campaign: Campaign) -> tuple[dash.TableQuery, list[tuple[str, str]]]:
    params = dict(request.query_params)
    try:
        return dash.parse_table_query(params, campaign, dash.known_flag_codes()), []
    except dash.TableQueryError as exc:
        return dash.TableQuery(store.ShotFilter(), params={}), exc.problems


@router.get("/campaigns/{slug}/shots")
def shot_table(slug: str, request: Request, _who: TokenInfo = Depends(viewer),
               session: Session = Depends(get_session)) -> Response:
    campaign = _campaign_or_none(session, slug)
    if campaign is None:
        return _not_found(request, f"Campaign {slug!r}")
    query, problems = _table_query(request, campaign)
    page = dash.table_page(session, campaign, query) if not problems else None
    live = {"url": f"/campaigns/{quote(slug)}/live", "cursor": page.live_cursor if page else 0,
            "interval_ms": 2500, "page": "table",
            # New rows only belong at the top of the default view (newest first, no filter).
            "prepend": bool(page) and page.page == 1 and query.sort == "taken_at" and query.descending,
            "filter": {"status": query.filter.status, "flag": query.filter.flag_code,
                       "seed": query.filter.seed_method, "text": query.filter.text,
                       "bounded": bool(query.filter.taken_to or query.filter.taken_from)}}
    return render(request, "shots.html", {
        "campaign": campaign, "page": page, "query": query, "problems": problems, "live": live,
        "flag_codes": dash.known_flag_codes(), "statuses": store.STATUSES,
        "seed_methods": dash.SEED_METHODS, "columns": dash.table_columns(),
        "link": lambda **changes: _table_link(slug, query.params, changes),
        "csv_link": f"/campaigns/{quote(slug)}/shots.csv" + (f"?{urlencode(query.params)}" if query.params else ""),
        "active": "shots",
    }, 422 if problems else 200)


def _table_link(slug: str, params: dict[str, str], changes: dict[str, Any]) -> str:
    merged = {**params, **{k: str(v) for k, v in changes.items() if v is not None}}
    merged = {k: v for k, v in merged.items() if v != ""}
    return f"/campaigns/{quote(slug)}/shots" + (f"?{urlencode(merged)}" if merged else "")


@router.get("/campaigns/{slug}/shots.csv")
def shot_table_csv(slug: str, request: Request, _who: TokenInfo = Depends(viewer)) -> Response:
    factory = request.app.state.session_factory
    with factory() as session:
        campaign = _campaign_or_none(session, slug)
        if campaign is None:
            return _not_found(request, f"Campaign {slug!r}")
        query, problems = _table_query(request, campaign)
    if problems:
        return Response("; ".join(f"{p}: {r}" for p, r in problems), status_code=422, media_type="text/plain")

    def lines() -> Iterator[str]:
        buffer = io.StringIO()
        writer = csv.writer(buffer, lineterminator="\r\n")
        writer.writerow(dash.csv_header())
        with factory() as session:
            for i, row in enumerate(dash.csv_rows(session, campaign, query), 1):
                writer.writerow(row)
                if i % 500 == 0:
                    yield buffer.getvalue()
                    buffer.seek(0)
                    buffer.truncate()
        yield buffer.getvalue()

    filename = f"{slug}-shots.csv"
    return StreamingResponse(lines(), media_type="text/csv; charset=utf-8",
                             headers={"Content-Disposition": f'attachment; filename="{filename}"',
                                      "Cache-Control": "no-store"})


# ------------------------------------------------------------------------ one shot


@router.get("/campaigns/{slug}/shots/{shot_id}")
def shot_detail(slug: str, shot_id: str, request: Request, _who: TokenInfo = Depends(viewer),
                session: Session = Depends(get_session)) -> Response:
    campaign = _campaign_or_none(session, slug)
    if campaign is None:
        return _not_found(request, f"Campaign {slug!r}")
    detail = dash.shot_detail(session, campaign, shot_id)
    if detail is None:
        return _not_found(request, f"Shot {shot_id!r} in campaign {slug!r}")
    from app.services.detailed_runs import shot_panel

    return render(request, "shot.html", {"campaign": campaign, "d": detail, "active": "shots",
                                         "detailed": shot_panel(session, campaign, detail.shot)})


# ------------------------------------------------------------------------ settings


def _settings_campaign_or_page(request: Request, session: Session, slug: str) -> Campaign | Response:
    """The campaign whose settings an admin opens, or the page that refuses (404 or 403)."""
    campaign = _campaign_or_none(session, slug)
    if campaign is None:
        return _not_found(request, f"Campaign {slug!r}")
    who: TokenInfo = request.state.principal
    if not who.can("admin"):
        return render(request, "error.html", {"title": "Admins only",
                      "message": "Changing the limits and model settings needs the admin role; "
                                 f"you are signed in as {who.role}."}, 403)
    return campaign


_JOB_ID = re.compile(r"[0-9a-fA-F-]{1,64}")


@router.get("/campaigns/{slug}/settings")
def settings_form(slug: str, request: Request, job: str | None = None, _who: TokenInfo = Depends(viewer),
                  session: Session = Depends(get_session)) -> Response:
    campaign = _settings_campaign_or_page(request, session, slug)
    if isinstance(campaign, Response):
        return campaign
    form = dash.settings_form(session, campaign)
    job_id = job if job and _JOB_ID.fullmatch(job) else form.latest_job_id
    return render(request, "settings.html", {"campaign": campaign, "form": form, "errors": {}, "saved": False,
                                             "job_id": job_id, "active": "settings"})


@router.post("/campaigns/{slug}/settings")
async def settings_save(slug: str, request: Request, _who: TokenInfo = Depends(viewer),
                        session: Session = Depends(get_session)) -> Response:
    campaign = _settings_campaign_or_page(request, session, slug)
    if isinstance(campaign, Response):
        return campaign
    if _cross_site(request):
        return _refuse_cross_site(request)
    submitted = {k: v for k, v in (await request.form()).items() if isinstance(v, str)}
    outcome = dash.save_settings(request.app, session, campaign, submitted, request.state.principal.actor)
    if outcome.errors:
        return render(request, "settings.html", {"campaign": campaign, "form": outcome.form, "errors": outcome.errors,
                                                 "saved": False, "job_id": None, "active": "settings"}, 422)
    return RedirectResponse(f"/campaigns/{quote(slug)}/settings?job={quote(outcome.job_id or '')}", status_code=303)
