"""A physicist plans tomorrow's shots over the API: scans, nominal windows, the nearest nominal shot and
sensitivities around a shot given inline or a stored one, with the campaign's settings; nothing is stored.

The model part (every scan cell equals evaluate_shot, window edges, nearest within 2 % of a brute-force
search) is tested in tests/model/test_plan.py; here: the answers' shapes, order and text, the base and
settings used, the errors and the roles."""

from __future__ import annotations

import base64
import json
import math

import httpx
import numpy as np
import orjson
import pytest
from sqlalchemy import func, select

import model
from app.presentation.json_text import coded_array_json
from app.tables import Shot
from model import plan
from tests.support.plans import failing, planned

SCAN = "/api/v1/plans/scan"
WINDOW = "/api/v1/plans/window"
NEAREST = "/api/v1/plans/nearest"
SENSITIVITIES = "/api/v1/plans/sensitivities"


def _fields(response) -> dict[str, str]:
    assert response.headers["content-type"].startswith("application/problem+json"), response.text
    return {e["field"]: e["reason"] for e in response.json()["errors"]}


def _same(answer_value, expected) -> bool:
    return (answer_value is None and expected is None) or answer_value == expected


@pytest.fixture
def cold(make_shot):
    """Example 1 with a cold beam (MODEL.md section 8: no waist beta function, null) and a measured frequency."""
    return make_shot("ex-1", changes={"driver.emittance_n_mm_mrad": 0.0})


# ------------------------------------------------------------------------------------------ scan


def test_a_scan_answers_flat_row_major_arrays_with_statuses_and_severities_as_text_and_null_for_no_value(
    client, viewer_headers, cold
):
    axes = [
        {"field": "plasma.length_m", "start": 0.001, "stop": 10.0, "steps": 4, "spacing": "log"},
        {"field": "plasma.density_cm3", "start": 2e14, "stop": 8e14, "steps": 3},
    ]
    response = client.post(SCAN, json={"base": cold, "axes": axes}, headers=viewer_headers)
    assert response.status_code == 200, response.text
    answer = response.json()
    assert answer["shape"] == [4, 3]
    assert [a["field"] for a in answer["axes"]] == ["plasma.length_m", "plasma.density_cm3"]
    assert [a["unit"] for a in answer["axes"]] == ["m", "cm^-3"]
    assert answer["axes"][0]["values"] == np.geomspace(0.001, 10.0, 4).tolist()
    assert answer["axes"][1]["values"] == np.linspace(2e14, 8e14, 3).tolist()
    drawn = {f.name for f in model.OUTPUT_FIELDS if not f.measured_only}
    assert set(answer["outputs"]) == drawn  # a plan has no measurements: no measured-only output
    assert set(answer["flags"]) == set(model.FLAG_CODES)
    assert all(len(v) == 12 for v in [answer["status"], *answer["outputs"].values(), *answer["flags"].values()])
    for i, length in enumerate(answer["axes"][0]["values"]):
        for j, density in enumerate(answer["axes"][1]["values"]):
            cell = 3 * i + j  # row-major: the first axis varies slowest
            expected = model.evaluate_shot(planned(cold, {"plasma.length_m": length, "plasma.density_cm3": density}))
            assert answer["status"][cell] == expected["status"]
            assert all(_same(answer["outputs"][name][cell], expected[name]) for name in drawn), cell
            fired = {f["code"]: f["severity"] for f in expected["flags"]}
            assert {code: answer["flags"][code][cell] for code in model.FLAG_CODES} == {
                code: fired.get(code) for code in model.FLAG_CODES
            }
    assert answer["outputs"]["waist_beta_m"] == [None] * 12  # a cold beam has no waist beta function
    assert answer["base"] == {"campaign": None, "shot_id": None, "revision": None}
    assert answer["model_version"] == model.MODEL_VERSION and answer["settings_version"] is None


def test_a_scan_answers_only_the_outputs_asked_for(client, viewer_headers, make_shot):
    axis = {"field": "driver.population", "start": 1e11, "stop": 3e11, "steps": 5}
    body = {"base": make_shot(), "axes": [axis], "outputs": ["efolds_exit", "phase_slip_rad"]}
    answer = client.post(SCAN, json=body, headers=viewer_headers).json()
    assert list(answer["outputs"]) == ["efolds_exit", "phase_slip_rad"] and answer["shape"] == [5]
    assert len(answer["status"]) == 5 and set(answer["flags"]) == set(model.FLAG_CODES)


