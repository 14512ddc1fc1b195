"""Dashboard pages: sign-in, campaign list, overview data, table, shot page, settings."""

from __future__ import annotations

import csv
import io
import json
import math
import re
from datetime import UTC

import numpy as np
import pytest

from app.presentation.charts import text_for_chart
from app.presentation.csv_writer import defuse
from app.presentation.json_text import json_for_html
from app.routers.deps import SESSION_COOKIE
from app.routers.pages import CONTENT_SECURITY_POLICY
from app.services.campaigns import find_campaign
from app.services.dashboard import figures, overview, settings_form, shot_page, table
from app.services.phase_spread import JITTER_SOURCES
from app.store import dashboard as store
from tests.support import shot_to_shot_reference as reference
from tests.support.jobs import run_queued_jobs
from tests.support.sessions import page_csrf, sign_in_form

SLUG = "test-campaign"


def _campaign(db):
    return find_campaign(db, SLUG)


def _chart(html: str, chart_id: str) -> dict:
    match = re.search(rf'<script type="application/json" data-chart="{chart_id}">(.*?)</script>', html, re.S)
    assert match, f"no data block for {chart_id}"
    return json.loads(match.group(1))


# ------------------------------------------------------------------------ sign-in


def test_signed_out_visitor_is_sent_to_sign_in_and_back_to_the_page_afterwards(client, seeded, viewer_token):
    response = client.get(f"/campaigns/{SLUG}/shots?status=outside", follow_redirects=False)
    assert response.status_code == 303
    assert response.headers["location"].startswith("/sign-in?next=")
    response = sign_in_form(client, viewer_token, f"/campaigns/{SLUG}/shots?status=outside")
    assert response.status_code == 303
    assert response.headers["location"] == f"/campaigns/{SLUG}/shots?status=outside"


def test_sign_in_keeps_a_random_session_id_in_an_httponly_cookie_never_the_token(client, viewer_token):
    response = sign_in_form(client, viewer_token)
    cookie = response.headers["set-cookie"]
    assert cookie.startswith(f"{SESSION_COOKIE}=")
    assert viewer_token not in cookie and viewer_token.removeprefix("wlt_") not in cookie
    assert "HttpOnly" in cookie and "samesite=lax" in cookie.lower() and "Secure" not in cookie
    assert client.get("/campaigns").status_code == 200


def test_sign_out_ends_the_session_on_the_server_too(client, viewer_token):
    sign_in_form(client, viewer_token)
    session_id = client.cookies.get(SESSION_COOKIE)
    response = client.post("/sign-out", data={"csrf_token": page_csrf(client)}, follow_redirects=False)
    assert response.status_code == 303
    assert "Max-Age=0" in response.headers["set-cookie"] or "expires=" in response.headers["set-cookie"].lower()
    client.cookies.set(SESSION_COOKIE, session_id)  # a copied cookie no longer signs anyone in
    response = client.get("/campaigns", follow_redirects=False)
    assert response.status_code == 303 and response.headers["location"].startswith("/sign-in")


def test_sign_out_without_the_pages_csrf_token_changes_nothing(client, viewer_token):
    sign_in_form(client, viewer_token)
    assert client.post("/sign-out", data={}, follow_redirects=False).status_code == 403
    assert client.get("/campaigns").status_code == 200


def test_sign_in_cookie_is_secure_when_the_settings_ask_for_it(settings, viewer_token, app):
    from starlette.testclient import TestClient

    from app.main import create_app

    secure_app = create_app(settings.model_copy(update={"secure_cookies": True}))
    with TestClient(secure_app, base_url="https://testserver") as secure_client:
        response = sign_in_form(secure_client, viewer_token)
        assert "Secure" in response.headers["set-cookie"]
    secure_app.state.engine.dispose()


def test_sign_in_with_an_unknown_token_is_refused_with_a_clear_message(client):
    response = sign_in_form(client, "wlt_not-a-token")
    assert response.status_code == 401
    assert "unknown, revoked or expired" in response.text
    assert SESSION_COOKIE not in response.headers.get("set-cookie", "")


def test_sign_in_posted_from_another_site_is_refused(client, viewer_token):
    response = sign_in_form(client, viewer_token, Origin="http://elsewhere.invalid")
    assert response.status_code == 403
    assert SESSION_COOKIE not in response.headers.get("set-cookie", "")


def test_sign_in_without_the_forms_one_off_value_is_refused(client, viewer_token):
    response = client.post("/sign-in", data={"token": viewer_token}, follow_redirects=False)
    assert response.status_code == 400
    assert SESSION_COOKIE not in response.headers.get("set-cookie", "")


