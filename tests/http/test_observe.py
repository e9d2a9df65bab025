"""What operators see: request ids, one JSON log line per request, Prometheus metrics, and
the same metrics added up over the workers of a real gunicorn.

Counters live in the process's default registry and keep counting across tests, so every
check compares a value before and after the request it is about.
"""

from __future__ import annotations

import io
import json
import logging
import os
import re
from collections import Counter
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Any

import pytest
import requests
from prometheus_client import REGISTRY
from prometheus_client.parser import text_string_to_metric_families
from servers import DATA_DIR_ENV, Gunicorn

import service.solve.pipeline
from service.app import create_app
from service.http import observe
from service.settings import SETTINGS

ROOT = Path(__file__).resolve().parents[2]
CONF = ROOT / "deploy" / "gunicorn.conf.py"
HEX_ID = re.compile(r"[0-9a-f]{32}")

#: The README's example; its answer routes two units and leaves the washer waiting.
PROBLEM = {
    "sources": [{"id": "north", "supply": 2}, {"id": "south", "supply": 1}],
    "sinks": [{"id": "fridge"}, {"id": "oven"}, {"id": "washer", "penalty": 50}],
    "costs": [[20, 35, 60], [30, 25, None]],
}
ARCS = {
    "sources": [{"id": "depot"}],
    "nodes": [{"id": "hub"}],
    "sinks": [{"id": "store"}],
    "arcs": [{"from": "depot", "to": "hub", "cost": 1}, {"from": "hub", "to": "store",
                                                         "cost": 2}],
}


@pytest.fixture(autouse=True)
def clean_env(monkeypatch: pytest.MonkeyPatch) -> None:
    for s in SETTINGS:
        if s.env != DATA_DIR_ENV:                # the session's temporary store
            monkeypatch.delenv(s.env, raising=False)


@pytest.fixture
def client() -> Any:
    return create_app({"TESTING": True}).test_client()


@pytest.fixture
def log_lines() -> Iterator[io.StringIO]:
    """What the service logs during the test, as configure_logging writes it."""
    saved = {name: (logging.getLogger(name).handlers[:], logging.getLogger(name).level,
                    logging.getLogger(name).propagate) for name in observe.LOGGERS}
    stream = io.StringIO()
    observe.configure_logging("info", stream)
    try:
        yield stream
    finally:
        # Back as before, so that pytest's own capture sees the service's loggers again.
        for name, (handlers, level, propagate) in saved.items():
            logger = logging.getLogger(name)
            logger.handlers[:] = handlers
            logger.setLevel(level)
            logger.propagate = propagate


def _records(stream: io.StringIO) -> list[dict[str, Any]]:
    return [json.loads(line) for line in stream.getvalue().splitlines()]


def _sample(name: str, **labels: str) -> float:
    return REGISTRY.get_sample_value(name, labels) or 0.0


# --- request ids ----------------------------------------------------------------------------


@pytest.mark.parametrize("sent", ["ticket-run-2024-07", "a", "x" * 128, "batch 7 / row 3",
                                  "{quoted}=\"ok\""])
def test_an_acceptable_request_id_is_echoed(client, sent):
    response = client.get("/healthz", headers={"X-Request-ID": sent})
    assert response.headers["X-Request-ID"] == sent


@pytest.mark.parametrize("sent", ["", " ", "x" * 129, "bell\x07", "tab\there", "caf\u00e9"])
def test_an_unacceptable_request_id_is_replaced(client, sent):
    response = client.get("/healthz", headers={"X-Request-ID": sent})
    got = response.headers["X-Request-ID"]
    assert HEX_ID.fullmatch(got), got
    assert got != sent


def test_each_request_without_an_id_gets_a_fresh_one(client):
    ids = {client.get("/healthz").headers["X-Request-ID"] for _ in range(3)}
    assert len(ids) == 3 and all(HEX_ID.fullmatch(i) for i in ids)


def _broken(*args: Any, **kwargs: Any) -> None:
    raise RuntimeError("injected by the test")


