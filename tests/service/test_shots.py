"""A DAQ posts shots one by one or in batches; physicists read them back."""

from __future__ import annotations

import json
import math

import pytest
from sqlalchemy import func, select

import model
from app.tables import Evaluation, Flag, Shot, ShotRevision


def _count(app, table) -> int:
    with app.state.session_factory() as session:
        return session.scalar(select(func.count()).select_from(table))


def _shots_url(campaign: str) -> str:
    return f"/api/v1/campaigns/{campaign}/shots"


def _fields(response) -> list[str]:
    return [e["field"] for e in response.json()["errors"]]


# --- one shot --------------------------------------------------------------------------------


@pytest.mark.parametrize("case", [0, 1, 2])
def test_a_worked_example_posted_through_the_api_gives_the_same_numbers_as_the_model(
    client, campaign, ingest_headers, make_shot, reference_cases, case
):
    shot = make_shot(case)
    response = client.post(_shots_url(campaign), json=shot, headers=ingest_headers)
    assert response.status_code == 201, response.text
    evaluation = response.json()["evaluation"]
    direct = model.evaluate_shot(shot)
    for name in model.OUTPUT_NAMES:
        if direct[name] is None:
            assert evaluation[name] is None, name
        else:
            assert evaluation[name] == pytest.approx(direct[name], rel=1e-12), name
    assert evaluation["status"] == direct["status"] == reference_cases[case]["status"]
    assert [(f["code"], f["severity"]) for f in evaluation["flags"]] == [
        (f["code"], f["severity"]) for f in direct["flags"]
    ]
    assert {f["code"]: f["severity"] for f in evaluation["flags"] if f["severity"] != "info"} == {
        k: v for k, v in reference_cases[case]["flags"].items() if v != "info"
    } or reference_cases[case]["flags"] == {}
    assert evaluation["model_version"] == model.MODEL_VERSION
    assert evaluation["settings_version"] == 1
    for name, expected in reference_cases[case]["expected"].items():  # MODEL.md section 9, 1e-6 relative
        if expected is None:
            assert evaluation[name] is None, name
        else:
            assert evaluation[name] == pytest.approx(expected, rel=1e-6), name


def test_a_stored_shot_reads_back_with_its_evaluation_and_flags(
    client, campaign, ingest_headers, viewer_headers, make_shot
):
    client.post(_shots_url(campaign), json=make_shot("ex-2"), headers=ingest_headers)
    response = client.get(f"{_shots_url(campaign)}/ex-2", headers=viewer_headers)
    assert response.status_code == 200
    body = response.json()
    assert body["shot_id"] == "ex-2"
    assert body["evaluation"]["status"] == "outside"
    codes = {f["code"] for f in body["evaluation"]["flags"]}
    assert {"BEAM_TOO_WIDE", "WEAK_GROWTH", "PHASE_DRIFT"} <= codes
    assert all(f["message"] for f in body["evaluation"]["flags"])


def test_a_daq_posts_a_shot_with_a_negative_density_and_gets_422_naming_the_field(
    client, app, campaign, ingest_headers, make_shot
):
    response = client.post(
        _shots_url(campaign), json=make_shot(changes={"plasma.density_cm3": -1e15}), headers=ingest_headers
    )
    assert response.status_code == 422
    assert response.headers["content-type"].startswith("application/problem+json")
    body = response.json()
    assert {"type", "title", "status", "detail", "errors"} <= set(body)
    assert _fields(response) == ["plasma.density_cm3"]
    assert _count(app, Shot) == 0


def test_every_failing_field_of_a_shot_is_named_at_once(client, campaign, ingest_headers, make_shot):
    shot = make_shot(changes={"driver.sigma_z_mm": 0, "plasma.length_m": "long"}, drop=["driver.population"])
    shot["taken_at"] = "2026-11-17T09:12:03"  # naive
    response = client.post(_shots_url(campaign), json=shot, headers=ingest_headers)
    assert response.status_code == 422
    assert set(_fields(response)) >= {"taken_at", "driver.sigma_z_mm", "plasma.length_m", "driver.population"}


def test_a_shot_time_without_a_utc_offset_is_refused(client, campaign, ingest_headers, make_shot):
    response = client.post(
        _shots_url(campaign), json=make_shot(taken_at="2026-11-17T09:12:03.120"), headers=ingest_headers
    )
    assert response.status_code == 422
    assert _fields(response) == ["taken_at"]