def test_sign_in_never_redirects_to_another_site(client, viewer_token):
    response = sign_in_form(client, viewer_token, "//elsewhere.invalid/x")
    assert response.headers["location"] == "/campaigns"


def test_a_revoked_or_stale_cookie_counts_as_signed_out(client):
    client.cookies.set(SESSION_COOKIE, "made-up-session-id")
    response = client.get("/campaigns", follow_redirects=False)
    assert response.status_code == 303 and response.headers["location"].startswith("/sign-in")


# --------------------------------------------------------------- every page


@pytest.mark.parametrize(
    "path",
    [
        "/campaigns",
        f"/campaigns/{SLUG}",
        f"/campaigns/{SLUG}/shots",
        f"/campaigns/{SLUG}/shots/pg-0000",
        f"/campaigns/{SLUG}/settings",
        f"/campaigns/{SLUG}/plan",
    ],
)
def test_every_page_carries_the_caution_the_weekly_summary_link_and_a_strict_csp(admin_client, seeded, path, db):
    response = admin_client.get(path)
    assert response.status_code == 200
    assert "does not replace machine protection, interlocks, radiation" in response.text
    assert "Local rules and licensed operators decide" in response.text
    csp = response.headers["content-security-policy"]
    assert csp == CONTENT_SECURITY_POLICY
    assert "script-src 'self';" in csp and "unsafe-inline" not in csp.split("script-src")[1].split(";")[0]
    if path != "/campaigns":
        week = overview.campaign_week(_campaign(db))
        assert f"/api/v1/campaigns/{SLUG}/summary?week={week}&amp;format=html" in response.text
    # No inline executable script: every <script> either has src= or is a JSON data block.
    for tag in re.findall(r"<script\b[^>]*>", response.text):
        assert 'src="/' in tag or 'type="application/json"' in tag, tag
    assert "https://" not in response.text.split("<footer>")[0].split("</head>")[0]


def test_sign_in_page_carries_the_caution_too(client):
    response = client.get("/sign-in")
    assert "does not replace machine protection" in response.text
    assert "content-security-policy" in response.headers


def test_plotly_js_is_served_by_wakeledger_from_the_installed_package(client):
    import plotly

    response = client.get("/assets/plotly.min.js")
    assert response.status_code == 200
    assert response.headers["content-type"].startswith("text/javascript")
    bundled = plotly.__path__[0] + "/package_data/plotly.min.js"
    assert len(response.content) == len(open(bundled, "rb").read())


def test_unknown_campaign_and_shot_get_a_not_found_page(viewer_client, seeded):
    assert viewer_client.get("/campaigns/nope").status_code == 404
    response = viewer_client.get(f"/campaigns/{SLUG}/shots/pg-9999")
    assert response.status_code == 404 and "does not exist" in response.text


# --------------------------------------------------------------- campaigns & overview


def test_campaign_list_shows_each_campaign_with_counts_by_status(viewer_client, seeded, db):
    cards = overview.campaign_cards(db)
    assert [c.campaign.slug for c in cards] == [SLUG]
    assert cards[0].counts == {"nominal": 27, "marginal": 3, "outside": 6}
    response = viewer_client.get("/campaigns")
    assert "Test campaign" in response.text and "36 shots" in response.text


def test_overview_counts_shots_by_status_and_by_flag_code(seeded, db, client, admin_headers):
    data = overview.overview(db, _campaign(db))
    assert data.counts == {"nominal": 27, "marginal": 3, "outside": 6}
    stored = client.get(f"/api/v1/campaigns/{SLUG}/shots?limit=100", headers=admin_headers).json()
    expected: dict[str, dict[str, int]] = {}
    items = stored.get("items", stored.get("shots", []))
    for item in items:
        for flag in (item.get("evaluation") or item).get("flags", []):
            expected.setdefault(flag["code"], {}).setdefault(flag["severity"], 0)
            expected[flag["code"]][flag["severity"]] += 1
    counted = {f.code: f.by_severity for f in data.flag_counts}
    if expected:
        assert counted == expected
    assert counted["UNSEEDED"] == {"marginal": 3}
    assert counted["DENSITY_MISMATCH"] == {"marginal": 3}