def _answer_built_whole(result: plan.Scan, provenance: dict) -> bytes:
    """The scan answer as one plain dict written by orjson in one call: the shape the specification gives."""
    whole = {
        "axes": [{"field": a.field, "unit": a.unit, "values": a.values} for a in result.axes],
        "shape": list(result.shape),
        "status": [model.STATUSES[r] for r in result.status.tolist()],
        "outputs": result.outputs,
        "flags": {
            code: [model.SEVERITY_BY_RANK[r] or None for r in ranks.tolist()] for code, ranks in result.flags.items()
        },
        **provenance,
    }
    return orjson.dumps(whole, option=orjson.OPT_SERIALIZE_NUMPY)


def test_a_large_scan_is_sent_as_it_is_written_and_is_byte_for_byte_the_answer_built_whole(
    live_server, viewer_headers, cold
):
    # Statuses and severities written from ranks region by region, each output straight from its float64
    # array: the same bytes as the dict written at once (every number the exact float64, NaN as null).
    sigma_z = cold["driver"]["sigma_z_mm"]
    axes = [
        {"field": "plasma.density_cm3", "start": 1e14, "stop": 3e15, "steps": 60, "spacing": "log"},
        {"field": "seed.position_mm", "start": -2 * sigma_z, "stop": 2 * sigma_z, "steps": 50},
    ]
    with httpx.stream("POST", live_server + SCAN, json={"base": cold, "axes": axes}, headers=viewer_headers) as sent:
        assert sent.status_code == 200 and sent.headers["content-type"] == "application/json"
        assert sent.headers["transfer-encoding"] == "chunked" and "content-length" not in sent.headers
        body = sent.read()
    result = plan.scan(cold, axes)
    assert len(set(result.status.tolist())) > 1 and any(np.isnan(v).any() for v in result.outputs.values())
    provenance = {"base": {"campaign": None, "shot_id": None, "revision": None}}
    provenance |= {"model_version": model.MODEL_VERSION, "settings_version": None}
    assert body == _answer_built_whole(result, provenance)


def test_a_scan_asked_for_float64_base64_carries_each_output_as_its_exact_float64_values(client, viewer_headers, cold):
    # The opt-in compact encoding: the same answer, each output the base64 text of its little-endian float64
    # values (NaN where the default answer has null), and the answer says which encoding it used.
    axes = [
        {"field": "plasma.density_cm3", "start": 1e14, "stop": 3e15, "steps": 7, "spacing": "log"},
        {"field": "plasma.length_m", "start": 0.5, "stop": 10.0, "steps": 5},
    ]
    plain = client.post(SCAN, json={"base": cold, "axes": axes}, headers=viewer_headers).json()
    body = {"base": cold, "axes": axes, "output_encoding": "float64_base64"}
    compact = client.post(SCAN, json=body, headers=viewer_headers).json()
    assert compact.pop("output_encoding") == "float64_base64" and "output_encoding" not in plain
    assert compact.keys() == plain.keys() and compact["outputs"].keys() == plain["outputs"].keys()
    for name, text in compact["outputs"].items():
        values = np.frombuffer(base64.b64decode(text), dtype="<f8")
        expected = np.array([np.nan if v is None else v for v in plain["outputs"][name]])
        assert np.array_equal(values, expected, equal_nan=True), name
    assert np.isnan(np.frombuffer(base64.b64decode(compact["outputs"]["waist_beta_m"]), dtype="<f8")).all()
    assert {k: v for k, v in compact.items() if k != "outputs"} == {k: v for k, v in plain.items() if k != "outputs"}


def test_an_unknown_output_encoding_is_a_422_naming_it(client, viewer_headers, cold):
    axes = [{"field": "plasma.length_m", "start": 1, "stop": 2, "steps": 3}]
    response = client.post(SCAN, json={"base": cold, "axes": axes, "output_encoding": "hex"}, headers=viewer_headers)
    assert response.status_code == 422 and "output_encoding" in _fields(response)


@pytest.mark.parametrize(
    "ranks",
    [
        [],
        [0],
        [2, 2, 2, 0, 0, 1],
        [0] * 100 + [3] * 7 + [0] * 50,
        [0, 1, 2, 3] * 40,  # changing at every point: written as a list
    ],
)
def test_ranks_are_written_as_their_texts_whatever_their_runs(ranks):
    texts = [s or None for s in model.SEVERITY_BY_RANK]
    written = coded_array_json(np.array(ranks, dtype=np.int8), texts)
    assert written == orjson.dumps([texts[r] for r in ranks])