def test_a_shot_without_shot_id_is_refused(client, campaign, ingest_headers, make_shot):
    response = client.post(_shots_url(campaign), json=make_shot(drop=["shot_id"]), headers=ingest_headers)
    assert response.status_code == 422
    assert _fields(response) == ["shot_id"]


def test_nan_anywhere_in_the_body_is_refused_even_in_an_unknown_field(client, app, campaign, ingest_headers, make_shot):
    shot = make_shot()
    shot["daq"] = {"temperature_k": math.nan}
    response = client.post(
        _shots_url(campaign), content=json.dumps(shot), headers={**ingest_headers, "Content-Type": "application/json"}
    )
    assert response.status_code == 422
    assert _fields(response) == ["daq.temperature_k"]
    assert _count(app, Shot) == 0


def test_infinity_in_an_input_is_refused(client, campaign, ingest_headers, make_shot):
    shot = make_shot(changes={"driver.momentum_gev": math.inf})
    response = client.post(
        _shots_url(campaign), content=json.dumps(shot), headers={**ingest_headers, "Content-Type": "application/json"}
    )
    assert response.status_code == 422
    assert _fields(response) == ["driver.momentum_gev"]


def test_a_body_that_is_not_json_gets_a_400_naming_the_line_and_column(client, campaign, ingest_headers):
    response = client.post(
        _shots_url(campaign),
        content=b'{"shot_id": "a",\n "taken_at": oops}',
        headers={**ingest_headers, "Content-Type": "application/json"},
    )
    assert response.status_code == 400
    assert response.headers["content-type"].startswith("application/problem+json")
    assert response.json()["detail"] == "the body is not valid JSON: Expecting value at line 2, column 14"


def test_unknown_top_level_sections_are_kept_verbatim_in_the_raw_payload(
    client, campaign, ingest_headers, viewer_headers, make_shot
):
    shot = make_shot()
    shot["daq"] = {"crate": 3, "firmware": "4.2.1", "channels": [1, 2, 3]}
    client.post(_shots_url(campaign), json=shot, headers=ingest_headers)
    stored = client.get(f"{_shots_url(campaign)}/{shot['shot_id']}", headers=viewer_headers).json()
    assert stored["payload"] == shot


def test_reposting_the_identical_shot_answers_200_and_stores_nothing_new(
    client, app, campaign, ingest_headers, make_shot
):
    shot = make_shot()
    first = client.post(_shots_url(campaign), json=shot, headers=ingest_headers)
    again = client.post(_shots_url(campaign), json=shot, headers=ingest_headers)
    assert (first.status_code, again.status_code) == (201, 200)
    assert again.json()["evaluation"] == first.json()["evaluation"]
    assert _count(app, Shot) == 1
    assert _count(app, ShotRevision) == 1


def test_the_same_instant_written_with_another_offset_or_as_250_0_is_the_same_shot(
    client, campaign, ingest_headers, make_shot
):
    shot = make_shot(taken_at="2026-11-17T09:12:03.120Z")
    client.post(_shots_url(campaign), json=shot, headers=ingest_headers)
    same = make_shot(taken_at="2026-11-17T10:12:03.12+01:00", changes={"driver.momentum_gev": 250.0})
    assert client.post(_shots_url(campaign), json=same, headers=ingest_headers).status_code == 200


def test_reposting_a_shot_id_with_a_different_payload_answers_409_naming_the_fields(
    client, app, campaign, ingest_headers, make_shot
):
    client.post(_shots_url(campaign), json=make_shot(), headers=ingest_headers)
    changed = make_shot(changes={"plasma.density_cm3": 4.1e14, "notes": "retake"})
    response = client.post(_shots_url(campaign), json=changed, headers=ingest_headers)
    assert response.status_code == 409
    assert response.headers["content-type"].startswith("application/problem+json")
    assert sorted(_fields(response)) == ["notes", "plasma.density_cm3"]
    assert _count(app, Shot) == 1


def test_posting_to_an_unknown_campaign_gets_404(client, campaign, ingest_headers, make_shot):
    response = client.post(_shots_url("no-such-campaign"), json=make_shot(), headers=ingest_headers)
    assert response.status_code == 404
    assert response.headers["content-type"].startswith("application/problem+json")


def test_reading_an_unknown_shot_gets_404(client, campaign, viewer_headers):
    assert client.get(f"{_shots_url(campaign)}/nope", headers=viewer_headers).status_code == 404


