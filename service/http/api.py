"""The JSON API views: read the body, call the pipeline, write JSON. Nothing else lives here."""

from __future__ import annotations

import time
from collections.abc import Callable
from contextlib import ExitStack
from typing import Any

from flask import Blueprint, Response, current_app, request

from service.errors import (
    PROBLEM_CONTENT_TYPE,
    BadParameter,
    CertificateFailure,
    problem_document,
)
from service.http import observe
from service.http.auth import current_caller
from service.http.body import current_recorder, current_settings, json_body, json_response
from service.http.limits import time_limits_told_apart
from service.records.store import MAX_IDEMPOTENCY_KEY
from service.settings import Settings
from service.solve.deadline import counted_from_arrival
from service.solve.pipeline import request_scope, solve_body, verify_body

api_bp = Blueprint("api", __name__)

#: A 1 x 1 problem solved once per process before /readyz says ready.
_PROBE = {"sources": [{"id": "s"}], "sinks": [{"id": "t"}], "costs": [[1]]}


def _solve_counted(body: Any, settings: Settings) -> dict[str, Any]:
    """``solve_body`` with its outcome counted for /metrics (shape and solver from the answer)."""
    if not settings.metrics_enabled:
        return solve_body(body, settings)
    started = time.perf_counter()
    try:
        answer = solve_body(body, settings)
    except CertificateFailure:
        observe.count_certificate_failure()
        raise
    observe.count_solve(answer, body, time.perf_counter() - started)
    return answer


def _answered(work: Callable[[Any], Response]) -> Response:
    """``work``'s response to the parsed body; the body is held, and the collector off,
    until that response has been sent.

    A large body is millions of Python objects. Freeing them takes about a fifth of parsing
    them (0.15-0.19 s for a 4000 x 4000 matrix), and a collector back on would first walk
    them all (20 ms for 600,000 arc records): once the answer has gone, neither is part of
    the caller's wait.
    """
    scope = ExitStack()
    scope.enter_context(request_scope())
    parsed: list[Any] = []

    def finish() -> None:
        parsed.clear()
        scope.close()

    try:
        with counted_from_arrival():        # the limit counts reading and parsing the body
            parsed.append(json_body())
            with time_limits_told_apart(parsed[0], current_settings()):
                response = work(parsed[0])
    except BaseException:
        finish()
        raise
    response.call_on_close(finish)
    return response


def idempotency_key() -> str | None:
    """The request's ``Idempotency-Key``: a Structured Fields string (``"..."``), as the
    IETF draft writes it, or the bare text many clients send; 400 when it is neither."""
    raw = request.headers.get("Idempotency-Key")
    if raw is None:
        return None
    text = raw.strip()
    if text.startswith('"'):
        text = _sf_string(text)
    if not 0 < len(text) <= MAX_IDEMPOTENCY_KEY or not (text.isascii() and text.isprintable()):
        raise BadParameter("Idempotency-Key", f"must be 1 to {MAX_IDEMPOTENCY_KEY} printable "
                           "ASCII characters")
    return text


def _sf_string(text: str) -> str:
    """The value of an RFC 8941 §3.3.3 string: quoted, with only \\" and \\\\ escaped."""
    out, i = [], 1
    while i < len(text):
        c = text[i]
        if c == "\\" and i + 1 < len(text) and text[i + 1] in '"\\':
            out.append(text[i + 1])
            i += 2
        elif c == '"' and i == len(text) - 1:
            return "".join(out)
        elif c in '"\\':
            break
        else:
            out.append(c)
            i += 1
    raise BadParameter("Idempotency-Key", "not a valid quoted string (RFC 8941)")


@api_bp.post("/v1/solve")
def solve() -> Response:
    settings = current_settings()
    recorder = current_recorder()
    key = idempotency_key()
    caller = current_caller()

    def work(body: Any) -> Response:
        pending, earlier = recorder.begin(body, caller, key)
        if earlier is not None:
            return Response(earlier, content_type="application/json")
        answer = _solve_counted(body, settings)
        # The answer passed the independent check inside solve_body; only now is it
        # recorded, and the response is the bytes the store kept for the key.
        response = Response(recorder.finish(pending, answer), content_type="application/json")
        response.call_on_close(recorder.prune_due)     # retention, once the answer is out
        return response

    return _answered(work)


@api_bp.post("/v1/verify")
def verify() -> Response:
    settings = current_settings()

    def check(body: Any) -> Response:
        result = verify_body(body, settings)
        if settings.metrics_enabled:
            observe.count_verification(result.get("valid") is True)
        return json_response(result)

    return _answered(check)


# The probes' answers end with a newline: people and scripts read them with curl, whose
# output would otherwise run into the next prompt or line.

@api_bp.get("/healthz")
def healthz() -> Response:
    return json_response({"status": "ok"}, newline=True)


@api_bp.get("/readyz")
def readyz() -> Response:
    state = current_app.extensions
    if not state.get("certimatch.ready"):
        answer = solve_body(_PROBE, current_settings())
        state["certimatch.ready"] = answer["objective"] == 1
    if not state["certimatch.ready"]:
        doc = problem_document(503, "Not ready", "the start-up probe problem was not solved "
                               "correctly", "not-ready")
        return json_response(doc, 503, PROBLEM_CONTENT_TYPE, newline=True)
    return json_response({"status": "ready"}, newline=True)

