"""The service under a real gunicorn on a loopback port, and the CLI commands that start one.

Every wait is bounded and every server is stopped in a finaliser, also when a test fails.
Nothing here asserts on time.
"""

from __future__ import annotations

import contextlib
import json
import os
import signal
import socket
import subprocess
import sys
import threading
import time
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Any

import pytest
import requests
from servers import GOOD, GOOD_OBJECTIVE, Gunicorn, free_port, wait_for, without_decision

from service.cli import main
from service.cli.demo import DEMO_FILES, demo_problem

ROOT = Path(__file__).resolve().parents[2]
DEMO_DIR = ROOT / "service" / "demo"

START_SECONDS = 30.0   # bound on a server coming up; only a failure ever waits this long
STOP_SECONDS = 15.0    # bound on a graceful stop before SIGKILL
DEMO_SECONDS = 120.0   # bound on a whole `certimatch demo --exit` run


def _accepts(port: int) -> bool:
    try:
        with socket.create_connection(("127.0.0.1", port), timeout=1):
            return True
    except OSError:
        return False


@pytest.fixture(scope="module")
def server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Gunicorn]:
    with Gunicorn(tmp_path_factory.mktemp("gunicorn"), workers=2) as srv:
        yield srv


def _post(server: Gunicorn, path: str, doc: Any) -> requests.Response:
    return requests.post(server.base + path, json=doc, timeout=60)


def test_healthz(server):
    r = requests.get(server.base + "/healthz", timeout=10)
    assert r.status_code == 200
    assert r.json() == {"status": "ok"}


@pytest.mark.parametrize("name", DEMO_FILES)
def test_demo_problem_is_solved_and_its_answer_verifies(server, name):
    problem = demo_problem(name)
    solved = _post(server, "/v1/solve", problem)
    assert solved.status_code == 200, solved.text
    assert solved.headers["Content-Type"].startswith("application/json")
    answer = solved.json()
    assert answer["status"] == "optimal"
    checked = _post(server, "/v1/verify", {**problem, "answer": answer})
    assert checked.status_code == 200, checked.text
    verdict = checked.json()
    assert verdict["valid"] is True, verdict
    assert verdict["checks"] and all(c["passed"] for c in verdict["checks"])


def test_tampered_answer_does_not_verify(server):
    # Control for the test above: /v1/verify over HTTP can say no.
    problem = demo_problem("repair_tickets.json")
    answer = _post(server, "/v1/solve", problem).json()
    answer["objective"] -= 1
    verdict = _post(server, "/v1/verify", {**problem, "answer": answer}).json()
    assert verdict["valid"] is False


def test_concurrent_requests_across_workers_agree(server):
    problem = demo_problem("parts_network.json")
    with ThreadPoolExecutor(max_workers=4) as pool:
        replies = list(pool.map(lambda _: _post(server, "/v1/solve", problem), range(8)))
    assert [r.status_code for r in replies] == [200] * 8
    assert len({without_decision(r.content) for r in replies}) == 1
    # each a decision of its own, in one log
    assert len({r.json()["decision"]["log_index"] for r in replies}) == 8


BAD_REQUESTS = {
    "malformed json": ("POST", "/v1/solve", b'{"sources": [', "application/json", 400),
    "wrong content type": ("POST", "/v1/solve", b"{}", "text/plain", 415),
    "invalid problem": ("POST", "/v1/solve",
                        b'{"sources": [{"id": "a"}], "sinks": [], "costs": []}',
                        "application/json", 422),
    "unknown path": ("GET", "/v1/nothing-here", b"", None, 404),
    "wrong method": ("GET", "/v1/solve", b"", None, 405),
}


@pytest.mark.parametrize("case", BAD_REQUESTS.values(), ids=BAD_REQUESTS.keys())
def test_bad_request_gets_a_problem_document(server, case):
    method, path, body, content_type, status = case
    headers = {"Content-Type": content_type} if content_type else {}
    r = requests.request(method, server.base + path, data=body, headers=headers, timeout=10)
    assert r.status_code == status, r.text
    assert r.headers["Content-Type"].startswith("application/problem+json")
    doc = r.json()
    assert doc["status"] == status
    assert all(isinstance(doc.get(k), str) and doc[k] for k in ("type", "title", "detail"))


