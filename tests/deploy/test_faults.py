"""Faults under load, through a real gunicorn on loopback: a killed worker, a graceful stop,
and requests at the size limits.

- ``kill -9`` of the worker that is solving a large problem, while other clients keep
  sending small ones: only that request may fail; every other request gets a correct 200,
  and gunicorn has a new worker serving within 5 s (a bounded wait, the only timing here).
  Once in CI; ten times in a row with ``CERTIMATCH_EXTENDED=1``.
- SIGTERM to the master while both workers are solving large problems: both requests
  complete with 200 and a certificate that verifies, then the master exits 0.
- With a small ``CERTIMATCH_MAX_BODY_BYTES`` (and ``MAX_CELLS``): an over-limit body gets 413
  before it is read, a problem over the cell limit gets 413 ``too-large``, and the largest
  allowed problems are solved, while a client beside them keeps getting 200s and no worker
  dies.

Which worker has the large request in flight is read from /proc: the request goes over a
connection whose client port the test knows, and the worker holding the server end of that
connection (/proc/net/tcp, /proc/<pid>/fd) has accepted it and not yet answered. Workers are
the master's children (/proc/<pid>/task/*/children).
"""

from __future__ import annotations

import http.client
import json
import os
import signal
import threading
import time
from typing import Any

import numpy as np
import orjson
import pytest
import reference as ref
import requests
from servers import (
    GOOD,
    STOP_SECONDS,
    Gunicorn,
    Traffic,
    connection_owner,
    peak_memory_kib,
    wait_for,
    without_decision,
)

from service.settings import Settings
from service.solve.pipeline import verify_body

EXTENDED = os.environ.get("CERTIMATCH_EXTENDED") == "1"
#: Workers killed one after another in one run; the extended run kills more.
KILLS = 10 if EXTENDED else 1
#: Bound on a new worker serving after one was killed (the issue's figure).
RESPAWN_SECONDS = 5.0
#: Bound on a large request being accepted by a worker.
TAKEN_SECONDS = 60.0
#: Bound on client threads finishing after they were told to stop.
JOIN_SECONDS = 180.0


def _settings() -> Settings:
    # The dataclass' own defaults (not the environment's): the settings the servers here run.
    return Settings()


def large_problem(seed: int, n: int = 1500) -> bytes:
    """n x n transportation with quantities: seconds of solving for a body of megabytes.

    (1500 x 1500 is about 9 MB and takes a worker 1-2 s; reading the body takes
    milliseconds, so once a worker has read it, it stays busy long enough to be caught.)
    """
    rng = np.random.default_rng(seed)
    problem = {
        "sources": [{"id": f"depot-{i}", "supply": int(s)}
                    for i, s in enumerate(rng.integers(1, 20, n))],
        "sinks": [{"id": f"store-{j}", "demand": int(d)}
                  for j, d in enumerate(rng.integers(1, 20, n))],
        "costs": rng.integers(0, 1000, size=(n, n)),
    }
    return orjson.dumps(problem, option=orjson.OPT_SERIALIZE_NUMPY)


def small_mix() -> tuple[list[bytes], list[Any]]:
    """The small seeded families and GOOD: bodies and their optimal objectives."""
    problems = [ref.instance(f, s) for f in ref.FAMILIES for s in (21, 22)] + [GOOD]
    return ([json.dumps(p).encode() for p in problems],
            [ref.solve_networkx(p).objective for p in problems])


@pytest.fixture(scope="module")
def small() -> tuple[list[bytes], list[Any]]:
    return small_mix()


def assert_traffic_correct(traffic: Traffic, objectives: list[Any]) -> None:
    """Every request of ``traffic`` got 200 with the optimal objective."""
    bad = traffic.failures()
    assert bad == [], [(o.problem, o.status, o.error) for o in bad[:5]]
    for (index, _), body in traffic.answers.items():
        answer = json.loads(body)
        assert answer["objective"] == pytest.approx(objectives[index], rel=1e-9), index