def test_timeline_marks_flagged_shots_with_their_own_colour_shape_and_name(seeded, db):
    figure = figures.timeline_figure(db, _campaign(db))
    points = [t for t in figure["data"] if t.get("meta") and not t["meta"].get("pinned")]
    assert {t["meta"]["y"] for t in points} == set(figures.TIMELINE_FIELDS)
    by_status = {}
    for trace in points:
        by_status.setdefault(trace["meta"]["status"], trace)
    assert {s: (t["marker"]["color"], t["marker"]["symbol"]) for s, t in by_status.items() if s != "nominal"} == {
        "marginal": ("#E69F00", "diamond"),
        "outside": ("#D55E00", "x"),
    }
    # Nominal shots are one thin line per panel (one SVG path), not a marker each.
    assert by_status["nominal"]["mode"] == "lines" and "marker" not in by_status["nominal"]
    assert by_status["outside"]["name"].startswith("outside (6)")
    assert len(by_status["outside"]["x"]) == 6 and len(by_status["nominal"]["x"]) == 27


def test_long_timelines_keep_every_kth_nominal_shot_and_all_flagged_shots(seeded, db, monkeypatch):
    monkeypatch.setattr(figures, "TIMELINE_NOMINAL_POINTS", 10)
    figure = figures.timeline_figure(db, _campaign(db))
    density = {t["meta"]["status"]: t for t in figure["data"] if t.get("meta", {}).get("y") == "plasma_density_cm3"}
    # 27 nominal shots, thinned to at most 10 by shot id modulo 3: how many of them fall on a multiple
    # of 3 depends on where the ids start (a PostgreSQL sequence carries on across tests).
    assert 1 <= len(density["nominal"]["x"]) <= 10
    assert re.search(r"nominal \(\d+ of 27, 1 in \d+\)", density["nominal"]["name"])
    assert len(density["outside"]["x"]) == 6 and len(density["marginal"]["x"]) == 3
    assert density["nominal"]["x"] == sorted(density["nominal"]["x"])


def test_flagged_shots_beyond_the_cap_are_thinned_over_the_whole_range(seeded, db, monkeypatch):
    monkeypatch.setattr(figures, "TIMELINE_FLAGGED_POINTS", 4)
    figure = figures.timeline_figure(db, _campaign(db))
    outside = next(t for t in figure["data"] if t.get("meta", {}).get("status") == "outside")
    assert 1 <= len(outside["x"]) <= 4 and ", 1 in " in outside["name"]


def test_no_chart_needs_webgl_which_the_csp_would_block(seeded, db, monkeypatch):
    monkeypatch.setattr(figures, "NOMINAL_MARKERS_MAX", 5)  # many shots: a density image (an SVG <image>)
    campaign = _campaign(db)
    drawn = [
        figures.timeline_figure(db, campaign),
        figures.phase_figure(db, campaign),
        figures.calibration_figure(db, campaign),
        figures.regime_figure(db, campaign, "plasma_density_cm3", "efolds_exit"),
    ]
    assert {t["type"] for f in drawn for t in f["data"]} == {"scatter", "heatmap"}  # no scattergl, heatmapgl
    assert "unsafe-eval" not in CONTENT_SECURITY_POLICY


def test_regime_map_plots_any_two_numeric_fields_and_refuses_others(viewer_client, seeded):
    response = viewer_client.get(
        f"/campaigns/{SLUG}/regime.json", params={"x": "driver_sigma_r_mm", "y": "hosing_ratio"}
    )
    assert response.status_code == 200
    feed = response.json()
    figure = feed["figure"]
    assert feed["cursor"] > 0
    assert "driver.sigma_r_mm [mm]" in figure["layout"]["xaxis"]["title"]["text"]
    assert sum(len(t["x"]) for t in figure["data"]) == 36
    bad = viewer_client.get(f"/campaigns/{SLUG}/regime.json", params={"x": "notes", "y": "efolds_exit"})
    assert bad.status_code == 422 and bad.json()["errors"][0]["field"] == "x"


def test_regime_feed_needs_a_signed_in_viewer(client, seeded):
    response = client.get(f"/campaigns/{SLUG}/regime.json", params={"x": "plasma_density_cm3", "y": "efolds_exit"})
    assert response.status_code == 401


