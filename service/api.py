"""HTTP views: read the body, call the pipeline, write JSON. Nothing else lives here."""

from __future__ import annotations

from typing import Any

import orjson
from flask import Blueprint, Response, current_app, request

from service.errors import (
    PROBLEM_CONTENT_TYPE,
    MalformedBody,
    UnsupportedMediaType,
    problem_document,
)
from service.pipeline import solve_body, verify_body
from service.settings import Settings

bp = Blueprint("api", __name__)

#: A 1 x 1 problem solved once per process before /readyz says ready.
_PROBE = {"sources": [{"id": "s"}], "sinks": [{"id": "t"}], "costs": [[1]]}


def _settings() -> Settings:
    return current_app.extensions["certimatch.settings"]


def _json_body() -> Any:
    mimetype = request.mimetype
    if mimetype != "application/json" and not (
            mimetype.startswith("application/") and mimetype.endswith("+json")):
        got = request.content_type or "no content type"
        raise UnsupportedMediaType(f"send the body as application/json, not {got}")
    raw = request.get_data(cache=False)   # 413 here when over MAX_CONTENT_LENGTH
    try:
        return orjson.loads(raw)
    except orjson.JSONDecodeError as e:
        raise MalformedBody(f"the body is not valid JSON: {e}") from None


def json_response(doc: Any, status: int = 200,
                  content_type: str = "application/json") -> Response:
    return Response(orjson.dumps(doc), status=status, content_type=content_type)


@bp.post("/v1/solve")
def solve() -> Response:
    return json_response(solve_body(_json_body(), _settings()))


@bp.post("/v1/verify")
def verify() -> Response:
    return json_response(verify_body(_json_body(), _settings()))


@bp.get("/healthz")
def healthz() -> Response:
    return json_response({"status": "ok"})


@bp.get("/readyz")
def readyz() -> Response:
    state = current_app.extensions
    if not state.get("certimatch.ready"):
        answer = solve_body(_PROBE, _settings())
        state["certimatch.ready"] = answer["objective"] == 1
    if not state["certimatch.ready"]:
        doc = problem_document(503, "Not ready", "the start-up probe problem was not solved "
                               "correctly", "not-ready")
        return json_response(doc, 503, PROBLEM_CONTENT_TYPE)
    return json_response({"status": "ready"})
