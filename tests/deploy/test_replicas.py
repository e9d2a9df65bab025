"""Replicas: two gunicorn instances on different ports sharing one PostgreSQL database,
under concurrent load, and workers killed with SIGKILL in the middle of appends.

What must hold (issue 11): no acknowledged decision lost, none duplicated, one total
order (log indexes 0..N-1 without gap, in the order of recording times), and the log
checks (``certimatch audit export`` then ``audit check``, which re-verifies every stored
answer). Digests are recomputed with the ``rfc8785`` package, an implementation
independent of service/records/canonical.py. Every wait is bounded; nothing is timed.
"""

from __future__ import annotations

import hashlib
import os
import random
import signal
import threading
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Any

import pytest
import requests
import rfc8785
from postgres_server import postgres_schema
from servers import Gunicorn, wait_for

from service.cli import main
from service.records.migrate import upgrade
from service.records.signing import load_or_create_key
from service.records.store import DecisionStore, make_engine

CLIENTS_PER_SERVER = 4
REQUESTS_PER_CLIENT = 12


def dispatch(seed: int) -> dict[str, Any]:
    """A made-up day of an appliance-repair firm: 4 technicians, 4 tickets, minutes."""
    rng = random.Random(seed)
    return {"sources": [{"id": f"tech-{i}"} for i in range(4)],
            "sinks": [{"id": f"ticket-{seed}-{j}"} for j in range(4)],
            "costs": [[rng.randint(5, 90) for _ in range(4)] for _ in range(4)]}


def _sha(value: Any) -> str:
    return hashlib.sha256(rfc8785.dumps(value)).hexdigest()


@pytest.fixture
def shared(tmp_path: Path) -> Iterator[dict[str, str]]:
    """One PostgreSQL schema (migrated) and one signing key, as replicas share them."""
    with postgres_schema("replicas") as url:
        engine = make_engine(url)
        upgrade(engine)
        engine.dispose()
        load_or_create_key(None, tmp_path / "keys")
        yield {"CERTIMATCH_DATABASE_URL": url,
               "CERTIMATCH_SIGNING_KEY_FILE": str(tmp_path / "keys" / "signing-key.pem")}


class Client:
    """Posts distinct problems; keeps every 200's problem and answer by its decision id."""

    def __init__(self) -> None:
        self.answers: dict[str, tuple[dict[str, Any], dict[str, Any]]] = {}
        self.failures: list[str] = []
        self._seed = 0
        self._lock = threading.Lock()

    def run(self, base: str, count: int, stop: threading.Event | None = None) -> None:
        with requests.Session() as session:
            for _ in range(count):
                if stop is not None and stop.is_set():
                    return
                with self._lock:
                    self._seed += 1
                    body = dispatch(self._seed)
                try:
                    r = session.post(base + "/v1/solve", json=body, timeout=60)
                except requests.RequestException as e:
                    with self._lock:
                        self.failures.append(repr(e))
                    continue
                with self._lock:
                    if r.status_code == 200:
                        answer = r.json()
                        self.answers[answer["decision"]["id"]] = (body, answer)
                    else:
                        self.failures.append(f"{r.status_code}: {r.text[:300]}")


def _one_order(store: DecisionStore, client: Client) -> None:
    """Every acknowledged decision is in the log as it was told, once; one gap-free
    order; the times agree with it."""
    log = []
    after = None
    while True:
        page = store.page(after=after, limit=1000)
        if not page:
            break
        log += page
        after = page[-1].id
    assert [d.log_index for d in log] == list(range(len(log)))          # no gap, no repeat
    assert len({d.id for d in log}) == len(log)
    assert [d.recorded_at for d in log] == sorted(d.recorded_at for d in log)
    stored = {d.id: d.to_dict() for d in log}
    for decision_id, (body, answer) in client.answers.items():
        told = answer["decision"]
        assert stored.get(decision_id) == told, decision_id            # none lost or changed
        assert told["input_sha256"] == _sha(body)
        assert told["answer_sha256"] == _sha({k: v for k, v in answer.items()
                                              if k != "decision"})