def test_expected_phase_jitter_is_the_root_sum_square_of_the_logged_jitters_through_the_models_phase_derivatives(
    seeded, db, page_shots
):
    summary = figures.phase_summary(db, _campaign(db))
    with_phase = sorted(
        (s for s in page_shots if s.get("measured", {}).get("modulation_phase_rad") is not None),
        key=lambda s: s["taken_at"],
    )
    density = [s["plasma"]["density_cm3"] for s in with_phase]
    phase = [s["measured"]["modulation_phase_rad"] for s in with_phase]
    j = summary.jitter
    assert summary.shots_with_phase == len(with_phase) >= reference.WINDOW
    assert j.density_spread_pct == pytest.approx(reference.density_jitter_pct(density), rel=1e-9)
    assert j.measured_phase_std_rad == pytest.approx(reference.phase_jitter_rad(phase), rel=1e-9)
    parts = [v for v in j.expected_by_source_rad.values() if v is not None]
    assert set(j.expected_by_source_rad) == set(JITTER_SOURCES)
    assert j.expected_phase_jitter_rad == pytest.approx(np.sqrt(sum(v * v for v in parts)), rel=1e-12)
    assert j.expected_by_source_rad["plasma.density_cm3"] == pytest.approx(
        abs(j.phase_per_ln_rad["plasma.density_cm3"]) * j.density_spread_pct / 100, rel=1e-12
    )
    figure = figures.phase_figure(db, _campaign(db))
    names = [t["name"] for t in figure["data"]]
    assert any("expected from the logged jitters" in n for n in names)
    assert any("measured shot-to-shot phase jitter" in n for n in names)


def test_a_density_scan_posted_out_of_time_order_shows_the_shot_to_shot_jitter_not_the_scan(
    client, campaign, admin_headers, make_shot, db
):
    # Two set points 10 % apart with 0.1 % shot-to-shot noise, posted in a shuffled order:
    # the overview compares neighbours in time, so the scan drops out.
    rng = np.random.default_rng(3)
    density = [4.0e14 * (1.0 if i < 30 else 1.1) * (1 + 0.001 * rng.standard_normal()) for i in range(60)]
    shots = [
        make_shot(
            0,
            shot_id=f"scan-{i:03d}",
            taken_at=f"2026-11-17T{8 + i // 6:02d}:{(i % 6) * 7:02d}:00Z",
            changes={"plasma.density_cm3": d, "measured.modulation_phase_rad": 0.1},
        )
        for i, d in enumerate(density)
    ]
    order = rng.permutation(len(shots))
    response = client.post(
        f"/api/v1/campaigns/{campaign}/shots/batch", json={"shots": [shots[i] for i in order]}, headers=admin_headers
    )
    assert response.status_code == 201, response.text
    summary = figures.phase_summary(db, _campaign(db))
    assert summary.jitter.density_spread_pct == pytest.approx(reference.density_jitter_pct(density), rel=1e-9)
    assert summary.jitter.density_spread_pct == pytest.approx(0.1, rel=0.3)
    assert 100 * np.std(density, ddof=1) / np.mean(density) > 4  # what the spread over all shots would say


def test_density_offset_is_the_median_of_implied_over_set_density_minus_one(seeded, db, client, admin_headers):
    from app.tables import Evaluation, Shot

    rows = (
        db.query(Evaluation.implied_density_cm3, Shot.plasma_density_cm3)
        .join(Shot, Shot.id == Evaluation.shot_pk)
        .filter(Evaluation.implied_density_cm3.isnot(None))
        .all()
    )
    expected = float(np.median([i / n - 1 for i, n in rows]))
    summary = figures.calibration_summary(db, _campaign(db))
    assert summary.shots_with_frequency == len(rows) == 30
    assert summary.median_density_offset == pytest.approx(expected, rel=1e-12)
    figure = figures.calibration_figure(db, _campaign(db))
    assert figure["data"][0]["name"] == "measured = predicted"


def test_overview_page_embeds_small_charts_and_loads_the_long_series_from_feeds(viewer_client, seeded):
    html = viewer_client.get(f"/campaigns/{SLUG}").text
    assert _chart(html, "chart-flags")["data"]
    for name in ("timeline", "phase", "calibration"):
        url = f"/campaigns/{SLUG}/charts/{name}.json"
        assert f'data-feed="{url}"' in html
        feed = viewer_client.get(url).json()
        assert feed["figure"]["data"] and feed["cursor"] > 0
    assert 'id="chart-regime"' in html and 'id="live-config"' in html
    assert viewer_client.get(f"/campaigns/{SLUG}/charts/nothing.json").status_code == 404
    phase_facts = dict(viewer_client.get(f"/campaigns/{SLUG}/charts/phase.json").json()["facts"])
    assert phase_facts["shots with a measured phase"] == "30"
    assert phase_facts["expected phase jitter (shot-to-shot)"].endswith(" rad")
    assert any("circular mean of 14 neighbouring shots" in label for label in phase_facts)
    assert any(label.strip().startswith("from plasma density") for label in phase_facts)
    assert "median of its 14 neighbouring shots" in html
    calibration_facts = dict(viewer_client.get(f"/campaigns/{SLUG}/charts/calibration.json").json()["facts"])
    assert calibration_facts["implied density offset (median)"].endswith(" %")