def test_cli_solve_over_http(server, capsys):
    code = main(["solve", str(DEMO_DIR / "repair_tickets.json"), "--url", server.base])
    out, err = capsys.readouterr()
    assert code == 0, err
    assert json.loads(out)["objective"] == 589


def test_cli_verify_over_http_rejects_a_tampered_answer(server, capsys, tmp_path):
    problem = demo_problem("repair_tickets.json")
    answer = _post(server, "/v1/solve", problem).json()
    answer["unmet"] = []  # claim every ticket was covered
    path = tmp_path / "claimed.json"
    path.write_text(json.dumps({**problem, "answer": answer}))
    code = main(["verify", str(path), "--url", server.base])
    out, _ = capsys.readouterr()
    assert code == 2
    assert json.loads(out)["valid"] is False


def _cli(*args: str) -> list[str]:
    return [sys.executable, "-m", "service.cli", *args]


def test_cli_serve_runs_gunicorn(tmp_path):
    srv = Gunicorn(tmp_path, workers=1,
                   command=lambda port: _cli("serve", "--port", str(port), "--workers", "1"))
    try:
        srv.start()
        r = _post(srv, "/v1/solve", demo_problem("repair_tickets.json"))
        assert r.status_code == 200
    finally:
        code = srv.stop()
    # serve execs gunicorn, so our SIGTERM reached its master: a graceful stop exits 0.
    assert code == 0, srv.output()


def test_cli_demo_exit_prints_tables_and_stops_its_server():
    port = free_port()
    proc = subprocess.Popen(_cli("demo", "--exit", "--port", str(port)), cwd=ROOT,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            start_new_session=True)
    try:
        out, err = proc.communicate(timeout=DEMO_SECONDS)
    except subprocess.TimeoutExpired:
        os.killpg(proc.pid, signal.SIGKILL)
        proc.communicate()
        pytest.fail(f"certimatch demo --exit did not finish within {DEMO_SECONDS} s")
    text = out.decode()
    assert proc.returncode == 0, err.decode()
    assert text.count("certificate check: VALID") == 2, text
    assert "tech-amber" in text and "->" in text
    assert "tickets left waiting:" in text and "unused slots:" in text
    assert "depot-mill" in text and "van-08" in text
    assert "POST /v1/solve" not in text, "server access log mixed into the demo's tables"
    # The demo stopped gunicorn on its way out; the master reaps its workers before it
    # exits, but allow the kernel a bounded moment to close the listening socket.
    deadline = time.monotonic() + STOP_SECONDS
    while _accepts(port) and time.monotonic() < deadline:
        time.sleep(0.2)
    assert not _accepts(port), "the demo left a server listening"


def test_cli_demo_refuses_a_busy_port(server, capsys):
    code = main(["demo", "--exit", "--port", str(server.port)])
    _, err = capsys.readouterr()
    assert code == 1
    assert "in use" in err


# --- the command line against a token-protected server ----------------------------------

TOKEN = "dispatch-bot-token-0123456789abcdef"


@pytest.fixture(scope="module")
def guarded(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Gunicorn]:
    with Gunicorn(tmp_path_factory.mktemp("guarded"), workers=1,
                  env={"CERTIMATCH_TOKENS": TOKEN}) as srv:
        yield srv


@pytest.fixture
def good_file(tmp_path: Path) -> str:
    path = tmp_path / "good.json"
    path.write_text(json.dumps(GOOD))
    return str(path)


