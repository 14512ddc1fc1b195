"""The planner page: it starts from a stored shot (or the campaign's latest), and its feeds answer the status
map or curves, the clicked point, and the base's windows, sensitivities and nearest nominal shot, as text."""

from __future__ import annotations

import html
import json
import re

import numpy as np
import pytest

import model
from app.presentation.numbers import editable_number
from app.presentation.palette import STATUS_STYLES
from app.services.planner import answers
from model import plan
from tests.support.plans import failing, planned

SLUG = "test-campaign"
PAGE = f"/campaigns/{SLUG}/plan"


def _config(page_html: str) -> dict:
    block = re.search(r'<script type="application/json" id="plan-config">(.*?)</script>', page_html, re.S)
    assert block, "no plan-config block"
    return json.loads(block.group(1))


def _box(page_html: str, path: str) -> str:
    match = re.search(rf'<input [^>]*data-path="{re.escape(path)}"[^>]*value="([^"]*)"', page_html, re.S)
    assert match, path
    return html.unescape(match.group(1))


def _stored(client, admin_headers, shot_id: str) -> dict:
    return client.get(f"/api/v1/campaigns/{SLUG}/shots/{shot_id}", headers=admin_headers).json()["payload"]


def test_the_page_starts_from_the_stored_shot_named_with_its_fields_exact(viewer_client, seeded, admin_headers):
    response = viewer_client.get(PAGE, params={"shot": "pg-0003"})
    assert response.status_code == 200
    page = response.text
    payload = _stored(viewer_client, admin_headers, "pg-0003")
    for section in ("driver", "plasma", "seed"):
        for name, value in payload[section].items():
            if not isinstance(value, str):
                assert float(_box(page, f"{section}.{name}")) == value, name
    assert 'data-path="measured.' not in page  # a plan has no measurements
    config = _config(page)
    assert config["shot_id"] == "pg-0003"
    assert set(config["feeds"]) == {"map", "panels", "point"}
    assert config["defaults"]["plasma.density_cm3"]["log"] is True
    assert 'aria-current="page">Plan</a>' in page
    assert "Plan around a shot" in page and "Nominal windows" in page and "Nearest nominal shot" in page


def test_without_a_shot_the_page_starts_from_the_campaigns_latest_and_an_unknown_shot_is_not_found(
    viewer_client, seeded, page_shots
):
    latest = max(page_shots, key=lambda s: s["taken_at"])["shot_id"]
    assert _config(viewer_client.get(PAGE).text)["shot_id"] == latest
    missing = viewer_client.get(PAGE, params={"shot": "pg-9999"})
    assert missing.status_code == 404 and "does not exist" in missing.text


def test_a_campaign_without_shots_gets_an_empty_base_to_fill_in(viewer_client, campaign):
    page = viewer_client.get(PAGE)
    assert page.status_code == 200 and "no stored shot yet" in page.text
    assert _config(page.text)["shot_id"] is None and _box(page.text, "plasma.density_cm3") == ""


def test_every_shot_page_links_to_the_plan_around_it(viewer_client, seeded):
    page = viewer_client.get(f"/campaigns/{SLUG}/shots/pg-0005").text
    assert f'href="/campaigns/{SLUG}/plan?shot=pg-0005"' in page and "Plan around this shot" in page


def test_a_signed_out_visitor_is_sent_to_sign_in_and_the_feeds_answer_401(client, seeded):
    response = client.get(PAGE, follow_redirects=False)
    assert response.status_code == 303 and response.headers["location"].startswith("/sign-in")
    feed = client.post(f"{PAGE}/panels", json={"base": {"shot_id": "pg-0000"}})
    assert feed.status_code == 401


# ------------------------------------------------------------------------------------------ the map


MAP_AXES = [
    {"field": "plasma.density_cm3", "start": 1.5e14, "stop": 1.2e15, "steps": 9, "spacing": "log"},
    {"field": "seed.position_mm", "start": -100.0, "stop": 180.0, "steps": 7, "spacing": "linear"},
]


