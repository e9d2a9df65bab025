"""Time limits: whose limit ran out, and whether waiting can help.

The request's own ``time_limit_s`` and the server's ``MAX_TIME_LIMIT_S`` are answered with
a 4xx without ``Retry-After`` (the same request runs out again); only a limit that ran
out because the process did not get the CPU is a 503 with ``Retry-After``. The clocks of
service/solve/deadline.py are stood in for, so that no answer here depends on the load of
this machine, and nothing asserts on time.
"""

from __future__ import annotations

import time
from typing import Any

import pytest

from service.errors import ServerBusy, TimeLimitExceeded
from service.solve import deadline as deadline_module
from service.solve.deadline import BUSY_LOST_S, time_limit_error
from tests.http.test_openapi import _check, _response_pointer
from tests.servers import GOOD, clean_app

PROBLEM_JSON = "application~1problem+json"
#: Bound on the spinning work below, should a limit ever fail to stop it.
SPIN_SECONDS = 30.0


def _spin(*args: Any, **kwargs: Any) -> Any:
    """Work that uses the CPU until the time limit stops it."""
    end = time.monotonic() + SPIN_SECONDS
    while time.monotonic() < end:
        pass
    raise AssertionError(f"no time limit stopped the work within {SPIN_SECONDS} s")


@pytest.fixture
def had_the_cpu(monkeypatch: pytest.MonkeyPatch) -> None:
    """The process is on the CPU whenever the clock runs."""
    monkeypatch.setattr(deadline_module, "_cpu", deadline_module._wall)


@pytest.fixture
def starved(monkeypatch: pytest.MonkeyPatch) -> None:
    """Other work on the machine takes every CPU second."""
    monkeypatch.setattr(deadline_module, "_cpu", lambda: 0.0)