class Request(threading.Thread):
    """One POST on a connection of its own, sent from a thread so the test can act while
    it is in flight. The connection is opened at once, so its client port is known."""

    def __init__(self, server: Gunicorn, body: bytes) -> None:
        super().__init__(daemon=True)
        self.server = server
        self.body = body
        self.conn = http.client.HTTPConnection("127.0.0.1", server.port, timeout=JOIN_SECONDS)
        self.conn.connect()
        assert self.conn.sock is not None
        self.port: int = self.conn.sock.getsockname()[1]
        self.status: int | None = None
        self.content: bytes = b""
        self.content_type = ""
        self.error: BaseException | None = None

    def run(self) -> None:
        try:
            self.conn.request("POST", "/v1/solve", body=self.body,
                              headers={"Content-Type": "application/json"})
            resp = self.conn.getresponse()
            self.content = resp.read()
            self.status = resp.status
            self.content_type = resp.getheader("Content-Type") or ""
        except (OSError, http.client.HTTPException) as e:
            self.error = e
        finally:
            self.conn.close()

    def owner(self) -> int | None:
        """The worker with this request in flight, if one has accepted it."""
        return connection_owner(self.server, self.port)

    def finish(self) -> None:
        self.join(JOIN_SECONDS)
        assert not self.is_alive(), "a request did not end within its bound"


# --------------------------------------------------------------------------------------------
# kill -9 of a busy worker
# --------------------------------------------------------------------------------------------


def test_kill_9_of_a_busy_worker_fails_only_its_request(small, tmp_path, capsys):
    bodies, objectives = small
    big = large_problem(seed=1)
    killed: list[tuple[int, float]] = []      # (victim, seconds until a new worker served)
    slow_calls: list[Request] = []
    with Gunicorn(tmp_path, workers=2) as server:
        traffic = Traffic(server, bodies, clients=3, seconds=60 + 30 * KILLS,
                          max_per_client=5000 * KILLS)
        traffic.start()
        try:
            wait_for("small requests answered", lambda: traffic.ok() >= 20, 30, server.output)
            for _ in range(KILLS):
                before = server.worker_pids()
                slow = Request(server, big)
                slow_calls.append(slow)
                slow.start()
                victim = wait_for("a worker accepting the large problem", slow.owner,
                                  TAKEN_SECONDS, server.output)
                assert slow.is_alive(), "the large problem was solved before it was caught"
                ok_before_kill = traffic.ok()
                os.kill(victim, signal.SIGKILL)
                killed_at = time.monotonic()

                def replaced(victim: int = victim, before: set[int] = before) -> bool:
                    pids = server.worker_pids()
                    if victim in pids or len(pids) != 2 or pids <= before:
                        return False
                    return server.answers_good()

                wait_for(f"a new worker serving within {RESPAWN_SECONDS} s of kill -9",
                         replaced, RESPAWN_SECONDS, server.output)
                killed.append((victim, time.monotonic() - killed_at))
                slow.finish()
                # The service goes on serving the load after it, not only one request.
                wait_for("traffic after the respawn",
                         lambda n=ok_before_kill: traffic.ok() >= n + 20, 30, server.output)
        finally:
            traffic.stop()
            for slow in slow_calls:
                slow.finish()
    for slow in slow_calls:
        assert slow.status is None, ("a request on a killed worker was answered", slow.status)
        assert isinstance(slow.error, OSError | http.client.HTTPException), slow.error
    assert_traffic_correct(traffic, objectives)
    slowest = max(seconds for _, seconds in killed)
    with capsys.disabled():
        print(f"\nkill -9 x {len(killed)} of a worker with a {len(big) / 1e6:.1f} MB problem "
              f"in flight: each such request failed "
              f"({type(slow_calls[0].error).__name__}); {traffic.ok()} other requests, all "
              f"200 and optimal; a new worker served within {slowest:.2f} s every time")


# --------------------------------------------------------------------------------------------
# SIGTERM drains requests in flight
# --------------------------------------------------------------------------------------------


def test_sigterm_lets_requests_in_flight_finish(tmp_path, capsys):
    big = large_problem(seed=2)
    server = Gunicorn(tmp_path, workers=2).start()
    try:
        calls = [Request(server, big) for _ in range(2)]
        for call in calls:
            call.start()
        # Each worker has accepted one of them: both requests are in flight.
        wait_for("both workers holding a large request",
                 lambda: len({call.owner() for call in calls} - {None}) == 2,
                 TAKEN_SECONDS, server.output)
        in_flight = sum(call.is_alive() for call in calls)
        assert in_flight == 2, "a large problem was solved before SIGTERM could be sent"
        server.proc.send_signal(signal.SIGTERM)   # type: ignore[union-attr]
        for call in calls:
            call.finish()
        code = server.proc.wait(timeout=STOP_SECONDS)   # type: ignore[union-attr]
        log = server.output()
    finally:
        server.stop()
    for call in calls:
        assert call.error is None, (call.error, log)
        assert call.status == 200, (call.content[:300], log)
    answers = {without_decision(call.content) for call in calls}
    assert len(answers) == 1, "two answers to one problem"
    verdict = verify_body({**orjson.loads(big), "answer": orjson.loads(answers.pop())},
                          _settings())
    assert verdict["valid"] is True, [c for c in verdict["checks"] if not c["passed"]]
    assert code == 0, log
    with capsys.disabled():
        print(f"\nSIGTERM with {in_flight} large requests in flight: both answered 200 with a "
              f"valid certificate, master exited {code}")