def _audit(env: dict[str, str], tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
           capsys: pytest.CaptureFixture[str]) -> str:
    for name, value in env.items():
        monkeypatch.setenv(name, value)
    export = tmp_path / "decisions.jsonl"
    assert main(["audit", "export", "-o", str(export)]) == 0, capsys.readouterr().err
    code = main(["audit", "check", str(export)])
    out = capsys.readouterr().out
    assert code == 0, out
    return out


def test_two_replicas_share_one_log(shared: dict[str, str], tmp_path: Path,
                                    monkeypatch: pytest.MonkeyPatch, capsys) -> None:
    client = Client()
    first = Gunicorn(tmp_path / "a", workers=2, env=shared, log_name="a.log")
    second = Gunicorn(tmp_path / "b", workers=2, env=shared, log_name="b.log")
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    with first, second:
        assert first.port != second.port
        with ThreadPoolExecutor(2 * CLIENTS_PER_SERVER) as pool:
            done = [pool.submit(client.run, server.base, REQUESTS_PER_CLIENT)
                    for server in (first, second) for _ in range(CLIENTS_PER_SERVER)]
            # An export taken while both replicas append: its checkpoint comes first, so
            # it holds a whole prefix of the log, which checks.
            wait_for("the first appends", lambda: len(client.answers) >= 10, 120)
            during = _audit(shared, tmp_path, monkeypatch, capsys)
            for future in done:
                future.result(timeout=600)
    assert client.failures == []
    total = 2 * CLIENTS_PER_SERVER * REQUESTS_PER_CLIENT
    assert during.startswith("audit check: VALID (")
    assert len(client.answers) == total
    engine = make_engine(shared["CERTIMATCH_DATABASE_URL"])
    store = DecisionStore(engine)
    assert store.head()[0] == total
    _one_order(store, client)
    engine.dispose()
    out = _audit(shared, tmp_path, monkeypatch, capsys)
    assert f"audit check: VALID ({total} records, {total} answers re-verified" in out


@pytest.mark.parametrize("backend", ["sqlite", "postgresql"])
def test_workers_killed_mid_append_leave_a_log_that_checks(
        backend: str, shared: dict[str, str], tmp_path: Path,
        monkeypatch: pytest.MonkeyPatch, capsys) -> None:
    env = dict(shared)
    if backend == "sqlite":
        env["CERTIMATCH_DATABASE_URL"] = f"sqlite:///{tmp_path / 'decisions.sqlite3'}"
        engine = make_engine(env["CERTIMATCH_DATABASE_URL"])
        upgrade(engine)
        engine.dispose()
    client = Client()
    stop = threading.Event()
    rng = random.Random(11)
    (tmp_path / "s").mkdir()
    server = Gunicorn(tmp_path / "s", workers=2, env=env)
    with server:
        with ThreadPoolExecutor(CLIENTS_PER_SERVER) as pool:
            running = [pool.submit(client.run, server.base, 10_000, stop)
                       for _ in range(CLIENTS_PER_SERVER)]
            for _ in range(3):
                seen = len(client.answers)
                # appends are flowing: kill a worker at a random moment among them
                wait_for("appends after the last kill", lambda s=seen: len(client.answers)
                         >= s + 5, 120, server.output)
                victim = rng.choice(sorted(server.worker_pids()))
                os.kill(victim, signal.SIGKILL)
                wait_for("the killed worker replaced", lambda v=victim:
                         v not in server.worker_pids()
                         and len(server.worker_pids()) == server.workers, 60, server.output)
            stop.set()
            for future in running:
                future.result(timeout=600)
    # At most the requests in flight on a killed worker failed (no answer at all).
    assert len(client.failures) <= 3 * 1, client.failures
    assert all("Connection" in f or "RemoteDisconnected" in f for f in client.failures)
    # A restart on the same database goes on at the next index.
    restarted = Gunicorn(tmp_path / "s", workers=2, env=env, log_name="again.log")
    with restarted:
        client.run(restarted.base, 3)
    engine = make_engine(env["CERTIMATCH_DATABASE_URL"])
    store = DecisionStore(engine)
    size = store.head()[0]
    assert len(client.answers) <= size <= len(client.answers) + len(client.failures)
    _one_order(store, client)
    engine.dispose()
    out = _audit(env, tmp_path, monkeypatch, capsys)
    assert f"audit check: VALID ({size} records, {size} answers re-verified" in out