@pytest.fixture
def slow_solve(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr("service.solve.dispatch.solve", _spin)


@pytest.fixture
def slow_check(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr("service.solve.pipeline.verify_answer", _spin)


def _answer(client: Any, path: str, body: dict[str, Any], status: int) -> Any:
    response = client.post(path, json=body)
    assert response.status_code == status, response.get_json()
    assert response.content_type == "application/problem+json"
    _check(response.get_json(), f"{_response_pointer(path, 'post', str(status))}/content/"
                                f"{PROBLEM_JSON}/schema")
    return response


@pytest.fixture(scope="module")
def with_answer() -> dict[str, Any]:
    """GOOD with its answer, solved before any stand-in slows the work down."""
    client = clean_app().test_client()
    return {**GOOD, "answer": client.post("/v1/solve", json=GOOD).get_json()}


# --- the request's own limit ----------------------------------------------------------------

@pytest.mark.usefixtures("had_the_cpu", "slow_solve")
def test_the_requests_own_limit_is_422_time_limit_without_retry_after():
    client = clean_app({"MAX_TIME_LIMIT_S": 30}).test_client()
    response = _answer(client, "/v1/solve", {**GOOD, "time_limit_s": 0.2}, 422)
    doc = response.get_json()
    assert doc["type"] == "urn:certimatch:problem:time-limit"
    assert "Retry-After" not in response.headers
    assert doc["time_limit_s"] == 0.2 and doc["max_time_limit_s"] == 30
    assert "same limit runs out again" in doc["detail"]


@pytest.mark.usefixtures("had_the_cpu", "slow_check")
@pytest.mark.parametrize("path", ["/v1/verify", "/v1/report"])
def test_checking_an_answer_is_limited_the_same_way(path, with_answer):
    body = {**with_answer, "time_limit_s": 0.2}
    client = clean_app().test_client()
    doc = _answer(client, path, body, 422).get_json()
    assert doc["type"] == "urn:certimatch:problem:time-limit"
    assert doc["detail"].startswith("checking this answer took longer")


# --- the server's limit ----------------------------------------------------------------------

@pytest.mark.usefixtures("had_the_cpu", "slow_solve")
@pytest.mark.parametrize("asked", [None, 1, 3600])
def test_the_servers_limit_is_422_server_time_limit_without_retry_after(asked):
    client = clean_app({"MAX_TIME_LIMIT_S": 1}).test_client()
    body = GOOD if asked is None else {**GOOD, "time_limit_s": asked}
    response = _answer(client, "/v1/solve", body, 422)
    doc = response.get_json()
    assert doc["type"] == "urn:certimatch:problem:server-time-limit"
    assert "Retry-After" not in response.headers
    assert doc["time_limit_s"] == 1 and doc["max_time_limit_s"] == 1
    assert "cannot raise" in doc["detail"]
    assert ("asked for 3600 s" in doc["detail"]) == (asked == 3600)


# --- a busy server ----------------------------------------------------------------------------

@pytest.mark.usefixtures("starved", "slow_solve")
@pytest.mark.parametrize(("settings", "asked"), [({"MAX_TIME_LIMIT_S": 30}, 0.3),
                                                 ({"MAX_TIME_LIMIT_S": 1}, None)])
def test_a_limit_that_ran_out_for_want_of_cpu_is_503_with_retry_after(settings, asked):
    client = clean_app(settings).test_client()
    body = GOOD if asked is None else {**GOOD, "time_limit_s": asked}
    response = _answer(client, "/v1/solve", body, 503)
    doc = response.get_json()
    assert doc["type"] == "urn:certimatch:problem:server-busy"
    assert int(response.headers["Retry-After"]) == 1
    assert doc["cpu_s"] == 0 and doc["time_limit_s"] == (asked or 1)


@pytest.mark.parametrize(("limit", "cpu", "elapsed", "busy"), [
    (10.0, 4.9, 10.0, True),         # less than half of the limit on the CPU
    (10.0, 5.0, 10.0, False),        # half of it: the work itself is long
    (10.0, 0.0, 10.0, True),
    (0.001, 0.0, 0.05, False),       # a few milliseconds lost: scheduling noise
    (0.001, 0.0, 0.001 + BUSY_LOST_S, True),
    (0.001, 0.9, 1.5, False),        # one long engine call past a tiny limit, on the CPU
    (60.0, 61.0, 60.0, False),       # threads of an engine: more CPU than wall time
])
def test_busy_means_little_cpu_and_real_time_lost(limit, cpu, elapsed, busy):
    error = time_limit_error(limit, "solving this problem", cpu, elapsed)
    assert isinstance(error, ServerBusy if busy else TimeLimitExceeded)
    assert ("Retry-After" in error.headers) == busy


# --- the limit counts from the request's arrival ----------------------------------------------

def _slow_body(seconds: float) -> Any:
    """json_body that takes ``seconds`` of CPU before it returns (a very large body)."""
    from service.http import body as body_module
    real = body_module.json_body

    def read() -> Any:
        end = time.monotonic() + seconds
        while time.monotonic() < end:
            pass
        return real()
    return read


@pytest.mark.usefixtures("had_the_cpu")
@pytest.mark.parametrize("path", ["/v1/solve", "/v1/verify"])
def test_reading_and_parsing_the_body_count_against_the_limit(
        monkeypatch: pytest.MonkeyPatch, path: str, with_answer: dict[str, Any]) -> None:
    # A problem solved well within 0.2 s runs out of a 0.2 s limit when reading its body
    # took 0.3 s: a request is answered within its limit plus the writing of its answer.
    monkeypatch.setattr("service.http.api.json_body", _slow_body(0.3))
    body = {**(GOOD if path == "/v1/solve" else with_answer), "time_limit_s": 0.2}
    doc = _answer(clean_app().test_client(), path, body, 422).get_json()
    assert doc["type"] == "urn:certimatch:problem:time-limit"
    assert doc["time_limit_s"] == 0.2


@pytest.mark.usefixtures("had_the_cpu")
def test_the_same_slow_body_with_room_in_its_limit_is_solved(
        monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr("service.http.api.json_body", _slow_body(0.3))
    response = clean_app().test_client().post("/v1/solve", json={**GOOD, "time_limit_s": 20})
    assert response.status_code == 200, response.get_json()


def test_a_deadline_inside_a_request_counts_from_its_arrival(
        monkeypatch: pytest.MonkeyPatch) -> None:
    # The command line and in-process callers have no arrival: their limit starts with
    # the work. Inside counted_from_arrival, a limit already spent (the clock stood in for:
    # 10 s passed since the arrival) fires at once instead of 5 s later.
    now = [100.0]
    monkeypatch.setattr(deadline_module, "_wall", lambda: now[0])
    monkeypatch.setattr(deadline_module, "_cpu", lambda: now[0])

    def half_a_second() -> bool:
        end = time.monotonic() + 0.5
        while time.monotonic() < end:
            pass
        return True

    with deadline_module.deadline(5.0, "x"):
        assert half_a_second()              # no arrival: 5 s left
    with pytest.raises(TimeLimitExceeded):
        with deadline_module.counted_from_arrival():
            now[0] += 10.0
            with deadline_module.deadline(5.0, "x"):
                half_a_second()