@pytest.mark.parametrize(("method", "path", "kwargs", "status"), [
    ("get", "/no/such/path", {}, 404),
    ("get", "/v1/solve", {}, 405),
    ("post", "/v1/solve", {"data": "{", "content_type": "application/json"}, 400),
    ("post", "/v1/solve", {"data": "{}", "content_type": "text/plain"}, 415),
    ("post", "/v1/solve", {"json": {"sources": []}}, 422),
    ("post", "/v1/solve", {"json": PROBLEM, "broken": True}, 500),
])
def test_error_answers_carry_the_request_id(client, monkeypatch, method, path, kwargs,
                                            status):
    if kwargs.pop("broken", False):
        monkeypatch.setattr(service.solve.pipeline, "build_network", _broken)
    response = getattr(client, method)(path, headers={"X-Request-ID": "err-42"}, **kwargs)
    assert response.status_code == status
    assert response.headers["X-Request-ID"] == "err-42"


def test_a_body_over_the_limit_carries_the_request_id():
    small = create_app({"TESTING": True, "MAX_BODY_BYTES": 16}).test_client()
    response = small.post("/v1/solve", json=PROBLEM, headers={"X-Request-ID": "big-1"})
    assert response.status_code == 413
    assert response.headers["X-Request-ID"] == "big-1"


# --- request log ----------------------------------------------------------------------------


