"""A hostile or careless client: inputs that used to answer 500, or were taken silently.

Each answers a 4xx naming the field, stores nothing, and the server keeps answering.
"""

from __future__ import annotations

import json
from datetime import UTC, datetime, timedelta, timezone

import pytest
from sqlalchemy import func, select

from app.errors import MAX_PROBLEMS
from app.routers import json_body
from app.tables import Shot
from app.times import format_utc
from tests.support.detailed_runs import QUICK_CHANGES


def _url(campaign: str) -> str:
    return f"/api/v1/campaigns/{campaign}/shots"


def _fields(response) -> list[str]:
    return [e["field"] for e in response.json()["errors"]]


def _stored(app) -> int:
    with app.state.session_factory() as session:
        return session.scalar(select(func.count()).select_from(Shot))


def _raw(client, path: str, text: str, headers: dict[str, str]):
    return client.post(path, content=text.encode("utf-8"), headers={**headers, "Content-Type": "application/json"})


# --- bodies that are not what they claim --------------------------------------------------------


def test_malformed_json_names_the_line_and_column(client, campaign, ingest_headers):
    response = _raw(client, _url(campaign), '{\n  "shot_id": "x",\n  "plasma": {,}\n}', ingest_headers)
    assert response.status_code == 400
    assert response.json()["detail"].startswith("the body is not valid JSON: ")
    assert response.json()["detail"].endswith("at line 3, column 14")


def test_a_text_plain_body_answers_415_naming_the_expected_media_type(client, campaign, ingest_headers, make_shot):
    response = client.post(
        _url(campaign), content=json.dumps(make_shot()), headers={**ingest_headers, "Content-Type": "text/plain"}
    )
    assert response.status_code == 415
    assert response.headers["content-type"].startswith("application/problem+json")
    assert "application/json" in response.json()["detail"] and "text/plain" in response.json()["detail"]


def test_a_repeated_key_is_refused_with_400_not_last_wins(client, app, campaign, ingest_headers, make_shot):
    text = json.dumps(make_shot())
    text = text.replace('"density_cm3":', '"density_cm3": 1e15, "density_cm3":', 1)
    response = _raw(client, _url(campaign), text, ingest_headers)
    assert response.status_code == 400
    assert "'density_cm3' appears twice" in response.json()["detail"]
    assert _stored(app) == 0


@pytest.mark.parametrize(
    "repeat",
    [
        ('"daq": {', '"daq": {"note": "a: b: c", "note": "d", '),  # the lost value held colons
        ('"daq": {', '"daq": {"note": "x", "note": "\\u003a", '),  # the kept one an escaped colon
        ('"shot_id":', '"shot_id": "other", "shot_id":'),
        ('"daq": {', '"daq": {"deep": {"k": [{"a": 1, "a": 1}]}, '),
    ],
)
def test_a_repeated_key_anywhere_is_refused_whatever_the_values_hold(
    client, app, campaign, ingest_headers, make_shot, repeat
):
    shot = make_shot()
    shot["daq"] = {"crate": 2}
    text = json.dumps(shot).replace(*repeat, 1)
    response = _raw(client, _url(campaign), text, ingest_headers)
    assert response.status_code == 400, response.text
    assert "appears twice" in response.json()["detail"]
    assert _stored(app) == 0


