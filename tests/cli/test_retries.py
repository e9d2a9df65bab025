"""Retries of transient failures: a server that is down, one that is overloaded, one that resets.

The overloaded server is a stub of this file: a loopback HTTP server that answers from a
script (503 with Retry-After, then the real answer of the service computed in this
process). Nothing sleeps: the ``waits`` fixture (conftest.py) records each wait instead,
with the jitter drawing its upper bound, so the waits are exact numbers.
"""

from __future__ import annotations

import json
import re
import socket
import threading
import uuid
from collections.abc import Iterator
from email.utils import format_datetime, parsedate_to_datetime
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path
from typing import Any

import pytest
from servers import clean_app

from service.cli import main
from service.cli.retries import RetryPolicy, retry_after_seconds

# The scipy.optimize.linear_sum_assignment docstring example; its optimum is 5.
PROBLEM = {"sources": [{"id": "r0"}, {"id": "r1"}, {"id": "r2"}],
           "sinks": [{"id": "c0"}, {"id": "c1"}, {"id": "c2"}],
           "costs": [[4, 1, 3], [2, 0, 5], [3, 2, 2]]}

RESET = "reset"          # a script step: close the connection without an answer


def _answer_of(problem: dict[str, Any]) -> bytes:
    """The service's real answer, computed in this process, for the stub to send."""
    client = clean_app().test_client()
    r = client.post("/v1/solve", data=json.dumps(problem), content_type="application/json")
    assert r.status_code == 200
    return r.get_data()


def _problem_doc(status: int, slug: str, detail: str) -> bytes:
    return json.dumps({"type": f"urn:certimatch:problem:{slug}", "title": slug,
                       "status": status, "detail": detail}).encode()


class Stub(ThreadingHTTPServer):
    """Answers each POST with the next step of ``script``; the last step repeats."""

    daemon_threads = True

    def __init__(self, script: list[Any]) -> None:
        super().__init__(("127.0.0.1", 0), _Handler)
        self.script = list(script)
        self.seen: list[tuple[str, dict[str, str], bytes]] = []
        self.url = f"http://127.0.0.1:{self.server_address[1]}"

    def next_step(self) -> Any:
        return self.script.pop(0) if len(self.script) > 1 else self.script[0]


class _Handler(BaseHTTPRequestHandler):
    server: Stub

    def do_POST(self) -> None:  # noqa: N802 (the name http.server calls)
        body = self.rfile.read(int(self.headers.get("Content-Length", 0)))
        self.server.seen.append((self.path, dict(self.headers), body))
        step = self.server.next_step()
        if step == RESET:
            self.close_connection = True
            self.connection.shutdown(socket.SHUT_RDWR)
            return
        status, headers, payload = step
        self.send_response(status)
        for name, value in headers.items():
            self.send_header(name, value)
        self.send_header("Content-Type", "application/json" if status == 200
                         else "application/problem+json")
        self.send_header("Content-Length", str(len(payload)))
        self.end_headers()
        self.wfile.write(payload)

    def log_message(self, format: str, *args: Any) -> None:
        pass


@pytest.fixture
def stub(request: pytest.FixtureRequest) -> Iterator[Stub]:
    server = Stub(request.param)
    thread = threading.Thread(target=server.serve_forever, args=(0.05,), daemon=True)
    thread.start()
    try:
        yield server
    finally:
        server.shutdown()
        server.server_close()
        thread.join(timeout=10)


def _scripted(*steps: Any) -> Any:
    return pytest.mark.parametrize("stub", [list(steps)], indirect=True)


@pytest.fixture
def problem_file(tmp_path: Path) -> str:
    path = tmp_path / "problem.json"
    path.write_text(json.dumps(PROBLEM))
    return str(path)


def _run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port: int = s.getsockname()[1]
    return port


ANSWER = _answer_of(PROBLEM)
OVERLOADED = (503, {"Retry-After": "2"}, _problem_doc(503, "overloaded", "too busy"))


# --- the policy -------------------------------------------------------------------------

def test_full_jitter_waits_are_bounded_by_doubling_steps_up_to_the_cap():
    # "Full jitter": sleep = random_between(0, min(cap, base * 2 ** attempt)) (Brooker,
    # "Exponential Backoff And Jitter", AWS Architecture Blog, 2015).
    top = RetryPolicy(base=0.5, cap=8.0, random=lambda: 1.0)
    assert [top.wait(k, None) for k in range(7)] == [0.5, 1.0, 2.0, 4.0, 8.0, 8.0, 8.0]
    bottom = RetryPolicy(base=0.5, cap=8.0, random=lambda: 0.0)
    assert [bottom.wait(k, None) for k in range(4)] == [0.0] * 4
    half = RetryPolicy(base=0.5, cap=8.0, random=lambda: 0.5)
    assert half.wait(3, None) == 2.0