def test_chart_feeds_are_a_snapshot_up_to_their_cursor(seeded, db, client, admin_headers, make_shot):
    campaign = _campaign(db)
    cursor = store.latest_shot_pk(db, campaign.id)
    new = make_shot(1, shot_id="pg-after", taken_at="2026-11-17T10:00:00Z")
    assert client.post(f"/api/v1/campaigns/{SLUG}/shots", json=new, headers=admin_headers).status_code == 201
    db.rollback()
    before = figures.timeline_figure(db, campaign, upto_pk=cursor)
    after = figures.timeline_figure(db, campaign)
    ids = lambda fig: {i for t in fig["data"] if t.get("meta") for i in t["customdata"]}  # noqa: E731
    assert "pg-after" not in ids(before) and "pg-after" in ids(after)


# --------------------------------------------------------------------------- table


def _shot_ids(html: str) -> list[str]:
    return re.findall(r'<a class="mono" href="/campaigns/test-campaign/shots/([^"]+)">', html)


def test_table_filters_by_status_flag_code_seed_method_time_and_text(viewer_client, seeded):
    def ids(**params):
        response = viewer_client.get(f"/campaigns/{SLUG}/shots", params=params)
        assert response.status_code == 200, response.text
        return _shot_ids(response.text)

    assert len(ids()) == 36
    assert len(ids(status="outside")) == 6
    assert len(ids(flag="UNSEEDED")) == 3
    assert ids(seed="none") == ids(flag="UNSEEDED")
    assert len(ids(q="wide")) == 3  # a tag
    assert len(ids(q="RETUNE")) == 3  # in the notes, any case
    # Times in the campaign's zone (UTC here); pg-0000 is at 08:00, one shot each 7 minutes.
    assert ids(**{"from": "2026-11-16T07:59:30", "to": "2026-11-16T08:20:30"}) == ["pg-0002", "pg-0001", "pg-0000"]
    assert ids(**{"from": "2026-11-16T08:59:30+01:00", "to": "2026-11-16T09:10:30+01:00"}) == ["pg-0001", "pg-0000"]
    assert ids(status="outside", q="wide") == ids(q="wide")


def test_table_sorts_by_any_column_and_pages_by_one_hundred(viewer_client, seeded, db):
    ascending = _shot_ids(viewer_client.get(f"/campaigns/{SLUG}/shots", params={"sort": "taken_at", "dir": "asc"}).text)
    assert ascending[:2] == ["pg-0000", "pg-0001"]
    by_status = viewer_client.get(f"/campaigns/{SLUG}/shots", params={"sort": "status", "dir": "desc"}).text
    first_rows = re.findall(r'<span class="status (\w+)">', by_status)
    assert first_rows[:6] == ["outside"] * 6
    page = table.table_page(db, _campaign(db), table.TableQuery(store.ShotFilter(), page=1))
    assert page.page_size == 100 and page.pages == 1 and page.total == 36


def test_table_reports_bad_filters_instead_of_ignoring_them(viewer_client, seeded):
    response = viewer_client.get(
        f"/campaigns/{SLUG}/shots", params={"status": "fine", "from": "yesterday", "sort": "notes"}
    )
    assert response.status_code == 422
    for text in ("choose one of nominal, marginal, outside", "write a date and time", "cannot sort by"):
        assert text in response.text.replace("&#39;", "'")


def test_notes_with_markup_are_shown_as_text(viewer_client, seeded):
    html = viewer_client.get(f"/campaigns/{SLUG}/shots", params={"q": "retune"}).text
    assert "frequency looks off &lt;b&gt;check&lt;/b&gt; &amp; retune" in html
    assert "<b>check</b>" not in html


def test_csv_download_streams_the_whole_filtered_set(viewer_client, seeded):
    response = viewer_client.get(f"/campaigns/{SLUG}/shots.csv", params={"status": "marginal"})
    assert response.status_code == 200
    assert response.headers["content-type"].startswith("text/csv")
    assert "attachment" in response.headers["content-disposition"]
    rows = list(csv.DictReader(io.StringIO(response.text)))
    assert len(rows) == 3 and {r["status"] for r in rows} == {"marginal"}
    assert "plasma_density_cm3 [cm^-3]" in rows[0] and "efolds_exit [e-folds]" in rows[0]
    assert float(rows[0]["plasma_density_cm3 [cm^-3]"]) > 1e14


def test_csv_cells_cannot_start_a_spreadsheet_formula():
    assert defuse("=SUM(A1)") == "'=SUM(A1)"
    assert defuse("plain") == "plain"


# ------------------------------------------------------------------------- one shot