def test_the_quick_reading_of_a_body_is_the_document_the_strict_reader_gives():
    read_quickly = {  # text -> whether orjson's reading is taken
        '{"a": 1, "b": [1.5, -0, 1e-7, 2.5e+300, 0.0019463869050811617, 999999999999999999], "t": "10:12:03"}': True,
        '{"e": "\\u2014 \\ud83d\\ude00 \\u0041", "s": "a\\\\u003b", "n": null, "b": [true, false]}': True,
        "[" * 200 + "1" + "]" * 200: True,
        '"plain"': True,
        '{"big": 100000000000000000000, "frac": 1.5}': False,  # orjson would make it a float
        "12345678901234567890123": False,
        '{"neg": -9223372036854775809}': False,
        '{"u": "\\u003a\\u003A"}': False,
        "[" * 300 + "1" + "]" * 300: False,  # past orjson's depth for writing
        '{"x": NaN}': False,
    }
    for text, quick in read_quickly.items():
        raw = text.encode()
        assert json_body._quick_read(raw)[0] is quick, text
        read, strict = json_body.parse_json_body(raw), json_body._strict_read(raw)
        assert json.dumps(read) == json.dumps(strict)
    assert json_body.parse_json_body(b'{"n": 100000000000000000000}')["n"] == 10**20  # an integer, exactly


def test_nan_in_a_body_is_read_and_refused_naming_its_field(client, app, campaign, ingest_headers, make_shot):
    text = json.dumps(make_shot())[:-1] + ', "daq": {"gain": NaN, "bias": -Infinity}}'
    response = _raw(client, _url(campaign), text, ingest_headers)
    assert response.status_code == 422
    assert _fields(response) == ["daq.gain", "daq.bias"]
    assert _stored(app) == 0


def test_a_body_nested_thousands_deep_is_a_400(client, app, campaign, ingest_headers, make_shot):
    text = json.dumps(make_shot())[:-1] + ', "daq": ' + "[" * 5000 + "]" * 5000 + "}"
    response = _raw(client, _url(campaign), text, ingest_headers)
    assert response.status_code == 400
    assert response.json()["detail"] == "the body is nested too deeply"
    assert _stored(app) == 0


@pytest.mark.parametrize("field", ["notes", "shot_id", "daq.operator"])
def test_a_lone_surrogate_in_any_string_is_a_422_naming_the_field(
    client, app, campaign, ingest_headers, make_shot, field
):
    shot = make_shot()
    shot["daq"] = {"operator": "ok"}
    text = json.dumps(shot)
    value = {"notes": shot.get("notes", ""), "shot_id": shot["shot_id"], "daq.operator": "ok"}[field]
    if field == "notes":
        text = text[:-1] + ', "notes": "bad \\udfff"}'
    else:
        text = text.replace(json.dumps(value), '"x\\udfff"', 1)
    response = _raw(client, _url(campaign), text, ingest_headers)
    assert response.status_code == 422
    assert _fields(response) == [field]
    assert "surrogate" in response.json()["errors"][0]["reason"]
    assert _stored(app) == 0


def test_a_proper_surrogate_pair_is_an_ordinary_character(client, campaign, ingest_headers, viewer_headers, make_shot):
    text = json.dumps(make_shot(shot_id="emoji-1"))[:-1] + ', "notes": "beam \\ud83d\\ude00"}'
    assert _raw(client, _url(campaign), text, ingest_headers).status_code == 201
    assert client.get(f"{_url(campaign)}/emoji-1", headers=viewer_headers).json()["notes"] == "beam \U0001f600"


def test_a_nul_character_in_notes_or_an_unknown_section_is_a_422_on_every_backend(
    client, app, campaign, ingest_headers, make_shot
):
    shot = make_shot()
    shot["notes"] = "before\x00after"
    shot["daq"] = {"path": "/data/\x00run"}
    response = client.post(_url(campaign), json=shot, headers=ingest_headers)
    assert response.status_code == 422
    assert _fields(response) == ["notes", "daq.path"]
    assert _stored(app) == 0


def test_a_nul_character_in_the_url_path_or_query_is_a_400_naming_where(client, campaign, viewer_headers):
    response = client.get(f"{_url(campaign)}/shot%00x", headers=viewer_headers)
    assert response.status_code == 400 and _fields(response) == ["path"]
    response = client.get(f"{_url(campaign)}?seed_method=none%00", headers=viewer_headers)
    assert response.status_code == 400 and _fields(response) == ["seed_method"]


# --- numbers and ids out of range ----------------------------------------------------------------