def test_the_status_map_is_the_models_scan_with_labelled_rule_boundaries_and_the_base_marked(
    viewer_client, seeded, admin_headers, monkeypatch
):
    asked = []
    real_scan = plan.scan
    monkeypatch.setattr(plan, "scan", lambda *a: asked.append(a[3]) or real_scan(*a))
    body = {"base": {"shot_id": "pg-0000"}, "axes": MAP_AXES, "contour": "efolds_exit", "curves": ["phase_slip_rad"]}
    response = viewer_client.post(f"{PAGE}/map", json=body)
    assert response.status_code == 200, response.text
    assert asked == [["efolds_exit"]]  # only the output drawn
    view = response.json()
    figure = view["figure"]
    payload = _stored(viewer_client, admin_headers, "pg-0000")
    expected = real_scan(planned(payload), MAP_AXES, None, ["efolds_exit"])
    status = {t["meta"]["plan"]: t for t in figure["data"] if t.get("meta")}
    heatmap = status["status"]
    assert heatmap["x"] == expected.axes[0].values.tolist() and heatmap["y"] == expected.axes[1].values.tolist()
    # rows run up the second axis, columns across the first
    assert heatmap["z"] == expected.status.reshape(9, 7).T.tolist()
    text = np.array(heatmap["text"], dtype=object).T.reshape(-1)
    for cell, rank in enumerate(expected.status):
        name = model.STATUSES[rank]
        assert text[cell].startswith(f"{STATUS_STYLES[name].glyph} {name}")  # readable without colour
    assert [t["text"] for t in figure["layout"]["annotations"] if t["text"].endswith(tuple(model.STATUSES))]
    bounded = [t["meta"]["code"] for t in figure["data"] if t.get("meta", {}).get("plan") == "rule"]
    for code in model.FLAG_CODES:
        fires = expected.flags[code] >= model.SEVERITY_BY_RANK.index("marginal")
        assert (code in bounded) == bool(fires.any() and not fires.all()), code
    labels = {a["text"] for a in figure["layout"]["annotations"]}
    assert set(bounded) <= labels
    base = status["base"]
    assert (base["x"], base["y"]) == ([payload["plasma"]["density_cm3"]], [payload["seed"]["position_mm"]])
    assert status["contour"]["meta"]["output"] == "efolds_exit"
    assert figure["layout"]["xaxis"]["type"] == "log" and figure["layout"]["yaxis"]["type"] == "linear"
    counts = {name: int((expected.status == rank).sum()) for rank, name in enumerate(model.STATUSES)}
    assert view["summary"].startswith("9 \u00d7 7 points") and f"{counts['nominal']} " in view["summary"]
    assert view["fields"] == ["plasma.density_cm3", "seed.position_mm"]


def test_a_one_axis_scan_draws_the_chosen_outputs_over_the_status_bands(viewer_client, seeded, monkeypatch):
    asked = []
    real_scan = plan.scan
    monkeypatch.setattr(plan, "scan", lambda *a: asked.append(a[3]) or real_scan(*a))
    axis = {"field": "plasma.length_m", "start": 0.5, "stop": 20.0, "steps": 40, "spacing": "log"}
    body = {
        "base": {"shot_id": "pg-0000"},
        "axes": [axis],
        "contour": "efolds_exit",
        "curves": ["efolds_exit", "phase_slip_rad"],
    }
    figure = viewer_client.post(f"{PAGE}/map", json=body).json()["figure"]
    assert asked == [["efolds_exit", "phase_slip_rad"]]
    curves = [t for t in figure["data"] if t["meta"]["plan"] == "curve"]
    assert [c["meta"]["output"] for c in curves] == ["efolds_exit", "phase_slip_rad"]
    assert [c["yaxis"] for c in curves] == ["y", "y2"]
    bands = [s for s in figure["layout"]["shapes"] if s["type"] == "rect"]
    assert bands and bands[0]["x0"] == axis["start"] and bands[-1]["x1"] == pytest.approx(axis["stop"])
    statuses = [c.split(" \u00b7 ")[0] for c in curves[0]["customdata"]]
    assert all(s.split(" ")[1] in model.STATUSES for s in statuses)


def test_a_point_clicked_gets_the_evaluation_post_evaluate_gives(viewer_client, seeded, admin_headers):
    values = {"plasma.density_cm3": 6.1e14, "seed.position_mm": -20.0}
    view = viewer_client.post(f"{PAGE}/point", json={"base": {"shot_id": "pg-0000"}, "values": values}).json()
    payload = planned(_stored(viewer_client, admin_headers, "pg-0000"), values)
    direct = viewer_client.post(
        "/api/v1/evaluate", params={"campaign": SLUG}, json=payload, headers=admin_headers
    ).json()
    assert view["status"] == direct["status"]
    assert [(f["code"], f["severity"], f["message"]) for f in view["flags"]] == [
        (f["code"], f["severity"], f["message"]) for f in direct["flags"]
    ]
    assert dict(view["outputs"])["efolds_exit"].endswith(" e-folds")
    assert view["values"][0][0] == "plasma.density_cm3 [cm^-3]"