def test_shot_page_shows_inputs_with_units_outputs_flags_and_history(
    admin_client, seeded, admin_headers, make_shot, db
):
    corrected = make_shot(2, shot_id="pg-0010", taken_at="2026-11-16T09:10:00Z", changes={"plasma.length_m": 10.0})
    corrected["notes"] = "no seed this time"
    corrected["tags"] = ["unseeded"]
    response = admin_client.put(
        f"/api/v1/campaigns/{SLUG}/shots/pg-0010",
        params={"reason": "length was wrong"},
        json=corrected,
        headers=admin_headers,
    )
    assert response.status_code == 200, response.text
    detail = shot_page.shot_detail(db, _campaign(db), "pg-0010")
    units = {row.path: row.unit for row in detail.inputs}
    assert units["plasma.density_cm3"] == "cm^-3" and units["driver.momentum_gev"] == "GeV/c"
    outputs = {row.name: row for row in detail.outputs}
    assert outputs["wakefield_estimate_mv_m"].unit == "MV/m" and outputs["efolds_exit"].value > 0
    codes = {f.code: f for f in detail.flags}
    assert codes["HOSING_RISK"].severity == "outside" and codes["HOSING_RISK"].limit == 1.0
    assert codes["HOSING_RISK"].message and codes["HOSING_RISK"].value > 1.0
    assert [r.revision for r in detail.revisions] == [2, 1]
    assert ("plasma.length_m", 12.0, 10.0) in detail.revisions[0].changes
    assert detail.revisions[0].reason == "length was wrong"
    html = admin_client.get(f"/campaigns/{SLUG}/shots/pg-0010").text
    assert "length was wrong" in html and "HOSING_RISK" in html
    assert 'id="detailed-run"' in html


def test_growth_curves_are_the_models_own_numbers_and_end_at_the_exit_values(seeded, db):
    campaign = _campaign(db)
    from app.services.campaigns import effective_settings

    shot, evaluation = store.shot_with_evaluation(db, campaign.id, "pg-0000")
    settings = effective_settings(campaign)
    curves = shot_page.growth_curves(shot, settings)
    assert curves["z_m"][-1] == pytest.approx(shot.plasma_length_m)
    assert curves["efolds"][-1] == pytest.approx(evaluation.efolds_exit, rel=1e-9)
    assert curves["modulation"][-1] == pytest.approx(math.exp(evaluation.growth_margin_efolds), rel=1e-9)
    assert np.all(np.diff(curves["efolds"]) > 0) and np.all(np.diff(curves["modulation"]) > 0)
    # N(L, xi) at the reference slice (xi_ref = r_ref sigma_z) is the shot's exit e-folds.
    xi_ref = settings["reference_slice_sigma"] * shot.driver_sigma_z_mm
    assert np.interp(xi_ref, curves["xi_mm"], curves["efolds_exit_xi"]) == pytest.approx(
        evaluation.efolds_exit, rel=2e-3
    )
    figure = shot_page.growth_figure(curves, shot, evaluation, settings["saturation_modulation"])
    star = [t for t in figure["data"] if t.get("marker", {}).get("symbol") == "star"]
    assert star and star[0]["x"][0] == pytest.approx(evaluation.saturation_length_m, rel=1e-5)


# ---------------------------------------------------------------------- live feed


def test_live_feed_returns_only_shots_after_the_cursor_with_current_counts(
    viewer_client, seeded, admin_headers, make_shot
):
    first = viewer_client.get(f"/campaigns/{SLUG}/live", params={"since": 0}).json()
    assert len(first["shots"]) == 36 and first["counts"]["outside"] == 6
    cursor = first["cursor"]
    again = viewer_client.get(f"/campaigns/{SLUG}/live", params={"since": cursor}).json()
    assert again["shots"] == [] and again["cursor"] == cursor
    new = make_shot(1, shot_id="pg-new", taken_at="2026-11-17T10:00:00Z")
    assert viewer_client.post(f"/api/v1/campaigns/{SLUG}/shots", json=new, headers=admin_headers).status_code == 201
    update = viewer_client.get(f"/campaigns/{SLUG}/live", params={"since": cursor, "fields": "hosing_ratio"}).json()
    assert [s["shot_id"] for s in update["shots"]] == ["pg-new"]
    shot = update["shots"][0]
    assert shot["status"] == "outside" and update["counts"]["outside"] == 7
    assert set(figures.TIMELINE_FIELDS) <= set(shot["values"]) and "hosing_ratio" in shot["values"]
    assert shot["url"] == f"/campaigns/{SLUG}/shots/pg-new"