def test_a_subnormal_step_for_a_detailed_run_is_a_422_naming_dz_m(client, campaign, ingest_headers, make_shot):
    shot = make_shot("ex-1", shot_id="quick-1", changes=QUICK_CHANGES)
    assert client.post(_url(campaign), json=shot, headers=ingest_headers).status_code == 201
    response = client.post(f"{_url(campaign)}/quick-1/detailed-runs", json={"dz_m": 5e-324}, headers=ingest_headers)
    assert response.status_code == 422
    assert _fields(response) == ["dz_m"]


@pytest.mark.parametrize("suffix", ["", "/figures"])
def test_a_run_id_past_the_integer_range_is_a_422_not_a_crash(client, campaign, viewer_headers, suffix):
    response = client.get(f"{_url(campaign)}/any/detailed-runs/{2**64}{suffix}", headers=viewer_headers)
    assert response.status_code == 422
    assert _fields(response) == ["path.run_id"]


def test_a_live_feed_cursor_past_the_integer_range_is_a_422(client, campaign, viewer_headers):
    response = client.get(f"/campaigns/{campaign}/live?since={2**70}", headers=viewer_headers)
    assert response.status_code == 422


def test_a_summary_of_week_one_of_year_one_is_a_422_naming_the_week(client, campaign, viewer_headers):
    response = client.get(f"/api/v1/campaigns/{campaign}/summary?week=0001-W01", headers=viewer_headers)
    assert response.status_code == 422
    assert _fields(response) == ["week"]


# --- times ----------------------------------------------------------------------------------------


@pytest.mark.parametrize("taken_at", ["0001-01-01T00:00:00-04:00", "0001-01-01T00:00:00+05:00", "1989-12-31T23:59:59Z"])
def test_a_shot_dated_before_1990_is_refused(client, app, campaign, ingest_headers, make_shot, taken_at):
    response = client.post(_url(campaign), json=make_shot(taken_at=taken_at), headers=ingest_headers)
    assert response.status_code == 422
    assert _fields(response) == ["taken_at"]
    assert _stored(app) == 0


def test_a_shot_dated_more_than_a_day_ahead_of_the_server_is_refused(client, app, campaign, ingest_headers, make_shot):
    soon = format_utc(datetime.now(UTC) + timedelta(hours=23))
    later = format_utc(datetime.now(UTC) + timedelta(hours=25))
    assert client.post(_url(campaign), json=make_shot(taken_at=later), headers=ingest_headers).status_code == 422
    assert client.post(_url(campaign), json=make_shot(taken_at=soon), headers=ingest_headers).status_code == 201


def test_instants_are_written_in_rfc_3339_with_a_four_digit_year():
    assert format_utc(datetime(1, 1, 1, 4, tzinfo=UTC)) == "0001-01-01T04:00:00Z"
    assert format_utc(datetime(2026, 11, 27, 14, 5, 0, 120000, tzinfo=UTC)) == "2026-11-27T14:05:00.120Z"
    assert format_utc(datetime(2026, 11, 27, 14, 5, 0, 123456, tzinfo=UTC)) == "2026-11-27T14:05:00.123456Z"
    assert format_utc(datetime(2026, 11, 27, 14, 5, 0, 1, tzinfo=UTC)) == "2026-11-27T14:05:00.000001Z"
    assert format_utc(datetime(2026, 11, 27, 14, 5, 0, 999000, tzinfo=UTC)) == "2026-11-27T14:05:00.999Z"
    assert format_utc(datetime(9999, 12, 31, 23, 59, 59, tzinfo=UTC)) == "9999-12-31T23:59:59Z"
    assert format_utc(datetime(2026, 11, 27, 15, 5, tzinfo=timezone(timedelta(hours=1)))) == "2026-11-27T14:05:00Z"
    assert format_utc(datetime(2026, 11, 27, 14, 5)) == "2026-11-27T14:05:00Z"  # naive: already UTC