# --- batches ------------------------------------------------------------------------------------


def _batch(make_shot, n: int, start: int = 0) -> list[dict]:
    return [
        make_shot(
            i % 3, shot_id=f"b-{i:05d}", taken_at=f"2026-11-17T{10 + i // 3600:02d}:{i // 60 % 60:02d}:{i % 60:02d}Z"
        )
        for i in range(start, start + n)
    ]


def test_a_batch_is_stored_and_evaluated_in_one_call(client, app, campaign, ingest_headers, make_shot):
    response = client.post(
        f"{_shots_url(campaign)}/batch", json={"shots": _batch(make_shot, 30)}, headers=ingest_headers
    )
    assert response.status_code == 201, response.text
    body = response.json()
    assert (body["created"], body["unchanged"], body["duplicates_in_batch"]) == (30, 0, 0)
    assert [i["status"] for i in body["items"][:3]] == ["nominal", "outside", "outside"]
    assert _count(app, Shot) == _count(app, Evaluation) == _count(app, ShotRevision) == 30
    assert _count(app, Flag) > 0


def test_a_batch_with_bad_shots_is_refused_whole_and_lists_every_failing_index_and_field(
    client, app, campaign, ingest_headers, make_shot
):
    shots = _batch(make_shot, 200)
    shots[7]["plasma"]["density_cm3"] = -1
    shots[150]["driver"]["species"] = "neutron"
    shots[151]["taken_at"] = "yesterday"
    shots[199] = "not a shot"
    response = client.post(f"{_shots_url(campaign)}/batch", json={"shots": shots}, headers=ingest_headers)
    assert response.status_code == 422
    fields = _fields(response)
    assert "shots.7.plasma.density_cm3" in fields
    assert "shots.150.driver.species" in fields
    assert "shots.151.taken_at" in fields
    assert any(f.startswith("shots.199") for f in fields)
    assert _count(app, Shot) == 0


def test_a_batch_holding_the_same_shot_twice_stores_it_once(client, app, campaign, ingest_headers, make_shot):
    shots = _batch(make_shot, 3)
    response = client.post(f"{_shots_url(campaign)}/batch", json={"shots": shots + [shots[1]]}, headers=ingest_headers)
    body = response.json()
    assert (body["created"], body["duplicates_in_batch"]) == (3, 1)
    assert body["items"][3]["outcome"] == "duplicate_in_batch"
    assert _count(app, Shot) == 3


def test_replaying_a_batch_answers_200_with_every_shot_unchanged(client, app, campaign, ingest_headers, make_shot):
    shots = _batch(make_shot, 10)
    client.post(f"{_shots_url(campaign)}/batch", json={"shots": shots[:6]}, headers=ingest_headers)
    response = client.post(f"{_shots_url(campaign)}/batch", json={"shots": shots}, headers=ingest_headers)
    assert response.status_code == 201
    assert (response.json()["created"], response.json()["unchanged"]) == (4, 6)
    again = client.post(f"{_shots_url(campaign)}/batch", json={"shots": shots}, headers=ingest_headers)
    assert again.status_code == 200
    assert (again.json()["created"], again.json()["unchanged"]) == (0, 10)
    assert _count(app, Shot) == 10


def test_a_batch_replaying_a_stored_shot_with_other_values_is_refused_whole_with_409(
    client, app, campaign, ingest_headers, make_shot
):
    shots = _batch(make_shot, 5)
    client.post(f"{_shots_url(campaign)}/batch", json={"shots": shots[:2]}, headers=ingest_headers)
    shots[1]["plasma"]["length_m"] = 9.0
    response = client.post(f"{_shots_url(campaign)}/batch", json={"shots": shots}, headers=ingest_headers)
    assert response.status_code == 409
    assert _fields(response) == ["shots.1.plasma.length_m"]
    assert _count(app, Shot) == 2


def test_a_batch_with_two_different_bodies_under_one_shot_id_is_refused_with_409(
    client, app, campaign, ingest_headers, make_shot
):
    shots = _batch(make_shot, 3)
    twin = make_shot(0, shot_id=shots[0]["shot_id"], taken_at=shots[0]["taken_at"], changes={"plasma.length_m": 7.5})
    response = client.post(f"{_shots_url(campaign)}/batch", json={"shots": shots + [twin]}, headers=ingest_headers)
    assert response.status_code == 409
    assert _fields(response) == ["shots.3.plasma.length_m"]
    assert _count(app, Shot) == 0