@pytest.fixture
def no_client_token(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("CERTIMATCH_TOKEN", raising=False)


def test_cli_without_a_token_gets_401_and_exit_1(guarded, good_file, capsys, no_client_token):
    code = main(["solve", good_file, "--url", guarded.base])
    out, err = capsys.readouterr()
    assert code == 1
    assert out == ""
    doc = json.loads(err)
    assert doc["status"] == 401 and doc["type"] == "urn:certimatch:problem:unauthorized"


@pytest.mark.parametrize("how", ["option", "environment", "file"])
def test_cli_reaches_a_token_protected_server(guarded, good_file, capsys, tmp_path,
                                              monkeypatch, no_client_token, how):
    argv = ["solve", good_file, "--url", guarded.base]
    if how == "option":
        argv += ["--token", TOKEN]
    elif how == "environment":
        monkeypatch.setenv("CERTIMATCH_TOKEN", TOKEN)
    else:
        path = tmp_path / "token"
        path.write_text(f"# certimatch bearer token\n{TOKEN}\n")
        path.chmod(0o600)
        argv += ["--token-file", str(path)]
    code = main(argv)
    out, err = capsys.readouterr()
    assert code == 0, err
    assert json.loads(out)["objective"] == GOOD_OBJECTIVE
    assert TOKEN not in out + err


def test_cli_with_a_wrong_token_exits_1_without_showing_it(guarded, good_file, capsys,
                                                           no_client_token):
    wrong = "not-the-token-but-long-enough-0123"
    code = main(["solve", good_file, "--url", guarded.base, "--token", wrong, "--progress"])
    out, err = capsys.readouterr()
    assert code == 1
    assert "the bearer token is not accepted" in err
    assert wrong not in out + err


def test_cli_verify_and_table_use_the_token(guarded, good_file, capsys, tmp_path,
                                            monkeypatch, no_client_token):
    monkeypatch.setenv("CERTIMATCH_TOKEN", TOKEN)
    # --format table calls /v1/verify after /v1/solve: both need the token.
    code = main(["solve", good_file, "--url", guarded.base, "--format", "table"])
    out, err = capsys.readouterr()
    assert code == 0, err
    assert out.splitlines()[-1].startswith("certificate check: VALID")
    answer = tmp_path / "answer.json"
    assert main(["solve", good_file, "--url", guarded.base, "-o", str(answer)]) == 0
    capsys.readouterr()
    code = main(["verify", good_file, "--answer", str(answer), "--url", guarded.base])
    out, _ = capsys.readouterr()
    assert code == 0
    assert json.loads(out)["valid"] is True


# --- certimatch demo and SIGTERM --------------------------------------------------------

def _lines_of(stream: Any, into: list[str]) -> threading.Thread:
    def read() -> None:
        for raw in iter(stream.readline, b""):
            into.append(raw.decode(errors="replace"))
    reader = threading.Thread(target=read, daemon=True)
    reader.start()
    return reader


def test_cli_demo_stops_its_server_on_sigterm():
    port = free_port()
    proc = subprocess.Popen(_cli("demo", "--port", str(port)), cwd=ROOT,
                            stdout=subprocess.PIPE, stderr=subprocess.DEVNULL,
                            start_new_session=True)
    printed: list[str] = []
    reader = _lines_of(proc.stdout, printed)
    try:
        wait_for("the demo serving", lambda: proc.poll() is not None or any(
            "server running at" in line for line in printed), DEMO_SECONDS)
        assert proc.poll() is None, "".join(printed)
        assert _accepts(port)
        proc.send_signal(signal.SIGTERM)           # to the demo alone, not its group
        code = proc.wait(timeout=STOP_SECONDS + 10)
        assert code == 0, "".join(printed)
        # The demo waited for gunicorn's master, which reaps its workers before it exits;
        # allow the kernel a bounded moment to close the listening socket. Checked before
        # the clean-up below, which would end a server the demo left behind.
        wait_for("the port freed", lambda: not _accepts(port), STOP_SECONDS)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()
        # A gunicorn the demo failed to stop is in its process group: end it too, so a
        # failing test leaves nothing behind.
        with contextlib.suppress(ProcessLookupError):
            os.killpg(proc.pid, signal.SIGKILL)
        reader.join(timeout=10)
        assert proc.stdout is not None
        proc.stdout.close()