def test_the_plasma_frequency_of_a_density_scan_is_the_electron_plasma_frequency_of_each_density(
    client, viewer_headers, make_shot
):
    # Outside check: f_pe = omega_pe/(2 pi) with omega_pe from plasmapy.formulary (NRL Plasma Formulary:
    # f_pe = 8.98 kHz sqrt(n_e / cm^-3)), at every point of the scan.
    formulary = pytest.importorskip("plasmapy.formulary")
    u = pytest.importorskip("astropy.units")
    axis = {"field": "plasma.density_cm3", "start": 1e14, "stop": 1e16, "steps": 7, "spacing": "log"}
    body = {"base": make_shot(), "axes": [axis], "outputs": ["plasma_frequency_ghz"]}
    answer = client.post(SCAN, json=body, headers=viewer_headers).json()
    for density, frequency in zip(answer["axes"][0]["values"], answer["outputs"]["plasma_frequency_ghz"], strict=True):
        omega = formulary.plasma_frequency(density * u.cm**-3, particle="e-").to_value(u.rad / u.s)
        assert frequency == pytest.approx(omega / (2 * math.pi) / 1e9, rel=1e-6)
        assert frequency == pytest.approx(8.98e3 * math.sqrt(density) / 1e9, rel=1e-3)


@pytest.mark.parametrize(
    ("axes", "outputs", "field", "words"),
    [
        ([{"field": "plasma.density_cm3", "start": 1e9, "stop": 1e15, "steps": 3}], None, "axes.0.start", "range"),
        (
            [
                {"field": "plasma.length_m", "start": 1, "stop": 9, "steps": 3},
                {"field": "plasma.density_cm3", "start": 1e14, "stop": 1e21, "steps": 3},
            ],
            None,
            "axes.1.stop",
            "range",
        ),
        ([{"field": "plasma.colour", "start": 1, "stop": 2, "steps": 3}], None, "axes.0.field", "unknown input"),
        ([{"field": "plasma.length_m", "start": 1, "stop": 2, "steps": 0}], None, "axes.0.steps", ">= 1"),
        (
            [{"field": "seed.position_mm", "start": -5, "stop": 5, "steps": 3, "spacing": "log"}],
            None,
            "axes.0.start",
            "log",
        ),
        ([{"field": "plasma.length_m", "start": "one", "stop": 2, "steps": 3}], None, "axes.0.start", "number"),
        (
            [{"field": "plasma.length_m", "start": 1, "stop": 2, "steps": 3, "spacing": "cubic"}],
            None,
            "axes.0.spacing",
            "",
        ),
        ([{"field": "plasma.length_m", "start": 1, "stop": 2, "steps": 3, "step": 1}], None, "axes.0.step", "Extra"),
        (
            [
                {"field": "plasma.length_m", "start": 1, "stop": 2, "steps": 600},
                {"field": "plasma.density_cm3", "start": 1e14, "stop": 1e15, "steps": 600},
            ],
            None,
            "axes",
            "250,000",
        ),
        ([], None, "axes", "one or two"),
        (
            [{"field": "plasma.length_m", "start": 1, "stop": 2, "steps": 3}],
            ["efolds_exit", "nope"],
            "outputs.1",
            "nope",
        ),
    ],
)
def test_a_bad_scan_request_gets_a_422_naming_the_failing_field(
    client, viewer_headers, make_shot, axes, outputs, field, words
):
    body = {"base": make_shot(), "axes": axes} | ({"outputs": outputs} if outputs else {})
    response = client.post(SCAN, json=body, headers=viewer_headers)
    assert response.status_code == 422
    found = _fields(response)
    assert field in found and words in found[field], found


def test_a_base_the_model_refuses_is_named_under_base(client, viewer_headers, make_shot):
    axis = {"field": "plasma.length_m", "start": 1, "stop": 2, "steps": 3}
    bad = make_shot(changes={"plasma.density_cm3": -4e14})
    assert "base.plasma.density_cm3" in _fields(
        client.post(SCAN, json={"base": bad, "axes": [axis]}, headers=viewer_headers)
    )
    assert "base" in _fields(client.post(SCAN, json={"base": [1, 2], "axes": [axis]}, headers=viewer_headers))