def test_retry_after_is_honoured_when_longer_and_bounded_by_the_maximum_wait():
    policy = RetryPolicy(base=0.5, cap=8.0, max_wait=60.0, random=lambda: 1.0)
    assert policy.wait(0, "3") == 3.0          # longer than the 0.5 s step: the server's
    assert policy.wait(4, "3") == 8.0          # shorter than the 8 s step: ours
    assert policy.wait(0, "3600") == 60.0      # never more than the maximum wait
    assert policy.wait(0, "soon") == 0.5       # unreadable: as if absent


def test_retry_after_in_both_forms_of_rfc_9110():
    # RFC 9110, section 10.2.3: delay-seconds, or an HTTP-date; its example date is
    # "Fri, 31 Dec 1999 23:59:59 GMT".
    when = parsedate_to_datetime("Fri, 31 Dec 1999 23:59:59 GMT").timestamp()
    assert retry_after_seconds("120", when) == 120.0
    assert retry_after_seconds("Fri, 31 Dec 1999 23:59:59 GMT", when - 30) == 30.0
    assert retry_after_seconds("Fri, 31 Dec 1999 23:59:59 GMT", when + 30) == 0.0
    assert retry_after_seconds(None, when) is None
    assert retry_after_seconds("-5", when) is None
    assert retry_after_seconds("next week", when) is None


# --- a server that is down --------------------------------------------------------------

def test_server_down_is_retried_then_exit_4(capsys, problem_file, waits):
    url = f"http://127.0.0.1:{_free_port()}"
    code, out, err = _run(capsys, "solve", problem_file, "--url", url)
    assert code == 4
    assert out == ""
    assert waits == [0.5, 1.0, 2.0]            # 3 retries by default, doubling
    assert "Connection refused (tried 4 times)" in err
    assert len(re.findall(r"retry \d of 3 in", err)) == 3


def test_retries_0_disables_retrying(capsys, problem_file, waits):
    url = f"http://127.0.0.1:{_free_port()}"
    code, _, err = _run(capsys, "solve", problem_file, "--url", url, "--retries", "0")
    assert code == 4
    assert waits == []
    assert "tried" not in err


def test_quiet_drops_the_retry_notices_but_not_the_error(capsys, problem_file, waits):
    url = f"http://127.0.0.1:{_free_port()}"
    code, _, err = _run(capsys, "solve", problem_file, "--url", url, "--retries", "1", "-q")
    assert code == 4
    assert len(waits) == 1
    assert err.count("\n") == 1 and "cannot reach" in err


# --- an overloaded server, then a good answer -------------------------------------------

@_scripted(OVERLOADED, (200, {}, ANSWER))
def test_overloaded_then_answered_exits_0_with_one_idempotency_key(capsys, problem_file,
                                                                   stub, waits):
    code, out, err = _run(capsys, "solve", problem_file, "--url", stub.url)
    assert code == 0, err
    assert json.loads(out)["objective"] == 5
    assert waits == [2.0]                      # Retry-After: 2 beats the 0.5 s step
    keys = [headers.get("Idempotency-Key") for _, headers, _ in stub.seen]
    assert len(keys) == 2 and keys[0] == keys[1]
    assert uuid.UUID(keys[0]).version == 4
    assert stub.seen[0][2] == stub.seen[1][2]  # the same body both times
    assert "answered 503 with Retry-After: 2; retry 1 of 3 in 2.0 s" in err


@_scripted((200, {}, ANSWER))
def test_each_run_gets_a_new_key_and_a_given_key_is_sent(capsys, problem_file, stub):
    assert _run(capsys, "solve", problem_file, "--url", stub.url)[0] == 0
    assert _run(capsys, "solve", problem_file, "--url", stub.url)[0] == 0
    assert _run(capsys, "solve", problem_file, "--url", stub.url,
                "--idempotency-key", "dispatch-2026-12-02")[0] == 0
    keys = [headers.get("Idempotency-Key") for _, headers, _ in stub.seen]
    assert keys[0] != keys[1]
    assert keys[2] == "dispatch-2026-12-02"