def test_live_feed_is_bounded(viewer_client, seeded, monkeypatch):
    monkeypatch.setattr(overview, "LIVE_MAX_ROWS", 5)
    update = viewer_client.get(f"/campaigns/{SLUG}/live", params={"since": 0}).json()
    assert len(update["shots"]) == 5 and update["more"] is True


# ------------------------------------------------------------------------ security


def test_chart_json_cannot_close_its_script_element():
    text = str(json_for_html({"note": "</script><script>alert(1)</script>", "x": [float("nan"), 1.0], "a": "&"}))
    assert "<" not in text and ">" not in text and "&" not in text
    assert json.loads(text) == {"note": "</script><script>alert(1)</script>", "x": [None, 1.0], "a": "&"}


def test_hover_text_from_users_is_escaped_for_plotly():
    assert text_for_chart("<a href=x>run</a>") == "&lt;a href=x&gt;run&lt;/a&gt;"


# ------------------------------------------------------------------------ settings


def test_settings_page_is_for_admins_only(viewer_client, seeded):
    response = viewer_client.get(f"/campaigns/{SLUG}/settings")
    assert response.status_code == 403 and "admin role" in response.text
    assert viewer_client.post(f"/campaigns/{SLUG}/settings", data={}).status_code == 403


def test_settings_form_rejects_bad_values_with_clear_errors_and_saves_nothing(admin_client, seeded, db):
    form = {f.name: f.text for f in settings_form.settings_form(db, _campaign(db)).model_fields}
    form["setting.noise_floor"] = "lots"
    form["csrf_token"] = admin_client.csrf_token
    response = admin_client.post(f"/campaigns/{SLUG}/settings", data=form)
    assert response.status_code == 422
    assert "noise_floor must be a finite number" in response.text and 'value="lots"' in response.text
    form["setting.noise_floor"] = "0.001"
    form["limit.WEAK_SEED.marginal"] = "1"
    form["limit.WEAK_SEED.outside"] = "3"  # below-rule: outside must lie below marginal
    response = admin_client.post(f"/campaigns/{SLUG}/settings", data=form)
    assert response.status_code == 422 and "out of order" in response.text
    db.rollback()  # end the read snapshot taken before the request
    assert _campaign(db).settings_version == 1


def test_settings_posted_from_another_site_are_refused(admin_client, seeded, db):
    form = {f.name: f.text for f in settings_form.settings_form(db, _campaign(db)).model_fields}
    form["limit.HOSING_RISK.outside"] = "1000"
    form["csrf_token"] = admin_client.csrf_token
    response = admin_client.post(
        f"/campaigns/{SLUG}/settings", data=form, headers={"Origin": "http://elsewhere.invalid"}
    )
    assert response.status_code == 403
    db.rollback()
    assert _campaign(db).settings_version == 1


def test_settings_posted_without_the_sessions_csrf_token_are_refused(admin_client, seeded, db):
    form = {f.name: f.text for f in settings_form.settings_form(db, _campaign(db)).model_fields}
    form["limit.HOSING_RISK.outside"] = "1000"
    form["csrf_token"] = "guessed"
    assert admin_client.post(f"/campaigns/{SLUG}/settings", data=form).status_code == 403
    del form["csrf_token"]
    assert admin_client.post(f"/campaigns/{SLUG}/settings", data=form).status_code == 403
    db.rollback()
    assert _campaign(db).settings_version == 1


def test_saving_settings_starts_the_reevaluation_and_shows_its_progress(admin_client, seeded, db, app, admin_headers):
    form = {f.name: f.text for f in settings_form.settings_form(db, _campaign(db)).model_fields}
    form["limit.HOSING_RISK.outside"] = "1000"
    form["csrf_token"] = admin_client.csrf_token
    response = admin_client.post(f"/campaigns/{SLUG}/settings", data=form, follow_redirects=False)
    assert response.status_code == 303
    job_id = response.headers["location"].split("job=")[1]
    run_queued_jobs(app)  # what a worker process does
    job = admin_client.get(f"/api/v1/jobs/{job_id}").json()  # the page polls this with the cookie
    assert job["state"] == "succeeded" and job["kind"] == "reevaluate"
    db.rollback()  # end the read snapshot taken before the request
    campaign = _campaign(db)
    assert campaign.settings_version == 2
    assert campaign.model_settings == {"limits": {"HOSING_RISK": {"outside": 1000.0}}}
    page = admin_client.get(response.headers["location"]).text
    assert f'"job_id":"{job_id}"' in page
    assert overview.overview(db, campaign).counts["outside"] < 6