def test_every_planner_endpoint_documents_its_request_and_answer_in_openapi(client):
    spec = client.get("/openapi.json").json()
    for path, request, answer in (
        (SCAN, "ScanIn", "ScanOut"),
        (WINDOW, "WindowIn", "WindowsOut"),
        (NEAREST, "NearestIn", "NearestOut"),
        (SENSITIVITIES, "SensitivitiesIn", "SensitivitiesOut"),
    ):
        operation = spec["paths"][path]["post"]
        assert operation["requestBody"]["content"]["application/json"]["schema"]["$ref"].endswith(request)
        assert operation["responses"]["200"]["content"]["application/json"]["schema"]["$ref"].endswith(answer)
        assert {"404", "422"} <= set(operation["responses"])


# ------------------------------------------------------------------------------------------ stored shots, settings


@pytest.fixture
def stored(client, campaign, ingest_headers, make_shot):
    """A stored shot of the test campaign, corrected once (its current revision is 2)."""
    shot = make_shot("ex-1", shot_id="plan-1", changes={"plasma.density_cm3": 5e14})
    assert client.post(f"/api/v1/campaigns/{campaign}/shots", json=shot, headers=ingest_headers).status_code == 201
    corrected = make_shot("ex-1", shot_id="plan-1", changes={"plasma.density_cm3": 4.5e14})
    response = client.put(
        f"/api/v1/campaigns/{campaign}/shots/plan-1",
        params={"reason": "density log"},
        json=corrected,
        headers=ingest_headers,
    )
    assert response.status_code == 200 and response.json()["revision"] == 2
    return corrected


def test_a_stored_shot_is_planned_from_its_current_revision(client, app, campaign, viewer_headers, stored):
    axis = {"field": "plasma.length_m", "start": 2.0, "stop": 12.0, "steps": 6}
    by_reference = client.post(
        SCAN, json={"base": {"campaign": campaign, "shot_id": "plan-1"}, "axes": [axis]}, headers=viewer_headers
    ).json()
    inline = client.post(
        SCAN, json={"base": stored, "axes": [axis], "campaign": campaign}, headers=viewer_headers
    ).json()
    assert by_reference["base"] == {"campaign": campaign, "shot_id": "plan-1", "revision": 2}
    assert inline["base"] == {"campaign": campaign, "shot_id": None, "revision": None}
    assert by_reference["outputs"] == inline["outputs"] and by_reference["status"] == inline["status"]
    # the request's campaign names the stored shot's campaign as well
    top_level = client.post(
        SCAN, json={"base": {"shot_id": "plan-1"}, "campaign": campaign, "axes": [axis]}, headers=viewer_headers
    ).json()
    assert top_level["outputs"] == by_reference["outputs"]
    with app.state.session_factory() as session:
        assert session.scalar(select(func.count()).select_from(Shot)) == 1  # a plan stores nothing


def test_an_unknown_stored_shot_or_campaign_is_a_404_and_a_malformed_reference_a_422(
    client, campaign, viewer_headers, stored
):
    axis = {"field": "plasma.length_m", "start": 2.0, "stop": 12.0, "steps": 3}

    def scan(body):
        return client.post(SCAN, json={"axes": [axis], **body}, headers=viewer_headers)

    missing = scan({"base": {"campaign": campaign, "shot_id": "plan-9"}})
    assert missing.status_code == 404 and "plan-9" in missing.json()["detail"]
    assert scan({"base": {"campaign": "elsewhere", "shot_id": "plan-1"}}).status_code == 404
    assert scan({"base": stored, "campaign": "elsewhere"}).status_code == 404
    assert "not a shot id" in _fields(scan({"base": {"campaign": campaign, "shot_id": 42}}))["base.shot_id"]
    assert "missing" in _fields(scan({"base": {"shot_id": "plan-1"}}))["base.campaign"]
    assert "base.revision" in _fields(scan({"base": {"campaign": campaign, "shot_id": "plan-1", "revision": 1}}))
    assert "campaign" in _fields(scan({"base": {"campaign": campaign, "shot_id": "plan-1"}, "campaign": "other"}))