@pytest.mark.parametrize("value", [1764000000, -2.5, "1764000000", "-2.5"])
def test_a_number_where_a_time_is_expected_is_refused(client, campaign, ingest_headers, make_shot, value):
    response = client.post(_url(campaign), json=make_shot(taken_at=value), headers=ingest_headers)
    assert response.status_code == 422 and _fields(response) == ["taken_at"]


def test_a_number_as_the_from_filter_is_refused(client, campaign, viewer_headers):
    response = client.get(f"{_url(campaign)}?from=-2.5", headers=viewer_headers)
    assert response.status_code == 422
    assert _fields(response) == ["query.from"]


# --- strict fields --------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("typo", "meant"),
    [
        ("driver.emitance_n_mm_mrad", "driver.emittance_n_mm_mrad"),
        ("plasma.gradient_pct_per_meter", "plasma.gradient_pct_per_m"),
        ("measured.modulation_frequency_ghz", "measured.modulation_freq_ghz"),
    ],
)
def test_a_typo_inside_a_known_section_is_a_422_with_a_suggestion(
    client, app, campaign, ingest_headers, make_shot, typo, meant
):
    response = client.post(_url(campaign), json=make_shot(changes={typo: 2.0}), headers=ingest_headers)
    assert response.status_code == 422
    [error] = response.json()["errors"]
    assert error["field"] == typo
    assert f"did you mean {meant}?" in error["reason"]
    assert _stored(app) == 0


def test_a_typo_is_named_with_its_index_in_a_batch(client, campaign, ingest_headers, make_shot):
    shots = [make_shot(shot_id=f"b-{i}") for i in range(3)]
    shots[2]["seed"]["postion_mm"] = 1.0
    response = client.post(f"{_url(campaign)}/batch", json={"shots": shots}, headers=ingest_headers)
    assert response.status_code == 422
    assert _fields(response) == ["shots.2.seed.postion_mm"]
    assert "did you mean seed.position_mm?" in response.json()["errors"][0]["reason"]


def test_the_what_if_takes_the_same_strict_fields(client, campaign, viewer_headers, make_shot):
    response = client.post("/api/v1/evaluate", json=make_shot(changes={"plasma.lenght_m": 3}), headers=viewer_headers)
    assert response.status_code == 422 and _fields(response) == ["plasma.lenght_m"]


def test_the_answer_and_the_stored_evaluation_list_the_fields_that_took_defaults(
    client, campaign, ingest_headers, viewer_headers, make_shot
):
    shot = make_shot(shot_id="defaults-1", drop=["driver.emittance_n_mm_mrad", "plasma.gradient_pct_per_m"])
    answer = client.post(_url(campaign), json=shot, headers=ingest_headers)
    assert answer.status_code == 201
    defaulted = answer.json()["evaluation"]["defaulted_fields"]
    assert {"driver.emittance_n_mm_mrad", "plasma.gradient_pct_per_m"} <= set(defaulted)
    assert "plasma.density_cm3" not in defaulted
    stored = client.get(f"{_url(campaign)}/defaults-1", headers=viewer_headers).json()
    assert stored["evaluation"]["defaulted_fields"] == defaulted


# --- the error bomb ---------------------------------------------------------------------------------


def test_a_batch_of_thousands_of_nan_arrays_answers_the_first_problems_and_a_count(
    client, app, campaign, ingest_headers
):
    bomb = '{"shots": [' + ",".join(['{"x": [' + ",".join(["NaN"] * 650) + "]}"] * 2000) + "]}"
    response = _raw(client, f"{_url(campaign)}/batch", bomb, ingest_headers)
    assert response.status_code == 422
    body = response.json()
    assert len(body["errors"]) == MAX_PROBLEMS
    assert body["errors_truncated"] is True and body["error_count"] >= 2000
    assert body["detail"].startswith("2000 of 2000 shots are invalid")
    assert len(response.content) < 50_000
    assert _stored(app) == 0
