"""Helpers shared by the decision-store tests (imported by name: tests/records is on the
path as pytest runs them)."""

from __future__ import annotations

import hashlib
from datetime import UTC, datetime, timedelta

from service.records.model import NewDecision


class Clock:
    """A settable clock, so that retention and expiry can be tested without waiting."""

    def __init__(self) -> None:
        self.now = datetime(2026, 12, 1, 9, 30, tzinfo=UTC)

    def __call__(self) -> datetime:
        self.now += timedelta(microseconds=1)      # strictly increasing, as time is
        return self.now

    def advance(self, **delta: float) -> None:
        self.now += timedelta(**delta)


def sha(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def decision_input(i: int, caller: str | None = "alice", full: bool = True) -> NewDecision:
    """A small, made-up decision: canonical JSON bodies and their true digests."""
    problem = b'{"sources":[{"id":"tech-%d","supply":2}]}' % i
    answer = b'{"objective":%d,"status":"optimal"}' % (3 * i)
    return NewDecision(caller, sha(problem), sha(answer), "0.1.0",
                       problem if full else None, answer if full else None)


def append_many(url: str, count: int, caller: str) -> list[tuple[int, str]]:
    """Run in a child process: ``count`` appends as ``caller``; (log_index, id) of each."""
    from service.records.store import DecisionStore, make_engine

    engine = make_engine(url)
    store = DecisionStore(engine)
    done = []
    for i in range(count):
        d = store.append(decision_input(i, caller=caller)).decision
        assert d.log_index is not None and d.id is not None
        done.append((d.log_index, d.id))
    engine.dispose()
    return done


def append_forever(url: str, caller: str, started) -> None:  # type: ignore[no-untyped-def]
    """Run in a child process until it is killed: appends without end, setting
    ``started`` after the first."""
    from service.records.store import DecisionStore, make_engine

    store = DecisionStore(make_engine(url))
    i = 0
    while True:
        store.append(decision_input(i, caller=caller))
        started.set()
        i += 1


def append_and_hang(url: str, ready, marker: str) -> None:  # type: ignore[no-untyped-def]
    """Run in a child process: start an append and stop inside its transaction (after the
    record, its nodes and the new head are written, before the commit) until killed."""
    import time

    from service.records.store import DecisionStore, make_engine

    store = DecisionStore(make_engine(url))

    def hang(decision):  # type: ignore[no-untyped-def]
        ready.set()
        time.sleep(3600)
        return b""

    store.append(decision_input(99, caller=marker), idempotency_key=marker, render=hang)


def append_with_key(url: str, key: str) -> tuple[str, bytes, bool]:
    """Run in a child process: one append under an Idempotency-Key; (id, response,
    replayed)."""
    import json

    from service.records.store import DecisionStore, make_engine

    store = DecisionStore(make_engine(url))
    done = store.append(decision_input(5), idempotency_key=key,
                        render=lambda d: json.dumps(d.to_dict()).encode())
    assert done.decision.id is not None and done.response is not None
    return done.decision.id, done.response, done.replayed