@pytest.fixture
def strict_campaign(client, campaign, admin_headers, make_shot):
    """The test campaign with settings in which the base fails HOSING_RISK at half its own ratio, only that rule
    and BEAM_TOO_WIDE active; returns (settings as the model uses them, the settings version)."""
    response = client.patch(
        f"/api/v1/campaigns/{campaign}/settings",
        json=failing(make_shot(), ("BEAM_TOO_WIDE",), HOSING_RISK=0.5),
        headers=admin_headers,
    )
    assert response.status_code == 202, response.text
    body = response.json()["campaign"]
    return body["effective_settings"], body["settings_version"]


def test_a_campaign_named_by_the_request_plans_with_its_settings(
    client, campaign, viewer_headers, make_shot, strict_campaign
):
    settings, version = strict_campaign
    axis = {"field": "driver.sigma_r_mm", "start": 0.1, "stop": 0.4, "steps": 4}
    answer = client.post(
        SCAN, json={"base": make_shot(), "axes": [axis], "campaign": campaign}, headers=viewer_headers
    ).json()
    assert answer["settings_version"] == version == 2 and answer["base"]["campaign"] == campaign
    for cell, sigma_r in enumerate(answer["axes"][0]["values"]):
        expected = model.evaluate_shot(planned(make_shot(), {"driver.sigma_r_mm": sigma_r}), settings)
        assert answer["status"][cell] == expected["status"]
        assert answer["outputs"]["hosing_ratio"][cell] == expected["hosing_ratio"]
    at_base = client.post(
        SCAN,
        json={
            "base": make_shot(),
            "campaign": campaign,
            "axes": [{"field": "driver.sigma_r_mm", "start": 0.18, "stop": 0.18, "steps": 1}],
        },
        headers=viewer_headers,
    ).json()
    assert at_base["flags"]["HOSING_RISK"] == ["marginal"]  # its limit is half the base's own ratio
    window = client.post(WINDOW, json={"base": make_shot(), "campaign": campaign}, headers=viewer_headers).json()
    assert window["base_status"] == model.evaluate_shot(planned(make_shot()), settings)["status"] == "marginal"
    assert window["settings_version"] == version


# ------------------------------------------------------------------------------------------ windows


def test_nominal_windows_answer_the_models_windows_with_the_bounding_rules(client, viewer_headers, make_shot):
    shot = make_shot()
    answer = client.post(WINDOW, json={"base": shot}, headers=viewer_headers).json()
    expected = plan.nominal_windows(shot)
    assert answer["base_status"] == model.STATUSES[expected.base_status]
    assert [w["field"] for w in answer["windows"]] == plan.positive_fields_set(shot)
    for got, want in zip(answer["windows"], expected.windows, strict=True):
        assert got == {
            "field": want.field,
            "unit": want.unit,
            "base": want.base,
            "low": want.low,
            "high": want.high,
            "low_rules": list(want.low_rules),
            "high_rules": list(want.high_rules),
            "spacing": want.spacing,
            "span_low": want.span_low,
            "span_high": want.span_high,
            "found": want.found,
            "contains_base": want.contains_base,
            "low_problems": [{"field": f, "reason": r} for f, r in want.low_problems],
            "high_problems": [{"field": f, "reason": r} for f, r in want.high_problems],
        }
    some = client.post(
        WINDOW, json={"base": shot, "fields": ["seed.position_mm", "plasma.length_m"]}, headers=viewer_headers
    ).json()
    assert [w["field"] for w in some["windows"]] == ["seed.position_mm", "plasma.length_m"]
    assert some["windows"][0]["spacing"] == "linear"


def test_window_fields_are_checked_by_name(client, viewer_headers, make_shot):
    body = {"base": make_shot(), "fields": ["plasma.density_cm3", "plasma.colour"]}
    response = client.post(WINDOW, json=body, headers=viewer_headers)
    assert response.status_code == 422 and set(_fields(response)) == {"fields.1"}


# ------------------------------------------------------------------------------------------ nearest


def test_the_nearest_nominal_shot_comes_with_its_evaluation_as_post_evaluate_answers_it(
    client, campaign, viewer_headers, make_shot, strict_campaign
):
    shot = make_shot()
    body = {"base": shot, "vary": ["driver.sigma_r_mm", "plasma.density_cm3"], "campaign": campaign}
    answer = client.post(NEAREST, json=body, headers=viewer_headers).json()
    settings, version = strict_campaign
    expected = plan.nearest_nominal(shot, body["vary"], settings)
    assert answer["found"] and answer["status"] == "nominal"
    assert answer["inputs"] == expected.inputs and answer["distance"] == expected.distance
    assert answer["shot"] == planned(shot, expected.inputs)
    evaluated = client.post(
        "/api/v1/evaluate", params={"campaign": campaign}, json=answer["shot"], headers=viewer_headers
    )
    assert answer["evaluation"] == evaluated.json() and answer["evaluation"]["settings_version"] == version