def test_a_batch_over_the_shot_limit_is_refused(client, app, campaign, ingest_headers, make_shot, settings):
    shot = make_shot()
    response = client.post(
        f"{_shots_url(campaign)}/batch", json={"shots": [shot] * (settings.max_batch_shots + 1)}, headers=ingest_headers
    )
    assert response.status_code == 422
    assert _fields(response) == ["shots"]


def test_a_batch_body_without_a_shots_list_gets_422(client, campaign, ingest_headers):
    response = client.post(f"{_shots_url(campaign)}/batch", json={"shot": []}, headers=ingest_headers)
    assert response.status_code == 422
    assert _fields(response) == ["shots"]


# --- body size -------------------------------------------------------------------------------------


@pytest.fixture
def small_body_client(settings):
    from starlette.testclient import TestClient

    from app.main import create_app

    app = create_app(settings.model_copy(update={"max_body_bytes": 2000}))
    with TestClient(app) as client:
        yield client
    app.state.engine.dispose()


def test_an_oversized_body_gets_413_from_its_content_length(small_body_client, ingest_token):
    response = small_body_client.post(
        "/api/v1/campaigns/any/shots",
        content=b"{" + b" " * 5000 + b"}",
        headers={"Authorization": f"Bearer {ingest_token}", "Content-Type": "application/json"},
    )
    assert response.status_code == 413
    assert response.headers["content-type"].startswith("application/problem+json")


def test_an_oversized_streamed_body_without_content_length_gets_413(small_body_client, ingest_token):
    def chunks():
        yield b"{"
        for _ in range(50):
            yield b" " * 100
        yield b"}"

    response = small_body_client.post(
        "/api/v1/campaigns/any/shots",
        content=chunks(),
        headers={"Authorization": f"Bearer {ingest_token}", "Content-Type": "application/json"},
    )
    assert response.status_code == 413


# --- listing ---------------------------------------------------------------------------------------


def test_a_physicist_pages_through_every_shot_with_a_cursor_and_sees_each_once(
    client, campaign, ingest_headers, viewer_headers, make_shot
):
    client.post(f"{_shots_url(campaign)}/batch", json={"shots": _batch(make_shot, 25)}, headers=ingest_headers)
    seen, cursor = [], None
    for _ in range(10):  # bounded
        params = {"limit": 7, **({"cursor": cursor} if cursor else {})}
        page = client.get(_shots_url(campaign), params=params, headers=viewer_headers).json()
        seen += [item["shot_id"] for item in page["items"]]
        cursor = page["next_cursor"]
        if cursor is None:
            break
    assert seen == [f"b-{i:05d}" for i in range(25)]


def test_newest_first_paging_works_too(client, campaign, ingest_headers, viewer_headers, make_shot):
    client.post(f"{_shots_url(campaign)}/batch", json={"shots": _batch(make_shot, 9)}, headers=ingest_headers)
    first = client.get(_shots_url(campaign), params={"order": "desc", "limit": 5}, headers=viewer_headers).json()
    rest = client.get(
        _shots_url(campaign),
        params={"order": "desc", "limit": 5, "cursor": first["next_cursor"]},
        headers=viewer_headers,
    ).json()
    ids = [i["shot_id"] for i in first["items"] + rest["items"]]
    assert ids == [f"b-{i:05d}" for i in reversed(range(9))]
    assert rest["next_cursor"] is None


def test_shots_are_filtered_by_status_flag_time_range_and_seed_method(
    client, campaign, ingest_headers, viewer_headers, make_shot
):
    client.post(f"{_shots_url(campaign)}/batch", json={"shots": _batch(make_shot, 12)}, headers=ingest_headers)

    def ids(**params):
        response = client.get(_shots_url(campaign), params=params, headers=viewer_headers)
        assert response.status_code == 200, response.text
        return [i["shot_id"] for i in response.json()["items"]]

    assert ids(status="nominal") == [f"b-{i:05d}" for i in range(0, 12, 3)]
    assert ids(flag="BEAM_TOO_WIDE") == [f"b-{i:05d}" for i in range(1, 12, 3)]
    assert ids(seed_method="electron_bunch") == [f"b-{i:05d}" for i in range(1, 12, 3)]
    assert ids(**{"from": "2026-11-17T10:00:03Z", "to": "2026-11-17T10:00:06Z"}) == ["b-00003", "b-00004", "b-00005"]
    assert ids(status="marginal,outside", flag="WEAK_GROWTH", **{"to": "2026-11-17T10:00:05Z"}) == [
        "b-00001",
        "b-00004",
    ]


