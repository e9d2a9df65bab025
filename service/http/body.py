"""Reading request bodies and writing JSON answers, shared by every view."""

from __future__ import annotations

from collections import deque
from contextlib import suppress
from typing import Any

import orjson
from flask import Response, current_app, request
from werkzeug.exceptions import BadRequest, HTTPException, RequestEntityTooLarge

from service.errors import MalformedBody, UnsupportedMediaType
from service.http.duplicates import duplicate_keys
from service.http.encoding import (
    InflatedTooLarge,
    compressed_chunks,
    inflate,
    request_coding,
)
from service.http.recording import Recorder
from service.settings import Settings


def current_settings() -> Settings:
    """The settings of the app serving this request."""
    settings: Settings = current_app.extensions["certimatch.settings"]
    return settings


def current_recorder() -> Recorder:
    """The decision store and signer of the app serving this request."""
    recorder: Recorder = current_app.extensions["certimatch.recorder"]
    return recorder


def json_body() -> Any:
    """The parsed JSON body: 415, 413 or 400 problem documents when it is not one.

    A body with a key repeated within one object is refused (400, ``errors`` naming each
    repeated key by JSON Pointer): orjson would keep the last silently, another reader the
    first.
    """
    mimetype = request.mimetype
    if mimetype != "application/json" and not (
            mimetype.startswith("application/") and mimetype.endswith("+json")):
        got = request.content_type or "no content type"
        raise UnsupportedMediaType(f"send the body as application/json, not {got}")
    raw = _read_body()
    try:
        doc = orjson.loads(raw)
    except orjson.JSONDecodeError as e:
        raise MalformedBody(f"the body is not valid JSON: {e}") from None
    repeated = duplicate_keys(raw, doc)
    if repeated:
        first = repeated[0]
        more = f" (and {len(repeated) - 1} more)" if len(repeated) > 1 else ""
        raise MalformedBody(f"{first['pointer']}: {first['detail']}{more}", errors=repeated)
    return doc


def _read_body() -> bytes:
    """The whole body, or 413 when it is over MAX_BODY_BYTES (inflated, when it came
    with a Content-Encoding: see service.http.encoding).

    Werkzeug answers 413 itself when Content-Length says too much; a chunked body has no
    length, and its stream merely stops at the limit, so read one byte past it to know.
    """
    limit = current_settings().max_body_bytes
    coding = request_coding()
    if coding is not None:
        chunks = compressed_chunks(limit)
        try:
            return inflate(chunks, coding, limit)
        except InflatedTooLarge:
            # read the rest as it is (at most the limit again) so that the client, still
            # sending, is not cut off before it reads the 413
            with suppress(HTTPException):
                deque(chunks, maxlen=0)
            raise
    try:
        if request.content_length is not None:
            return request.get_data(cache=False)   # 413 here when over the limit
        # request.stream would stop quietly at the limit: read the server's own input
        raw = request.environ["wsgi.input"].read(limit + 1)
    except HTTPException:
        raise                           # werkzeug's own: 413, a client that went away
    except Exception as e:
        # The server could not decode the transfer (gunicorn raises its own parse errors
        # for a bad chunk size or a chunk without its CRLF while the body is read): the
        # client's fault, so a 400, not an internal error.
        raise BadRequest(f"the body could not be read: {e}") from None
    if len(raw) > limit:
        raise RequestEntityTooLarge()
    return raw


def json_response(doc: Any, status: int = 200, content_type: str = "application/json",
                  newline: bool = False) -> Response:
    """``doc`` as JSON; ``newline`` ends it with one (the probes, read in terminals)."""
    body = orjson.dumps(doc, option=orjson.OPT_APPEND_NEWLINE if newline else None)
    return Response(body, status=status, content_type=content_type)