def test_idempotency_key_with_a_space_is_a_usage_error(capsys, problem_file):
    code, _, err = _run(capsys, "solve", problem_file, "--local", "--idempotency-key", "a b")
    assert code == 1
    assert "visible ASCII" in err


@_scripted(OVERLOADED)
def test_overloaded_for_good_exits_4_with_the_last_problem_document(capsys, problem_file,
                                                                    stub, waits):
    code, out, err = _run(capsys, "solve", problem_file, "--url", stub.url)
    assert code == 4
    assert out == ""
    assert len(stub.seen) == 4
    assert waits == [2.0, 2.0, 2.0]
    assert json.loads(err.splitlines()[-1])["type"].endswith(":overloaded")


@_scripted((504, {"Retry-After": format_datetime(parsedate_to_datetime(
    "Fri, 31 Dec 1999 23:59:59 GMT"), usegmt=True)}, _problem_doc(504, "gateway", "slow")),
    (200, {}, ANSWER))
def test_gateway_timeout_with_a_date_in_the_past_is_retried_at_once(capsys, problem_file,
                                                                    stub, waits):
    code, _, _ = _run(capsys, "solve", problem_file, "--url", stub.url)
    assert code == 0
    assert waits == [0.5]                      # the date has passed: our own step


@_scripted(RESET, (200, {}, ANSWER))
def test_connection_reset_is_retried(capsys, problem_file, stub, waits):
    code, out, err = _run(capsys, "solve", problem_file, "--url", stub.url)
    assert code == 0, err
    assert json.loads(out)["objective"] == 5
    assert waits == [0.5]
    assert len(stub.seen) == 2
    # http.client's words for a connection closed before the answer (stdlib).
    assert "Remote end closed connection without response; retry 1 of 3" in err


# --- permanent failures are not retried -------------------------------------------------

@_scripted((503, {}, _problem_doc(503, "time-limit-asked", "asked for 0.001 s")))
def test_503_without_retry_after_is_permanent(capsys, problem_file, stub, waits):
    # The service's answer to a time limit the request asked for itself: retrying the
    # same request would fail the same way.
    code, out, err = _run(capsys, "solve", problem_file, "--url", stub.url)
    assert code == 1
    assert len(stub.seen) == 1 and waits == []
    assert json.loads(err)["type"].endswith(":time-limit-asked")


@_scripted((401, {"WWW-Authenticate": 'Bearer realm="certimatch"'},
            _problem_doc(401, "unauthorized", "send Authorization: Bearer <token>")))
def test_401_is_permanent(capsys, problem_file, stub, waits):
    code, _, err = _run(capsys, "solve", problem_file, "--url", stub.url)
    assert code == 1
    assert len(stub.seen) == 1 and waits == []
    assert json.loads(err)["status"] == 401


@_scripted((500, {"Retry-After": "1"}, _problem_doc(500, "certificate-failure", "bug")))
def test_500_is_permanent_even_with_retry_after(capsys, problem_file, stub, waits):
    code, _, _ = _run(capsys, "solve", problem_file, "--url", stub.url)
    assert code == 1
    assert len(stub.seen) == 1 and waits == []


def test_a_malformed_url_is_permanent(capsys, problem_file, waits):
    code, _, err = _run(capsys, "solve", problem_file, "--url", "ftp://127.0.0.1:1")
    assert code == 1
    assert waits == []
    assert "cannot reach" in err


# --- verify is retried the same way -----------------------------------------------------

@_scripted(OVERLOADED, (200, {}, json.dumps({"valid": True, "checks": []}).encode()))
def test_verify_is_retried(capsys, tmp_path, stub, waits):
    path = tmp_path / "both.json"
    path.write_text(json.dumps({**PROBLEM, "answer": json.loads(ANSWER)}))
    code, out, _ = _run(capsys, "verify", str(path), "--url", stub.url)
    assert code == 0
    assert json.loads(out)["valid"] is True
    assert waits == [2.0]
    assert "Idempotency-Key" not in stub.seen[0][1]   # verify has no side effect to guard


@_scripted(OVERLOADED)
def test_verify_overloaded_for_good_exits_4(capsys, tmp_path, stub):
    path = tmp_path / "both.json"
    path.write_text(json.dumps({**PROBLEM, "answer": json.loads(ANSWER)}))
    code, _, _ = _run(capsys, "verify", str(path), "--url", stub.url, "--retries", "1")
    assert code == 4
    assert len(stub.seen) == 2