# --------------------------------------------------------------------------------------------
# Size limits: big requests do not take the other workers down
# --------------------------------------------------------------------------------------------

BODY_LIMIT = 4 * 1024 * 1024
CELL_LIMIT = 250_000


def transportation(n: int, seed: int) -> dict[str, Any]:
    rng = np.random.default_rng(seed)
    return {"sources": [{"id": f"s{i}", "supply": int(x)}
                        for i, x in enumerate(rng.integers(1, 9, n))],
            "sinks": [{"id": f"t{j}", "demand": int(x)}
                      for j, x in enumerate(rng.integers(1, 9, n))],
            "costs": rng.integers(0, 1000, size=(n, n)).tolist()}


def test_big_requests_do_not_take_other_workers_down(small, tmp_path, capsys):
    bodies, objectives = small
    env = {"CERTIMATCH_MAX_BODY_BYTES": str(BODY_LIMIT), "CERTIMATCH_MAX_CELLS": str(CELL_LIMIT)}
    # The largest square that the cell limit allows (250,000 cells), about 1 MB.
    allowed = transportation(500, seed=3)
    allowed_body = json.dumps(allowed).encode()
    over_cells = json.dumps(transportation(501, seed=4)).encode()
    over_body = b'{"sources": "' + b"x" * (4 * BODY_LIMIT) + b'"}'
    assert len(allowed_body) < BODY_LIMIT and len(over_cells) < BODY_LIMIT
    with Gunicorn(tmp_path, workers=2, env=env) as server:
        workers = server.worker_pids()
        traffic = Traffic(server, bodies, clients=2, seconds=120, max_per_client=5000).start()
        try:
            wait_for("small requests answered", lambda: traffic.ok() >= 10, 30, server.output)
            headers = {"Content-Type": "application/json"}
            over = requests.post(server.base + "/v1/solve", data=over_body, headers=headers,
                                 timeout=120)
            cells = requests.post(server.base + "/v1/solve", data=over_cells, headers=headers,
                                  timeout=120)
            # Two allowed problems at once: both workers busy with the largest kind.
            calls = [Request(server, allowed_body) for _ in range(2)]
            for call in calls:
                call.start()
            for call in calls:
                call.finish()
            ok_at_end = traffic.ok()
            wait_for("small requests after the big ones",
                     lambda: traffic.ok() >= ok_at_end + 10, 30, server.output)
        finally:
            traffic.stop()
        workers_after = server.worker_pids()
        peaks = {pid: peak_memory_kib(pid) for pid in workers_after}
        log = server.output()
    assert over.status_code == 413, over.text[:300]
    assert over.headers["Content-Type"].startswith("application/problem+json")
    assert "MAX_BODY_BYTES" in over.json()["detail"]
    assert cells.status_code == 413, cells.text[:300]
    assert cells.json()["type"] == "urn:certimatch:problem:too-large"
    assert cells.json()["limit"] == CELL_LIMIT
    for call in calls:
        assert call.error is None, call.error
        assert call.status == 200, call.content[:300]
    verdict = verify_body({**allowed, "answer": json.loads(calls[0].content)}, _settings())
    assert verdict["valid"] is True
    assert_traffic_correct(traffic, objectives)
    # No worker died or was replaced on the way.
    assert workers_after == workers, log
    with capsys.disabled():
        print(f"\nlimits: {len(over_body) / 1e6:.0f} MB body -> 413, {501 * 501} cells -> 413, "
              f"two {len(allowed_body) / 1e6:.1f} MB problems -> 200 while {traffic.ok()} "
              f"small requests got 200; workers unchanged, peak memory "
              f"{', '.join(f'{kib / 1024:.0f} MiB' for kib in peaks.values())}")
