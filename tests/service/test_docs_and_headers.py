"""/docs served from this host, the OpenAPI schema describing shot bodies and problem
answers, and the headers of files shown in the browser."""

from __future__ import annotations

import re


def test_docs_load_nothing_from_another_host_and_carry_the_pages_csp(client):
    response = client.get("/docs")
    assert response.status_code == 200
    assert not re.search(r"(src|href)=\"(https?:)?//", response.text)
    assert "/assets/swagger-ui/swagger-ui-bundle.js" in response.text
    assert "script-src 'self'" in response.headers["content-security-policy"]
    assert response.headers["x-content-type-options"] == "nosniff"
    for asset in ("swagger-ui-bundle.js", "swagger-ui.css"):
        assert client.get(f"/assets/swagger-ui/{asset}").status_code == 200
    assert client.get("/static/js/api_docs.js").status_code == 200


def test_the_schema_describes_the_shot_body_as_a_model_with_strict_sections(client):
    schema = client.get("/openapi.json").json()
    shot_ref = {"$ref": "#/components/schemas/ShotIn"}
    for method, path in (
        ("post", "/api/v1/campaigns/{slug}/shots"),
        ("put", "/api/v1/campaigns/{slug}/shots/{shot_id}"),
        ("post", "/api/v1/evaluate"),
    ):
        assert schema["paths"][path][method]["requestBody"]["content"]["application/json"]["schema"] == shot_ref
    components = schema["components"]["schemas"]
    batch = schema["paths"]["/api/v1/campaigns/{slug}/shots/batch"]["post"]["requestBody"]
    assert batch["content"]["application/json"]["schema"] == {"$ref": "#/components/schemas/BatchInDoc"}
    assert components["ShotIn"]["properties"]["driver"] == {"$ref": "#/components/schemas/ShotDriver"}
    driver = components["ShotDriver"]
    assert driver["additionalProperties"] is False and "emittance_n_mm_mrad" in driver["properties"]
    assert "[mm mrad]" in driver["properties"]["emittance_n_mm_mrad"]["description"]


def test_every_error_answer_in_the_schema_is_a_problem_document(client):
    schema = client.get("/openapi.json").json()
    seen = 0
    for operations in schema["paths"].values():
        for operation in operations.values():
            for status, answer in operation["responses"].items():
                if int(status) >= 400:
                    seen += 1
                    assert list(answer["content"]) == ["application/problem+json"], (status, operation["summary"])
    assert seen > 100
    assert "HTTPValidationError" not in schema["components"]["schemas"]


def test_an_html_report_shown_in_the_browser_runs_nothing_and_is_not_sniffed(client, campaign, viewer_headers):
    response = client.get(f"/api/v1/campaigns/{campaign}/summary?week=2026-W47&format=html", headers=viewer_headers)
    assert response.status_code == 200
    assert response.headers["content-disposition"].startswith("inline")
    policy = response.headers["content-security-policy"]
    assert "default-src 'none'" in policy and "script-src" not in policy
    assert response.headers["x-content-type-options"] == "nosniff"