def test_a_campaign_without_shots_still_has_every_page(viewer_client, campaign):
    for path in (
        f"/campaigns/{SLUG}",
        f"/campaigns/{SLUG}/shots",
        f"/campaigns/{SLUG}/shots.csv",
        f"/campaigns/{SLUG}/charts/timeline.json",
        f"/campaigns/{SLUG}/charts/phase.json",
        f"/campaigns/{SLUG}/charts/calibration.json",
        f"/campaigns/{SLUG}/live?since=0",
        f"/campaigns/{SLUG}/regime.json?x=plasma_density_cm3&y=plasma_density_cm3",
        f"/campaigns/{SLUG}/plan",
    ):
        assert viewer_client.get(path).status_code == 200, path
    assert "No shots match this filter." in viewer_client.get(f"/campaigns/{SLUG}/shots").text


# ------------------------------------------------------------ weekly-summary link


def test_the_weekly_summary_link_points_at_the_latest_week_with_shots_and_keeps_a_this_week_link(
    admin_client, seeded, db
):
    campaign = _campaign(db)
    this_week = overview.campaign_week(campaign)
    if this_week == "2026-W47":  # the page shots are all taken in 2026-W47
        pytest.skip("run during 2026-W47: the latest week with shots is this week")
    for path in (f"/campaigns/{SLUG}", "/campaigns"):
        page = admin_client.get(path).text
        assert f'href="/api/v1/campaigns/{SLUG}/summary?week=2026-W47&amp;format=html">Weekly summary 2026-W47' in page
        assert (
            f'href="/api/v1/campaigns/{SLUG}/summary?week={this_week}&amp;format=html">this week ({this_week})' in page
        )


def test_the_weekly_summary_link_of_an_empty_campaign_is_the_current_week_alone(admin_client, campaign, db):
    links = overview.campaign_summary_links(db, _campaign(db))
    week = overview.campaign_week(_campaign(db))
    assert (links.week, links.this_week, links.this_week_url) == (week, None, None)
    page = admin_client.get(f"/campaigns/{SLUG}").text
    assert f'summary?week={week}&amp;format=html">Weekly summary {week}</a>' in page
    assert "this week (" not in page


def test_when_the_latest_shot_is_this_week_there_is_one_weekly_summary_link(seeded, db):
    from datetime import datetime

    links = overview.campaign_summary_links(db, _campaign(db), now=datetime(2026, 11, 20, 12, tzinfo=UTC))
    assert links.week == "2026-W47" and links.this_week is None
    assert links.url == f"/api/v1/campaigns/{SLUG}/summary?week=2026-W47&format=html"


def test_phases_either_side_of_plus_minus_pi_get_a_small_spread_on_the_overview(
    client, campaign, admin_headers, make_shot, db
):
    # Phases within 0.05 rad of +-pi, alternating sides: 0.1 rad apart at most, not 2 pi.
    phases = [(math.pi - 0.05 * ((i // 2) % 5) / 4) * (1 if i % 2 else -1) for i in range(30)]
    shots = [
        make_shot(
            0,
            shot_id=f"wrap-{i:03d}",
            taken_at=f"2026-11-17T{8 + i // 6:02d}:{(i % 6) * 7:02d}:00Z",
            changes={"measured.modulation_phase_rad": p},
        )
        for i, p in enumerate(phases)
    ]
    response = client.post(f"/api/v1/campaigns/{campaign}/shots/batch", json={"shots": shots}, headers=admin_headers)
    assert response.status_code == 201, response.text
    summary = figures.phase_summary(db, _campaign(db))
    assert summary.shots_with_phase == 30
    assert summary.jitter.measured_phase_std_rad < 0.05
    assert np.std(phases, ddof=1) > 3  # what a plain std about the plain mean would say
    figure = figures.phase_figure(db, _campaign(db))
    per_group = next(t for t in figure["data"] if t["name"].startswith("measured shot-to-shot phase jitter"))
    assert per_group["y"] and all(v is not None and v < 0.05 for v in per_group["y"])


def test_the_shot_page_lists_the_fields_that_took_their_defaults(viewer_client, campaign, admin_headers, make_shot):
    shot = make_shot(shot_id="defaults-page", drop=["driver.emittance_n_mm_mrad"])
    assert viewer_client.post(f"/api/v1/campaigns/{SLUG}/shots", json=shot, headers=admin_headers).status_code == 201
    page = viewer_client.get(f"/campaigns/{SLUG}/shots/defaults-page").text
    listed = page.split('id="defaulted-fields"', 1)[1].split("</p>", 1)[0]
    assert "<code>driver.emittance_n_mm_mrad</code>" in listed and "plasma.density_cm3" not in listed
