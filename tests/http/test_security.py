"""Bearer tokens, the exposure check at start-up, and the per-request time limit."""

from __future__ import annotations

import hashlib
import logging

import numpy as np
import orjson
import pytest

from service.app import create_app
from service.http.auth import check_exposure, load_tokens
from service.settings import load_settings
from service.solve import deadline as deadline_module

TOKEN = "k7-practice-token-0001"
OTHER = "k7-practice-token-0002"
# scipy.optimize.linear_sum_assignment docstring example: the optimum is 5.
PROBLEM = {"sources": [{"id": "r0"}, {"id": "r1"}, {"id": "r2"}],
           "sinks": [{"id": "c0"}, {"id": "c1"}, {"id": "c2"}],
           "costs": [[4, 1, 3], [2, 0, 5], [3, 2, 2]]}


@pytest.fixture()
def guarded():
    return create_app({"TESTING": True, "TOKENS": f"{TOKEN},{OTHER}"}).test_client()


def _bearer(token: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {token}"}


def test_no_token_is_401_with_a_challenge(guarded):
    response = guarded.post("/v1/solve", json=PROBLEM)
    assert response.status_code == 401
    assert response.content_type == "application/problem+json"
    assert response.headers["WWW-Authenticate"] == 'Bearer realm="certimatch"'
    assert response.get_json()["type"] == "urn:certimatch:problem:unauthorized"


@pytest.mark.parametrize("header", ["Bearer wrong-token-wrong-token", "Basic dXNlcjpwYXNz",
                                    f"Bearer {TOKEN}x", "Bearer "])
def test_a_wrong_or_malformed_credential_is_refused(guarded, header):
    response = guarded.post("/v1/solve", json=PROBLEM, headers={"Authorization": header})
    assert response.status_code == 401
    assert response.headers["WWW-Authenticate"].startswith('Bearer realm="certimatch"')


@pytest.mark.parametrize("token", [TOKEN, OTHER])
def test_each_configured_token_is_let_in(guarded, token):
    response = guarded.post("/v1/solve", json=PROBLEM, headers=_bearer(token))
    assert response.status_code == 200
    assert response.get_json()["objective"] == 5


@pytest.mark.parametrize("path", ["/v1/verify", "/v1/report", "/", "/v1/openapi.yaml",
                                  "/metrics"])
def test_every_other_route_needs_the_token(guarded, path):
    method = guarded.post if path in ("/v1/verify", "/v1/report") else guarded.get
    assert method(path).status_code == 401


@pytest.mark.parametrize("path", ["/healthz", "/readyz"])
def test_probes_stay_open(guarded, path):
    assert guarded.get(path).status_code == 200


def test_metrics_can_be_made_public():
    client = create_app({"TESTING": True, "TOKENS": TOKEN, "METRICS_PUBLIC": "true"}
                        ).test_client()
    assert client.get("/metrics").status_code == 200
    assert client.post("/v1/solve", json=PROBLEM).status_code == 401


def test_without_tokens_the_service_is_open():
    assert create_app({"TESTING": True}).test_client().post(
        "/v1/solve", json=PROBLEM).status_code == 200


def test_token_file_takes_plain_tokens_and_digests(tmp_path):
    digest = hashlib.sha256(OTHER.encode()).hexdigest()
    path = tmp_path / "tokens"
    path.write_text(f"# callers\n{TOKEN}\n\nsha256:{digest}  # the cron bot\n")
    client = create_app({"TESTING": True, "TOKENS_FILE": str(path)}).test_client()
    for token in (TOKEN, OTHER):
        assert client.post("/v1/solve", json=PROBLEM, headers=_bearer(token)).status_code == 200
    assert client.post("/v1/solve", json=PROBLEM, headers=_bearer(digest)).status_code == 401


@pytest.mark.parametrize("content", ["short\n", "has a space in it here\n"])
def test_a_bad_token_file_line_stops_start_up(tmp_path, content):
    path = tmp_path / "tokens"
    path.write_text(content)
    with pytest.raises(ValueError, match="CERTIMATCH_TOKENS_FILE line 1"):
        create_app({"TOKENS_FILE": str(path)})


def test_an_unreadable_token_file_stops_start_up(tmp_path):
    with pytest.raises(ValueError, match="CERTIMATCH_TOKENS_FILE cannot be read"):
        create_app({"TOKENS_FILE": str(tmp_path / "absent")})


def test_a_short_token_is_refused_without_repeating_it():
    with pytest.raises(ValueError) as info:
        load_settings({"TOKENS": "tiny-secret"})
    assert "tiny-secret" not in str(info.value)
    assert "at least 16 characters" in str(info.value)


def test_tokens_never_reach_logs_answers_or_repr(guarded, caplog):
    with caplog.at_level(logging.DEBUG):
        guarded.post("/v1/solve", json=PROBLEM, headers=_bearer(TOKEN))
        bad = guarded.post("/v1/solve", json=PROBLEM, headers=_bearer(TOKEN + "x"))
    assert TOKEN not in caplog.text
    assert TOKEN not in bad.get_data(as_text=True)
    assert TOKEN not in repr(load_settings({"TOKENS": TOKEN}))


@pytest.mark.parametrize(("binds", "tokens", "insecure", "outcome"), [
    (["127.0.0.1:8080"], "", False, None),
    (["[::1]:8080"], "", False, None),
    (["localhost:8080", "unix:/run/certimatch.sock"], "", False, None),
    (["0.0.0.0:8080"], TOKEN, False, None),
    (["0.0.0.0:8080"], "", False, "refuse"),
    (["127.0.0.1:8080", "192.0.2.10:8080"], "", False, "refuse"),
    (["0.0.0.0:8080"], "", True, "warn"),
])
def test_exposure_check(binds, tokens, insecure, outcome):
    settings = load_settings({"TOKENS": tokens} if tokens else {}, environ={})
    if outcome == "refuse":
        with pytest.raises(ValueError, match="refusing to listen"):
            check_exposure(binds, load_tokens(settings), insecure)
        return
    warning = check_exposure(binds, load_tokens(settings), insecure)
    assert (warning is not None) == (outcome == "warn")


# --- time limit ---------------------------------------------------------------------------

def _large_dense(n: int) -> dict:
    costs = np.random.default_rng(7).integers(0, 10**4, size=(n, n)).tolist()
    return {"sources": [{"id": f"s{i}"} for i in range(n)],
            "sinks": [{"id": f"t{j}"} for j in range(n)], "costs": costs}


def test_a_request_past_its_time_limit_gets_422_and_the_worker_goes_on(monkeypatch):
    # the process counts as having had the CPU all along (tests/http/test_time_limits.py
    # has the busy case), so the answer does not depend on this machine's load
    monkeypatch.setattr(deadline_module, "_cpu", deadline_module._wall)
    client = create_app({"TESTING": True}).test_client()
    body = {**_large_dense(700), "time_limit_s": 0.001}
    response = client.post("/v1/solve", data=orjson.dumps(body),
                           content_type="application/json")
    assert response.status_code == 422
    assert response.content_type == "application/problem+json"
    assert response.get_json()["type"] == "urn:certimatch:problem:time-limit"
    assert "Retry-After" not in response.headers
    assert "allocation" not in response.get_json()
    # the same process answers the next request in full
    again = client.post("/v1/solve", json=PROBLEM)
    assert again.status_code == 200 and again.get_json()["objective"] == 5


def test_the_server_cap_applies_when_a_request_asks_for_more(monkeypatch):
    seen = []
    real = deadline_module.deadline

    def spy(seconds, what):
        seen.append(seconds)
        return real(seconds, what)

    monkeypatch.setattr("service.solve.pipeline.deadline", spy)
    client = create_app({"TESTING": True, "MAX_TIME_LIMIT_S": 7}).test_client()
    client.post("/v1/solve", json={**PROBLEM, "time_limit_s": 3600})
    client.post("/v1/solve", json={**PROBLEM, "time_limit_s": 2.5})
    client.post("/v1/solve", json=PROBLEM)
    assert seen == [7.0, 2.5, 7.0]


@pytest.mark.parametrize("value", [0, -1, "5", True, 86401])
def test_a_bad_time_limit_is_422_naming_the_field(value):
    client = create_app({"TESTING": True}).test_client()
    response = client.post("/v1/solve", json={**PROBLEM, "time_limit_s": value})
    assert response.status_code == 422
    assert [e["pointer"] for e in response.get_json()["errors"]] == ["/time_limit_s"]


def test_the_timer_is_cleared_after_a_request():
    import signal

    create_app({"TESTING": True}).test_client().post("/v1/solve", json=PROBLEM)
    assert signal.getitimer(signal.ITIMER_REAL) == (0.0, 0.0)
    assert signal.getsignal(signal.SIGALRM) in (signal.SIG_DFL, None, signal.default_int_handler)