def test_a_forged_cursor_or_unknown_filter_value_gets_422(client, campaign, viewer_headers):
    assert client.get(_shots_url(campaign), params={"cursor": "bm9wZQ"}, headers=viewer_headers).status_code == 422
    assert client.get(_shots_url(campaign), params={"status": "weird"}, headers=viewer_headers).status_code == 422
    assert client.get(_shots_url(campaign), params={"flag": "NOPE"}, headers=viewer_headers).status_code == 422
    response = client.get(_shots_url(campaign), params={"from": "2026-11-17T10:00:00"}, headers=viewer_headers)
    assert response.status_code == 422
    assert _fields(response) == ["query.from"]


# --- corrections -----------------------------------------------------------------------------------


def test_a_correction_is_stored_as_a_new_revision_and_re_evaluated(
    client, app, campaign, ingest_headers, viewer_headers, make_shot
):
    original = make_shot("ex-2")
    client.post(_shots_url(campaign), json=original, headers=ingest_headers)
    corrected = make_shot("ex-2", changes={"driver.sigma_r_mm": 0.2})
    response = client.put(
        f"{_shots_url(campaign)}/ex-2",
        params={"reason": "wrong screen calibration"},
        json=corrected,
        headers=ingest_headers,
    )
    assert response.status_code == 200, response.text
    body = response.json()
    assert body["revision"] == 2
    assert body["payload"] == corrected
    assert body["evaluation"]["kp_sigma_r"] == pytest.approx(model.evaluate_shot(corrected)["kp_sigma_r"])
    revisions = client.get(f"{_shots_url(campaign)}/ex-2/revisions", headers=viewer_headers).json()["items"]
    assert [r["revision"] for r in revisions] == [1, 2]
    assert revisions[0]["payload"] == original
    assert revisions[1]["reason"] == "wrong screen calibration"
    assert _count(app, Shot) == 1


def test_putting_the_identical_body_makes_no_new_revision(client, campaign, ingest_headers, viewer_headers, make_shot):
    shot = make_shot()
    client.post(_shots_url(campaign), json=shot, headers=ingest_headers)
    assert (
        client.put(f"{_shots_url(campaign)}/{shot['shot_id']}", json=shot, headers=ingest_headers).json()["revision"]
        == 1
    )
    assert (
        len(client.get(f"{_shots_url(campaign)}/{shot['shot_id']}/revisions", headers=viewer_headers).json()["items"])
        == 1
    )


def test_a_correction_with_bad_values_gets_422_and_keeps_the_stored_revision(
    client, campaign, ingest_headers, viewer_headers, make_shot
):
    shot = make_shot()
    client.post(_shots_url(campaign), json=shot, headers=ingest_headers)
    bad = make_shot(changes={"plasma.length_m": -3})
    response = client.put(f"{_shots_url(campaign)}/{shot['shot_id']}", json=bad, headers=ingest_headers)
    assert response.status_code == 422
    assert _fields(response) == ["plasma.length_m"]
    assert client.get(f"{_shots_url(campaign)}/{shot['shot_id']}", headers=viewer_headers).json()["payload"] == shot


def test_a_correction_under_another_shot_id_is_refused(client, campaign, ingest_headers, make_shot):
    client.post(_shots_url(campaign), json=make_shot(), headers=ingest_headers)
    response = client.put(f"{_shots_url(campaign)}/ex-1", json=make_shot(shot_id="ex-9"), headers=ingest_headers)
    assert response.status_code == 422
    assert _fields(response) == ["shot_id"]


def test_correcting_an_unknown_shot_gets_404(client, campaign, ingest_headers, make_shot):
    assert client.put(f"{_shots_url(campaign)}/ex-1", json=make_shot(), headers=ingest_headers).status_code == 404


# --- what-if ---------------------------------------------------------------------------------------


def test_a_what_if_evaluation_answers_the_model_numbers_and_stores_nothing(
    client, app, campaign, viewer_headers, make_shot
):
    shot = make_shot("ex-3", drop=["shot_id", "taken_at"])
    response = client.post("/api/v1/evaluate", json=shot, headers=viewer_headers)
    assert response.status_code == 200, response.text
    direct = model.evaluate_shot(shot)
    assert response.json()["efolds_exit"] == pytest.approx(direct["efolds_exit"])
    assert response.json()["status"] == direct["status"]
    assert _count(app, Shot) == 0


