"""The OpenAPI schema as clients need it, and /docs served from this server.

FastAPI's generated schema is completed in one pass:

- the shot bodies (one shot, a correction, a what-if, a batch) are described by the
  ``ShotIn`` model (``app.schemas``, from the model's field table), not as free-form
  objects (the service still parses them itself and keeps them verbatim);
- every error answer of every operation is ``application/problem+json`` with the
  ``Problem`` schema (RFC 9457), FastAPI's own 422 shape included.

/docs is Swagger UI (version 5, which reads OpenAPI 3.1) from the ``swagger-ui-py``
package's static files, served under
/assets/swagger-ui/ with the pages' Content-Security-Policy: nothing is loaded from
another host, and the page's only script is our own /static/js/api_docs.js.
"""

from __future__ import annotations

import html
import importlib.util
from pathlib import Path
from typing import Any

from fastapi import FastAPI, Request
from fastapi.openapi.utils import get_openapi
from fastapi.responses import HTMLResponse
from fastapi.staticfiles import StaticFiles

from app.problems import PROBLEM_JSON, STATUS_TITLES
from app.schemas import BatchInDoc, Problem, ShotIn

SWAGGER_ASSETS = "/assets/swagger-ui"


def swagger_ui_static() -> Path:
    """The Swagger UI files of the swagger-ui-py package (found without importing it: its
    package imports web-framework adapters we do not use)."""
    spec = importlib.util.find_spec("swagger_ui")
    if spec is None or not spec.submodule_search_locations:
        raise RuntimeError("the swagger-ui-py package is not installed")
    return Path(next(iter(spec.submodule_search_locations))) / "static"


# Operations whose body is one shot, and the batch.
_SHOT_BODIES = {
    ("post", "/api/v1/campaigns/{slug}/shots"),
    ("put", "/api/v1/campaigns/{slug}/shots/{shot_id}"),
    ("post", "/api/v1/evaluate"),
}
_BATCH_BODY = ("post", "/api/v1/campaigns/{slug}/shots/batch")
# Every operation may answer these (authentication, rate limits, bodies, the database).
_ERROR_STATUSES = (400, 401, 403, 404, 409, 413, 415, 422, 429, 503)
_REF = "#/components/schemas/{model}"


def _problem_response(status: int) -> dict[str, Any]:
    return {
        "description": STATUS_TITLES.get(status, "Error"),
        "content": {PROBLEM_JSON: {"schema": {"$ref": "#/components/schemas/Problem"}}},
    }


def _json_body(ref: str) -> dict[str, Any]:
    return {"required": True, "content": {"application/json": {"schema": {"$ref": ref}}}}


def build_openapi(app: FastAPI) -> dict[str, Any]:
    schema = get_openapi(
        title=app.title, version=app.version, summary=app.summary, description=app.description, routes=app.routes
    )
    components = schema.setdefault("components", {}).setdefault("schemas", {})
    for doc_model in (ShotIn, BatchInDoc, Problem):
        definition = doc_model.model_json_schema(ref_template=_REF)
        components.update(definition.pop("$defs", {}))
        components[doc_model.__name__] = definition
    components.pop("HTTPValidationError", None)
    components.pop("ValidationError", None)
    for path, operations in schema.get("paths", {}).items():
        for method, operation in operations.items():
            if (method, path) in _SHOT_BODIES:
                operation["requestBody"] = _json_body("#/components/schemas/ShotIn")
            elif (method, path) == _BATCH_BODY:
                operation["requestBody"] = _json_body("#/components/schemas/BatchInDoc")
            responses = operation.setdefault("responses", {})
            for status in _ERROR_STATUSES:
                responses[str(status)] = _problem_response(status)
    return schema


_DOCS_PAGE = """<!doctype html>
<html lang="en">
<head>
<meta charset="utf-8">
<title>wakeledger API</title>
<link rel="stylesheet" href="{root}{assets}/swagger-ui.css">
<link rel="icon" href="{root}/static/img/mark.svg" type="image/svg+xml">
</head>
<body>
<div id="swagger-ui" data-openapi-url="{root}/openapi.json"></div>
<script src="{root}{assets}/swagger-ui-bundle.js"></script>
<script src="{root}/static/js/api_docs.js"></script>
</body>
</html>
"""


def install_docs(app: FastAPI, page_headers: dict[str, str]) -> None:
    """The completed schema at /openapi.json and Swagger UI at /docs, assets from this server."""
    cached: dict[str, Any] = {}

    def openapi() -> dict[str, Any]:
        if "schema" not in cached:
            cached["schema"] = build_openapi(app)
        return cached["schema"]

    app.openapi = openapi  # type: ignore[method-assign]
    app.mount(SWAGGER_ASSETS, StaticFiles(directory=str(swagger_ui_static())), name="swagger-ui")

    @app.get("/docs", include_in_schema=False)
    def docs(request: Request) -> HTMLResponse:
        root = html.escape(request.scope.get("root_path", ""), quote=True)  # WAKELEDGER_ROOT_PATH
        return HTMLResponse(_DOCS_PAGE.format(root=root, assets=SWAGGER_ASSETS), headers=page_headers)