# ------------------------------------------------------------------------------------------ the panels


def test_the_panels_give_the_bases_windows_sensitivities_and_nearest_nominal_shot_as_text(
    viewer_client, seeded, admin_headers, admin_client
):
    admin_client.patch(
        f"/api/v1/campaigns/{SLUG}/settings",
        json=failing(_stored(viewer_client, admin_headers, "pg-0000"), NONLINEAR_DRIVE=0.7),
        headers=admin_headers,
    )
    vary = ["plasma.density_cm3"]
    view = viewer_client.post(f"{PAGE}/panels", json={"base": {"shot_id": "pg-0000"}, "vary": vary}).json()
    base = answers.given_base(_stored(viewer_client, admin_headers, "pg-0000"))
    settings = admin_client.get(f"/api/v1/campaigns/{SLUG}", headers=admin_headers).json()["effective_settings"]
    base = answers.ResolvedBase(base.shot, settings, SLUG, 2)
    assert view["base"]["status"] == model.evaluate_shot(planned(base.shot), settings)["status"] != "nominal"
    windows = answers.windows(base)
    assert [w["field"] for w in view["windows"]] == [w.field for w in windows.windows]
    assert [w["low_rules"] for w in view["windows"]][0] is not None
    assert len(view["sensitivities"]) == len(answers.sensitivities(base))
    nearest = answers.nearest(base, vary)
    assert view["nearest"]["found"] and view["nearest"]["status"] == "nominal"
    assert view["nearest"]["inputs"] == {p: editable_number(v) for p, v in nearest.inputs.items()}
    assert float(view["nearest"]["inputs"]["plasma.density_cm3"]) == nearest.inputs["plasma.density_cm3"]
    assert view["nearest"]["changes"][0]["change"].startswith("+")  # past the density-ratio limit: a denser plasma


def test_the_feeds_name_the_failing_field(viewer_client, seeded, make_shot):
    bad_base = make_shot(changes={"plasma.density_cm3": "lots"})
    response = viewer_client.post(f"{PAGE}/panels", json={"base": bad_base})
    assert response.status_code == 422 and "base.plasma.density_cm3" in {e["field"] for e in response.json()["errors"]}
    axes = [dict(MAP_AXES[0], start=1e9)]
    response = viewer_client.post(f"{PAGE}/map", json={"base": {"shot_id": "pg-0000"}, "axes": axes})
    assert response.status_code == 422 and [e["field"] for e in response.json()["errors"]] == ["axes.0.start"]
    response = viewer_client.post(
        f"{PAGE}/point", json={"base": {"shot_id": "pg-0000"}, "values": {"plasma.density_cm3": 0}}
    )
    assert response.status_code == 422 and [e["field"] for e in response.json()["errors"]] == [
        "values.plasma.density_cm3"
    ]
    missing = viewer_client.post(f"{PAGE}/panels", json={"base": {"shot_id": "pg-9999"}})
    assert missing.status_code == 404


def test_every_first_range_the_page_offers_is_one_the_model_scans(viewer_client, seeded, admin_headers, make_shot):
    ion = make_shot(
        "ex-1", shot_id="ion-1", changes={"driver.species": "ion", "driver.mass_amu": 207.2, "driver.charge_state": 1}
    )
    assert viewer_client.post(f"/api/v1/campaigns/{SLUG}/shots", json=ion, headers=admin_headers).status_code == 201
    for shot_id in ("pg-0000", "ion-1"):
        defaults = _config(viewer_client.get(PAGE, params={"shot": shot_id}).text)["defaults"]
        assert "driver.charge_state" in defaults or shot_id == "pg-0000"
        for field, d in defaults.items():
            axis = {"field": field, "start": float(d["start"]), "stop": float(d["stop"]), "steps": int(d["steps"])}
            axis["spacing"] = "log" if d["log"] else "linear"
            body = {"base": {"shot_id": shot_id}, "axes": [axis], "curves": ["efolds_exit"]}
            response = viewer_client.post(f"{PAGE}/map", json=body)
            assert response.status_code == 200, (shot_id, field, response.text)