def test_no_nominal_shot_in_reach_is_said_plainly(client, viewer_headers, make_shot):
    unseeded = make_shot("ex-3")  # rule UNSEEDED fires on every unseeded shot (MODEL.md section 7)
    body = {"base": unseeded, "vary": ["plasma.density_cm3", "plasma.length_m"]}
    answer = client.post(NEAREST, json=body, headers=viewer_headers).json()
    assert answer | {"base": None, "model_version": None} == {
        "found": False,
        "distance": None,
        "inputs": {},
        "status": None,
        "evaluation": None,
        "shot": None,
        "base": None,
        "model_version": None,
        "settings_version": None,
    }


def test_the_fields_to_vary_are_checked_by_name(client, viewer_headers, make_shot):
    body = {"base": make_shot(), "vary": ["plasma.density_cm3", "seed.position_mm"]}
    response = client.post(NEAREST, json=body, headers=viewer_headers)
    assert response.status_code == 422 and "positive" in _fields(response)["vary.1"]
    assert "vary" in _fields(client.post(NEAREST, json={"base": make_shot()}, headers=viewer_headers))


# ------------------------------------------------------------------------------------------ sensitivities


def test_the_sensitivity_table_is_the_models_largest_first_with_null_where_there_is_no_derivative(
    client, viewer_headers, make_shot
):
    shot = make_shot()
    answer = client.post(SENSITIVITIES, json={"base": shot}, headers=viewer_headers).json()
    expected = plan.plan_sensitivities(shot)
    assert [(r["output"], r["field"], r["one_sided"]) for r in answer["rows"]] == [
        (r.output, r.field, r.one_sided) for r in expected
    ]
    for got, want in zip(answer["rows"], expected, strict=True):
        assert got["value"] == (want.value if math.isfinite(want.value) else None)
    assert {r["output"] for r in answer["rows"]} == set(plan.PLAN_SENSITIVITY_OUTPUTS)


# ------------------------------------------------------------------------------------------ roles


BODIES = {
    SCAN: {"axes": [{"field": "plasma.length_m", "start": 1, "stop": 2, "steps": 2}]},
    WINDOW: {"fields": ["plasma.length_m"]},
    NEAREST: {"vary": ["plasma.length_m"]},
    SENSITIVITIES: {},
}


@pytest.mark.parametrize("path", list(BODIES))
def test_every_planner_endpoint_needs_a_token_and_any_role_may_plan(
    client, path, make_shot, viewer_headers, ingest_headers, admin_headers
):
    body = {"base": make_shot(), **BODIES[path]}
    refused = client.post(path, json=body)
    assert refused.status_code == 401 and refused.headers["www-authenticate"].startswith("Bearer")
    assert client.post(path, json=body, headers={"Authorization": "Bearer wlt_nope"}).status_code == 401
    for headers in (viewer_headers, ingest_headers, admin_headers):
        assert client.post(path, json=body, headers=headers).status_code == 200


def test_a_planner_question_in_malformed_json_names_the_line_and_column(client, viewer_headers):
    response = client.post(
        "/api/v1/plans/scan",
        content=b'{"base": {"shot_id": "x"},\n "axes": [oops]}',
        headers={**viewer_headers, "Content-Type": "application/json"},
    )
    assert response.status_code == 400
    assert response.json()["detail"] == "the body is not valid JSON: Expecting value at line 2, column 11"


def test_a_planner_question_sent_as_text_plain_answers_415_naming_application_json(client, viewer_headers, make_shot):
    body = {"base": make_shot(), "axes": [{"field": "plasma.density_cm3", "start": 1e14, "stop": 1e15, "steps": 3}]}
    response = client.post(
        "/api/v1/plans/scan", content=json.dumps(body), headers={**viewer_headers, "Content-Type": "text/plain"}
    )
    assert response.status_code == 415
    assert "application/json" in response.json()["detail"] and "text/plain" in response.json()["detail"]