def test_one_json_line_per_request_with_its_fields(client, log_lines):
    body = json.dumps(PROBLEM).encode()
    response = client.post("/v1/solve", data=body, content_type="application/json",
                           headers={"X-Request-ID": "line-1"})
    assert response.status_code == 200
    client.get("/healthz", headers={"X-Request-ID": "line-2"})
    records = _records(log_lines)
    assert [r["request_id"] for r in records] == ["line-1", "line-2"]
    first = records[0]
    assert first["logger"] == "certimatch" and first["level"] == "info"
    assert (first["method"], first["path"], first["route"], first["status"]) == (
        "POST", "/v1/solve", "/v1/solve", 200)
    assert first["bytes_in"] == len(body)
    assert first["bytes_out"] == len(response.data)
    assert isinstance(first["duration_ms"], float) and first["duration_ms"] >= 0
    assert first["pid"] == os.getpid()
    assert re.fullmatch(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{3}Z", first["time"])


def test_logs_hold_no_body_query_or_credentials(client, log_lines):
    secret_id = "zq-private-ticket-7731"
    problem = {**PROBLEM, "sinks": [{"id": secret_id}, *PROBLEM["sinks"][1:]]}
    client.post("/v1/solve?token=qs-secret-5521", json=problem,
                headers={"Authorization": "Bearer tok-secret-9917",
                         "Cookie": "session=ck-secret-3301", "X-Request-ID": "private-1"})
    # A rejected body is not logged either (422 lists the bad field to the caller only).
    client.post("/v1/verify", json={**problem, "answer": {"objective": secret_id}},
                headers={"Authorization": "Bearer tok-secret-9917"})
    text = log_lines.getvalue()
    assert len(text.splitlines()) == 2
    assert "private-1" in text, "the capture saw nothing; the check below would prove nothing"
    for secret in (secret_id, "qs-secret-5521", "tok-secret-9917", "ck-secret-3301",
                   "Bearer", "Authorization"):
        assert secret not in text


def test_unmatched_paths_are_logged_under_one_route(client, log_lines):
    client.get("/wp-admin/setup.php")
    (record,) = _records(log_lines)
    assert (record["route"], record["path"], record["status"]) == (
        "unmatched", "/wp-admin/setup.php", 404)


def test_an_error_logged_inside_a_request_carries_its_id(client, log_lines, monkeypatch):
    monkeypatch.setattr(service.solve.pipeline, "build_network", _broken)
    response = client.post("/v1/solve", json=PROBLEM, headers={"X-Request-ID": "boom-7"})
    assert response.status_code == 500
    records = _records(log_lines)
    errors = [r for r in records if r["level"] == "error"]
    assert len(errors) == 1
    assert errors[0]["request_id"] == "boom-7"
    assert "injected by the test" in errors[0]["exception"]
    assert [r["status"] for r in records if r["message"] == "request"] == [500]


@pytest.mark.parametrize(("value", "logged"), [
    (2**70, 2**70),                    # past 64 bits: the line still holds it exactly
    (Path("/srv/queue"), "/srv/queue"),  # not a JSON value at all: written as its str
    ({3: "three"}, {"3": "three"}),    # a key that is not a string, as JSON must write it
])
def test_any_event_value_makes_one_json_line(log_lines, value, logged):
    logging.getLogger("certimatch").info("odd", extra={"event": {"field": value}})
    (record,) = _records(log_lines)
    assert (record["message"], record["field"]) == ("odd", logged)


def test_configure_logging_twice_keeps_one_handler(log_lines):
    observe.configure_logging("warning", log_lines)
    for name in observe.LOGGERS:
        ours = [h for h in logging.getLogger(name).handlers if getattr(h, "certimatch", False)]
        assert len(ours) == 1
    logging.getLogger("certimatch").info("below the level")
    logging.getLogger("service.x").warning("shown")
    assert [r["message"] for r in _records(log_lines)] == ["shown"]


def test_the_app_alone_adds_no_log_handler():
    # Embedding the app (tests, certimatch solve --local) must not start printing lines:
    # only the server configuration installs the JSON handler.
    before = {name: list(logging.getLogger(name).handlers) for name in observe.LOGGERS}
    create_app({"TESTING": True}).test_client().get("/healthz")
    assert {name: list(logging.getLogger(name).handlers) for name in observe.LOGGERS} == before


# --- metrics --------------------------------------------------------------------------------


def test_a_solve_is_counted_by_shape_and_solver(client):
    labels = {"shape": "transportation", "solver": "network_simplex"}

    def read() -> tuple[float, ...]:
        return (_sample("certimatch_solves_total", **labels),
                _sample("certimatch_solve_duration_seconds_count", **labels),
                _sample("certimatch_problem_size_count", measure="cells"),
                _sample("certimatch_problem_size_sum", measure="cells"),
                _sample("certimatch_http_requests_total", route="/v1/solve", method="POST",
                        status="200"))

    before = read()
    answer = client.post("/v1/solve", json=PROBLEM).get_json()
    assert (answer["shape"], answer["solver"]) == (labels["shape"], labels["solver"])
    after = read()
    # One solve, one timing, one size of 2 x 3 cells, one 200.
    assert [a - b for a, b in zip(after, before, strict=True)] == [1, 1, 1, 6, 1]


def test_an_arc_list_is_sized_by_its_arcs(client):
    before = _sample("certimatch_problem_size_sum", measure="arcs")
    assert client.post("/v1/solve", json=ARCS).status_code == 200
    assert _sample("certimatch_problem_size_sum", measure="arcs") - before == 2


def test_a_refused_problem_is_not_counted_as_solved(client):
    before = sum(_solves().values())
    unmatched = _sample("certimatch_http_requests_total", route="/v1/solve", method="POST",
                        status="422")
    assert client.post("/v1/solve", json={"sources": []}).status_code == 422
    assert sum(_solves().values()) == before
    assert _sample("certimatch_http_requests_total", route="/v1/solve", method="POST",
                   status="422") == unmatched + 1


def _solves() -> dict[tuple[str, ...], float]:
    family = next(f for f in REGISTRY.collect() if f.name == "certimatch_solves")
    return {tuple(sorted(s.labels.items())): s.value for s in family.samples
            if s.name.endswith("_total")}


def test_a_certificate_failure_is_counted(client, objective_off_by_one):
    before = _sample("certimatch_certificate_failures_total")
    assert client.post("/v1/solve", json=PROBLEM).status_code == 500
    assert _sample("certimatch_certificate_failures_total") == before + 1


def test_verifications_are_counted_by_verdict(client):
    answer = client.post("/v1/solve", json=PROBLEM).get_json()
    good, bad = (_sample("certimatch_verifications_total", valid=v) for v in ("true", "false"))
    client.post("/v1/verify", json={**PROBLEM, "answer": answer})
    answer["objective"] -= 1
    client.post("/v1/verify", json={**PROBLEM, "answer": answer})
    assert _sample("certimatch_verifications_total", valid="true") == good + 1
    assert _sample("certimatch_verifications_total", valid="false") == bad + 1


def test_each_route_method_and_status_is_counted_apart(client):
    # The same label values, again and interleaved with others, reach the same series.
    # (A 405 matched no rule: it is counted under "unmatched", as a 404 is.)
    series = [("/v1/solve", "POST", "200"), ("/v1/solve", "POST", "422"),
              ("unmatched", "GET", "405"), ("/healthz", "GET", "200")]
    before = [_sample("certimatch_http_requests_total", route=r, method=m, status=s)
              for r, m, s in series]
    for _ in range(2):
        assert client.post("/v1/solve", json=PROBLEM).status_code == 200
        assert client.post("/v1/solve", json={"sources": []}).status_code == 422
        assert client.get("/healthz").status_code == 200
    assert client.get("/v1/solve").status_code == 405
    after = [_sample("certimatch_http_requests_total", route=r, method=m, status=s)
             for r, m, s in series]
    assert [a - b for a, b in zip(after, before, strict=True)] == [2, 2, 1, 2]


def test_unmatched_paths_share_one_label(client):
    before = _sample("certimatch_http_requests_total", route="unmatched", method="GET",
                     status="404")
    client.get("/random/a")
    client.get("/random/b")
    assert _sample("certimatch_http_requests_total", route="unmatched", method="GET",
                   status="404") == before + 2


def test_metrics_endpoint_speaks_the_exposition_format(client):
    client.post("/v1/solve", json=PROBLEM)
    response = client.get("/metrics")
    assert response.status_code == 200
    assert response.headers["Content-Type"] == observe.METRICS_CONTENT_TYPE
    # prometheus_client's own parser of the text format reads it back
    families = {f.name: f for f in text_string_to_metric_families(response.get_data(
        as_text=True))}
    expected = {"certimatch_http_requests": "counter", "certimatch_solves": "counter",
                "certimatch_solve_duration_seconds": "histogram",
                "certimatch_problem_size": "histogram",
                "certimatch_certificate_failures": "counter",
                "certimatch_verifications": "counter"}
    assert {name: families[name].type for name in expected} == expected
    solved = [s for s in families["certimatch_solves"].samples
              if s.labels == {"shape": "transportation", "solver": "network_simplex"}]
    assert solved and solved[0].value >= 1


def test_single_process_mode_outside_gunicorn():
    assert observe.multiprocess_mode() is False


def test_metrics_can_be_switched_off(monkeypatch):
    monkeypatch.setenv("CERTIMATCH_METRICS_ENABLED", "false")
    app = create_app({"TESTING": True})
    assert app.extensions["certimatch.settings"].metrics_enabled is False
    off = app.test_client()
    response = off.get("/metrics")
    assert response.status_code == 404
    assert response.mimetype == "application/problem+json"
    before = sum(_solves().values())
    requests_before = _sample("certimatch_http_requests_total", route="/v1/solve",
                              method="POST", status="200")
    assert off.post("/v1/solve", json=PROBLEM).status_code == 200
    assert sum(_solves().values()) == before
    assert _sample("certimatch_http_requests_total", route="/v1/solve", method="POST",
                   status="200") == requests_before
    # The page does not advertise what is not served.
    assert b"/metrics" not in off.get("/").data


@pytest.mark.parametrize(("raw", "message"), [
    ("yes", "CERTIMATCH_METRICS_ENABLED must be true or false, got 'yes'"),
    ("1", "CERTIMATCH_METRICS_ENABLED must be true or false, got '1'"),
    ("", "CERTIMATCH_METRICS_ENABLED must be true or false, got ''"),
])
def test_a_bad_metrics_switch_stops_the_app(monkeypatch, raw, message):
    monkeypatch.setenv("CERTIMATCH_METRICS_ENABLED", raw)
    with pytest.raises(ValueError) as info:
        create_app()
    assert str(info.value) == message


@pytest.mark.parametrize(("body", "size"), [
    ({"costs": [[1, 2, 3], [4, 5, 6]]}, ("cells", 6)),
    ({"arcs": [{}, {}, {}]}, ("arcs", 3)),
    ({"arcs": {"from": ["a", "b"], "to": ["b", "a"], "cost": [1, 1]}}, ("arcs", 2)),
    ({"costs": []}, None),
    ([1, 2], None),
])
def test_problem_size(body, size):
    assert observe.problem_size(body) == size


# --- a real gunicorn with two workers -------------------------------------------------------

START_SECONDS = 30.0   # bound on the server coming up; only a failure waits this long
STOP_SECONDS = 45.0    # bound on a graceful stop (graceful_timeout is 30 s) before SIGKILL
ROUNDS = 40            # bound on rounds of parallel solves until both workers have answered
PER_ROUND = 6


@pytest.fixture
def gunicorn(tmp_path: Path) -> Iterator[Gunicorn]:
    metrics = tmp_path / "metrics"
    metrics.mkdir()
    with Gunicorn(tmp_path, workers=2, env={"PROMETHEUS_MULTIPROC_DIR": str(metrics)}) as server:
        yield server


def _solve_lines(server: Gunicorn) -> list[dict[str, Any]]:
    lines = []
    for line in server.output().splitlines():
        record = json.loads(line)
        if record.get("message") == "request" and record.get("path") == "/v1/solve":
            lines.append(record)
    return lines


def test_counts_from_both_workers_add_up(gunicorn):
    sent = 0
    with ThreadPoolExecutor(max_workers=PER_ROUND) as pool:
        for _ in range(ROUNDS):
            replies = list(pool.map(
                lambda i: requests.post(gunicorn.base + "/v1/solve", json=PROBLEM,
                                        headers={"X-Request-ID": f"mp-{i}"}, timeout=30),
                range(sent, sent + PER_ROUND)))
            assert [r.status_code for r in replies] == [200] * PER_ROUND
            sent += PER_ROUND
            if len({r["pid"] for r in _solve_lines(gunicorn)}) == 2:
                break
    per_worker = Counter(r["pid"] for r in _solve_lines(gunicorn))
    assert len(per_worker) == 2, f"one worker took all {sent} solves: {per_worker}"

    # The scrape is answered by one worker but reports the solves of both.
    text = requests.get(gunicorn.base + "/metrics", timeout=10).text
    families = {f.name: f for f in text_string_to_metric_families(text)}
    solves = sum(s.value for s in families["certimatch_solves"].samples
                 if s.name == "certimatch_solves_total")
    assert solves == sent == sum(per_worker.values())
    requests_200 = sum(s.value for s in families["certimatch_http_requests"].samples
                       if s.name == "certimatch_http_requests_total"
                       and s.labels["route"] == "/v1/solve" and s.labels["status"] == "200")
    assert requests_200 == sent
    # Each worker wrote its own file into the directory the operator gave.
    files = {p.name for p in (gunicorn.folder / "metrics").glob("counter_*.db")}
    assert {f"counter_{pid}.db" for pid in per_worker} <= files

    # Every request id came back in the log, once.
    ids = Counter(r["request_id"] for r in _solve_lines(gunicorn))
    assert set(ids) == {f"mp-{i}" for i in range(sent)} and set(ids.values()) == {1}


def test_every_server_line_is_json(gunicorn):
    requests.get(gunicorn.base + "/healthz", headers={"X-Request-ID": "json-1"}, timeout=10)
    requests.get(gunicorn.base + "/nope", timeout=10)
    lines = [line for line in gunicorn.output().splitlines() if line.strip()]
    records = [json.loads(line) for line in lines]   # any other line fails here
    loggers = {r["logger"] for r in records}
    assert {"gunicorn.error", "certimatch"} <= loggers
    assert any(r.get("request_id") == "json-1" for r in records)
