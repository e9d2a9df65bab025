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
