"""Response helpers shared by the routers: JSON encoded once (large chart and run
documents are not walked by FastAPI's encoder) and file downloads."""

from __future__ import annotations

from collections.abc import AsyncIterator, Iterable, Iterator
from typing import Any

from fastapi.responses import Response, StreamingResponse

from app.presentation.json_text import json_bytes, json_text

NO_STORE = {"Cache-Control": "no-store", "X-Content-Type-Options": "nosniff"}
# A file shown in the browser tab (the weekly HTML report) runs nothing and loads nothing:
# its styles are inline and its charts inline SVG.
REPORT_CONTENT_SECURITY_POLICY = (
    "default-src 'none'; style-src 'unsafe-inline'; img-src data:; base-uri 'none'; "
    "form-action 'none'; frame-ancestors 'none'; sandbox allow-popups allow-popups-to-escape-sandbox"
)


def json_response(value: Any, status_code: int = 200) -> Response:
    return Response(
        json_text(value).encode("utf-8"), status_code=status_code, media_type="application/json", headers=NO_STORE
    )


def numeric_json_response(value: Any, status_code: int = 200) -> Response:
    """JSON of large numeric answers (numpy arrays, NaN as null), written by orjson."""
    return Response(json_bytes(value), status_code=status_code, media_type="application/json", headers=NO_STORE)


def json_pieces_response(pieces: Iterator[bytes]) -> StreamingResponse:
    """A large JSON answer sent as it is written (chunked): the client reads a piece while the next one is
    encoded. The pieces are encoded here on the event loop, a millisecond or so each (a 250,000-point
    scan: a few ms): handing each one to the threadpool cost more wall time than it saved."""

    async def body() -> AsyncIterator[bytes]:
        for piece in pieces:
            yield piece

    return StreamingResponse(body(), media_type="application/json", headers=NO_STORE)


def _disposition(filename: str, inline: bool) -> dict[str, str]:
    headers = {"Content-Disposition": f'{"inline" if inline else "attachment"}; filename="{filename}"', **NO_STORE}
    if inline:
        headers["Content-Security-Policy"] = REPORT_CONTENT_SECURITY_POLICY
        headers["Referrer-Policy"] = "same-origin"
    return headers


def file_response(body: bytes, media_type: str, filename: str, *, inline: bool = False) -> Response:
    return Response(content=body, media_type=media_type, headers=_disposition(filename, inline))


def streamed_file(pieces: Iterable[str], media_type: str, filename: str) -> StreamingResponse:
    return StreamingResponse(iter(pieces), media_type=media_type, headers=_disposition(filename, inline=False))
