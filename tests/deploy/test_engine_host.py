"""The engine host under a real gunicorn (deploy/gunicorn.conf.py): one per worker,
started with it, ended and reaped with it when it is recycled, kept through a graceful
stop until the request it works for is answered; no zombie, no process left over.

Every wait is bounded; nothing asserts on time. Optimal objectives: the chain's is its
only path times the units (arithmetic); the transportation problems' are checked by
networkx's network simplex (tests/reference.py).
"""

from __future__ import annotations

import os
import signal
import threading
from pathlib import Path
from typing import Any

import numpy as np
import reference as ref
import requests
from servers import Gunicorn, alive, children, cpu_ticks, gunicorn, wait_for

RECYCLE_AFTER = 3
REQUESTS = 4 * RECYCLE_AFTER


def _transport(seed: int) -> dict[str, Any]:
    """40 sources, 400 sinks, 6,000 arcs: large enough for the engine host (its work
    bound is far over the in-process threshold), small enough to solve in a moment."""
    rng = np.random.default_rng(seed)
    demand = rng.integers(1, 6, size=400)
    supply = np.full(40, int(1.3 * demand.sum() / 40) + 1)
    tail, head = rng.integers(0, 40, size=6000), rng.integers(0, 400, size=6000)
    # every sink reachable from every source's first arc: source 0 reaches all sinks
    tail[:400], head[:400] = 0, np.arange(400)
    cost = rng.integers(1, 100, size=6000)
    return {"sources": [{"id": f"a{i}", "supply": int(q)} for i, q in enumerate(supply)],
            "sinks": [{"id": f"t{j}", "demand": int(q)} for j, q in enumerate(demand)],
            "arcs": [{"from": f"a{t}", "to": f"t{h}", "cost": int(c)}
                     for t, h, c in zip(tail.tolist(), head.tolist(), cost.tolist(),
                                        strict=True)]}


def _chain(n: int) -> tuple[dict[str, Any], int]:
    """One source, ``n - 2`` nodes on a path, one sink, 7 units; the objective is 7 times
    the sum of the costs (the only path). A long path is cost scaling's slow case (common
    practice, no source): seconds of engine work for a small body."""
    rng = np.random.default_rng(5)
    ids = ["s"] + [f"v{i}" for i in range(n - 2)] + ["t"]
    cost = rng.integers(0, 1000, size=n - 1).tolist()
    arcs = [{"from": ids[i], "to": ids[i + 1], "cost": c} for i, c in enumerate(cost)]
    return ({"sources": [{"id": "s", "supply": 7}], "nodes": [{"id": i} for i in ids[1:-1]],
             "sinks": [{"id": "t", "demand": 7}], "arcs": arcs}, 7 * sum(cost))


def _zombies_in_session(leader: int) -> list[int]:
    """Processes of the server's session (master, workers, hosts) that are zombies."""
    found = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            stat = (entry / "stat").read_text()
        except OSError:
            continue
        fields = stat[stat.rindex(")") + 2:].split()
        if fields[0] == "Z" and int(fields[3]) == leader:      # state, session id
            found.append(int(entry.name))
    return found


def _hosts(server: Gunicorn) -> dict[int, set[int]]:
    return {w: children(w) for w in server.worker_pids()}


def test_every_worker_has_one_host_and_recycled_workers_take_theirs_along(tmp_path):
    problems = [_transport(seed) for seed in (1, 2)]
    optimum = [ref.solve_networkx(p).objective for p in problems]
    env = {"GUNICORN_CMD_ARGS": f"--max-requests {RECYCLE_AFTER} --max-requests-jitter 1"}
    seen_hosts: set[int] = set()
    with gunicorn(tmp_path, workers=2, env=env) as server, requests.Session() as session:
        for i in range(REQUESTS):
            hosts = _hosts(server)
            seen_hosts.update(*hosts.values())
            r = session.post(server.base + "/v1/solve", json=problems[i % 2], timeout=60)
            assert r.status_code == 200, r.text
            assert r.json()["objective"] == optimum[i % 2]
        wait_for("workers recycled", lambda: server.output().count("Worker exiting") >= 2,
                 30.0, server.output)
        wait_for("two workers serving", lambda: len(server.worker_pids()) == 2, 30.0,
                 server.output)

        def settled() -> bool:
            # each live worker has exactly one child, its host, alive; nothing else is left
            hosts = _hosts(server)
            return (all(len(h) == 1 and alive(next(iter(h))) for h in hosts.values())
                    and not _zombies_in_session(server.pid))
        wait_for("one live host per worker and no zombie", settled, 30.0, server.output)
        current = set().union(*_hosts(server).values())
        # the hosts of the recycled workers are gone, not even zombies
        assert seen_hosts - current
        assert not [p for p in seen_hosts - current if os.path.exists(f"/proc/{p}")]
        assert server.stop() == 0
    assert not [p for p in current if os.path.exists(f"/proc/{p}")]


def test_sigterm_to_the_whole_group_lets_the_engine_finish_the_request(tmp_path):
    # Some process managers signal the whole group: the worker drains its request, and its
    # engine host, which ignores the signal, finishes the call it is working on.
    problem, objective = _chain(5000)
    server = Gunicorn(tmp_path, workers=1).start()
    result: dict[str, Any] = {}

    def post() -> None:
        try:
            result["response"] = server.post("/v1/solve", problem, timeout=120)
        except requests.RequestException as e:   # pragma: no cover - reported below
            result["error"] = e

    try:
        (worker,) = server.worker_pids()
        (engine,) = children(worker)
        start = cpu_ticks(engine)
        caller = threading.Thread(target=post)
        caller.start()
        # the host is computing (its CPU time moves) while the request is in flight
        wait_for("the engine host at work", lambda: cpu_ticks(engine) > start + 10, 60.0,
                 server.output)
        assert caller.is_alive(), "the chain was solved before the signal could be sent"
        os.killpg(server.pid, signal.SIGTERM)
        caller.join(timeout=180)
        code = server.proc.wait(timeout=60)   # type: ignore[union-attr]
    finally:
        server.stop()
    assert "error" not in result, result
    response = result["response"]
    assert response.status_code == 200, response.text[:300]
    assert response.json()["objective"] == objective
    assert code == 0, server.output()
    assert not os.path.exists(f"/proc/{engine}") and not os.path.exists(f"/proc/{worker}")