def test_a_what_if_with_a_campaign_uses_its_settings(client, campaign, admin_headers, viewer_headers, make_shot):
    client.patch(
        f"/api/v1/campaigns/{campaign}/settings",
        json={"limits": {"BEAM_TOO_WIDE": {"marginal": 5.0, "outside": 10.0}}},
        headers=admin_headers,
    )
    shot = make_shot("ex-2")
    plain = client.post("/api/v1/evaluate", json=shot, headers=viewer_headers).json()
    with_campaign = client.post(
        "/api/v1/evaluate", params={"campaign": campaign}, json=shot, headers=viewer_headers
    ).json()
    assert "BEAM_TOO_WIDE" in {f["code"] for f in plain["flags"]}
    assert "BEAM_TOO_WIDE" not in {f["code"] for f in with_campaign["flags"]}
    assert with_campaign["settings_version"] == 2


def test_a_what_if_with_bad_input_gets_422(client, viewer_headers, campaign, make_shot):
    response = client.post(
        "/api/v1/evaluate", json=make_shot(changes={"plasma.density_cm3": 0}), headers=viewer_headers
    )
    assert response.status_code == 422
    assert _fields(response) == ["plasma.density_cm3"]


def test_taken_at_is_stored_and_answered_in_utc(client, campaign, ingest_headers, viewer_headers, make_shot):
    client.post(_shots_url(campaign), json=make_shot(taken_at="2026-11-17T10:12:03.120+01:00"), headers=ingest_headers)
    stored = client.get(f"{_shots_url(campaign)}/ex-1", headers=viewer_headers).json()
    assert stored["taken_at"] == "2026-11-17T09:12:03.120Z"
    assert stored["payload"]["taken_at"] == "2026-11-17T10:12:03.120+01:00"  # the raw payload stays verbatim


def test_an_unknown_field_holding_a_huge_integer_is_kept(client, campaign, ingest_headers, viewer_headers, make_shot):
    shot = make_shot()
    shot["daq"] = {"counter": 10**30}
    assert client.post(_shots_url(campaign), json=shot, headers=ingest_headers).status_code == 201
    assert (
        client.get(f"{_shots_url(campaign)}/ex-1", headers=viewer_headers).json()["payload"]["daq"]["counter"] == 10**30
    )


def test_seed_fields_without_a_seed_method_are_refused_alone_and_in_a_batch(
    client, campaign, ingest_headers, make_shot
):
    shot = make_shot(drop=["seed.method"])
    single = client.post(_shots_url(campaign), json=shot, headers=ingest_headers)
    assert single.status_code == 422
    assert _fields(single) == ["seed.method"]
    batch = client.post(f"{_shots_url(campaign)}/batch", json={"shots": [make_shot(1), shot]}, headers=ingest_headers)
    assert batch.status_code == 422
    assert _fields(batch) == ["shots.1.seed.method"]


def test_a_section_that_is_not_an_object_is_named(client, campaign, ingest_headers, make_shot):
    shot = make_shot()
    shot["plasma"] = 5
    response = client.post(
        f"{_shots_url(campaign)}/batch", json={"shots": [make_shot(1), shot]}, headers=ingest_headers
    )
    assert response.status_code == 422
    assert "shots.1.plasma" in _fields(response)


def test_a_caller_without_a_token_gets_401_before_any_validation(client, campaign):
    response = client.post(f"{_shots_url(campaign)}/batch", json={"nonsense": True})
    assert response.status_code == 401


def test_an_input_integer_too_large_for_a_float_gets_422_not_a_crash(client, app, campaign, ingest_headers, make_shot):
    shot = make_shot()
    body = json.dumps(shot).replace('"density_cm3": 400000000000000.0', '"density_cm3": 1' + "0" * 400)
    for url, content in ((_shots_url(campaign), body), (f"{_shots_url(campaign)}/batch", '{"shots": [' + body + "]}")):
        response = client.post(url, content=content, headers={**ingest_headers, "Content-Type": "application/json"})
        assert response.status_code == 422, response.text
        assert _fields(response)[0].endswith("plasma.density_cm3")
    assert _count(app, Shot) == 0
