"""openapi.yaml against the app itself: schemathesis generates requests from the contract.

schemathesis (4.x) reads openapi.yaml and, for every operation, sends the contract's own
examples, boundary values of every field (its "coverage" phase) and random requests, valid
and deliberately invalid ("negative"), straight into the Flask app over WSGI -- no server.
Every answer must be free of 5xx, have a status the contract lists for the operation, the
media type it names, and a body that validates against its schema (RFC 9457 problem
documents included).

A second test sends problems of every shape drawn by the property tests' strategies, so
that 200 answers of every engine are held to the SolveResult schema too.

CI runs a bounded, derandomized set (several hundred requests). ``CERTIMATCH_EXTENDED=1``
raises it past 10,000 requests; the last test checks the count either way.
"""

from __future__ import annotations

import os
import signal
from collections import Counter
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
import schemathesis
from hypothesis import HealthCheck, given, settings
from schemathesis.specs.openapi.checks import (
    content_type_conformance,
    response_headers_conformance,
    response_schema_conformance,
    status_code_conformance,
)
from servers import clean_app
from strategies import problems

ROOT = Path(__file__).resolve().parents[2]
EXTENDED = os.environ.get("CERTIMATCH_EXTENDED") == "1"

#: Random requests per operation (schemathesis adds examples and boundary cases on top).
FUZZ_EXAMPLES = 5000 if EXTENDED else 150
#: Least number of requests the whole run must have sent, so a silently empty run fails.
FLOOR = 10_000 if EXTENDED else 300

# No not_a_server_error here: the test asserts "no 5xx" itself, less the one 5xx the
# contract promises (503 server-busy, when a time limit ran out on a busy machine).
CHECKS = [status_code_conformance, content_type_conformance, response_headers_conformance,
          response_schema_conformance]

APP = clean_app()

schema = schemathesis.openapi.from_path(ROOT / "openapi.yaml")
schema.app = APP

#: (operation, phase, generation mode, status) -> number of requests sent.
SENT: Counter[tuple[str, str, str, int]] = Counter()
#: Requests refused with the documented 503 server-busy, by operation.
TIMED_OUT: Counter[str] = Counter()

SETTINGS = settings(max_examples=FUZZ_EXAMPLES, derandomize=True, database=None,
                    deadline=None, suppress_health_check=list(HealthCheck))


@pytest.fixture(scope="module", autouse=True)
def _alarm_restored() -> Iterator[None]:
    """Put SIGALRM back as it was after this module.

    Generated requests with a tiny ``time_limit_s`` run the service's alarm handler in
    this process; should one ever be left behind (test_catalogue.py checks that none is),
    later test modules must not inherit it.
    """
    previous = signal.getsignal(signal.SIGALRM)
    yield
    signal.setitimer(signal.ITIMER_REAL, 0)
    signal.signal(signal.SIGALRM, previous)


def _assert_problem_document(response: Any) -> None:
    """RFC 9457: every error is application/problem+json with its four members."""
    # schemathesis keeps headers as lists under lower-case names.
    headers = {k.lower(): v for k, v in response.headers.items()}
    media = headers.get("content-type", [""])
    media = media[0] if isinstance(media, list) else media
    assert media.startswith("application/problem+json"), media
    doc = response.json()
    assert doc["status"] == response.status_code
    for member in ("type", "title", "detail"):
        assert isinstance(doc[member], str) and doc[member], (member, doc)


def _ran_out_of_time(case: Any, response: Any) -> bool:
    """The one 5xx the contract promises: 503 ``server-busy`` (with Retry-After) for a
    request whose time limit ran out while this shared machine was busy. A limit that ran
    out with the CPU to itself is a 422 (``time-limit`` for the tiny ``time_limit_s``
    generated, down to 5e-324 s), checked against the contract like any other answer."""
    body = case.body if isinstance(case.body, dict) else {}
    if response.status_code != 503 or "time_limit_s" not in body:
        return False
    headers = {k.lower() for k in response.headers}
    doc = response.json()
    return doc.get("type") == "urn:certimatch:problem:server-busy" and "retry-after" in headers


@schema.parametrize()
@SETTINGS
def test_every_answer_conforms_to_the_contract(case):
    # the in-process transport hands over the bytes as sent and does not inflate a gzip
    # answer, which the default Accept-Encoding of its requests would ask for
    response = case.call(headers={"Accept-Encoding": "identity"})
    meta = case.meta
    phase = meta.phase.name.value if meta is not None else "explicit"
    mode = meta.generation.mode.value if meta is not None else "positive"
    SENT[(case.operation.label, phase, mode, response.status_code)] += 1
    if _ran_out_of_time(case, response):
        TIMED_OUT[case.operation.label] += 1
    else:
        assert response.status_code < 500, response.text
    if response.status_code >= 400:
        _assert_problem_document(response)
    case.validate_response(response, checks=CHECKS)


SOLVE = schema["/v1/solve"]["POST"]
VERIFY = schema["/v1/verify"]["POST"]


@settings(SETTINGS, max_examples=2000 if EXTENDED else 100)
@given(problem=problems())
def test_answers_of_every_shape_conform_to_the_contract(problem):
    case = SOLVE.Case(body=problem, media_type="application/json")
    response = case.call(headers={"Accept-Encoding": "identity"})
    SENT[("POST /v1/solve", "shapes", "positive", response.status_code)] += 1
    case.validate_response(response, checks=CHECKS)
    if response.status_code != 200:
        return
    # The answer as the caller got it goes back to /v1/verify: that answer conforms too.
    check = VERIFY.Case(body={**problem, "answer": response.json()},
                        media_type="application/json")
    verdict = check.call(headers={"Accept-Encoding": "identity"})
    SENT[("POST /v1/verify", "shapes", "positive", verdict.status_code)] += 1
    check.validate_response(verdict, checks=CHECKS)
    assert verdict.json()["valid"] is True


def test_the_run_sent_enough_requests(request, capsys):
    """The generated requests above really ran, and in number; prints what was sent."""
    ran = [i for i in request.session.items if i.module is request.module and i is not
           request.node]
    if not ran:
        pytest.skip("run together with the generated tests of this module")
    total = sum(SENT.values())
    by_status: Counter[int] = Counter()
    for (_, _, _, status), n in SENT.items():
        by_status[status] += n
    with capsys.disabled():
        print(f"\nschemathesis: {total} requests, by status {dict(sorted(by_status.items()))}"
              f"; 503 server-busy for a time_limit_s asked: {sum(TIMED_OUT.values())}")
    assert total >= FLOOR, SENT
    errors = {k: n for k, n in SENT.items() if k[3] >= 500}
    assert sum(errors.values()) == sum(TIMED_OUT.values()), errors
    operations = {op for op, _, _, _ in SENT}
    assert {"POST /v1/solve", "POST /v1/verify", "GET /healthz", "GET /readyz"} <= operations
    # Both kinds of request reached the solver: valid problems answered, invalid refused.
    assert by_status[200] and by_status[422] and by_status[400]
