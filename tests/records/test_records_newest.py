"""The audit page's read: decisions newest first, by caller and date, with their answers,
on both backends. The expected rows are computed here from what was appended (a plain
list filtered and reversed in the test)."""

from __future__ import annotations

import pytest
from records_helpers import Clock, decision_input

from service.records.model import rfc3339
from service.records.store import DecisionStore


def test_newest_first_with_filters(store: DecisionStore, clock: Clock) -> None:
    made = []
    for i in range(9):
        clock.advance(days=1)
        full = i != 4
        made.append((store.append(decision_input(i, caller="alice" if i % 3 else "bob",
                                                 full=full)).decision,
                     decision_input(i, full=full).answer))
    expected = list(reversed(made))
    assert store.newest() == expected
    assert store.newest(limit=3) == expected[:3]
    assert store.newest(before=5, limit=2) == [made[4], made[3]]
    assert store.newest(caller="bob") == [m for m in expected if m[0].caller == "bob"]
    since, until = made[2][0].recorded_at, made[6][0].recorded_at
    assert store.newest(since=since, until=until) == [
        m for m in expected if since <= m[0].recorded_at < until]
    assert store.newest(caller="alice", since=since, until=until) == [made[5], made[4],
                                                                      made[2]]
    assert made[4][1] is None                       # digest mode: no answer kept
    clock.advance(days=1)
    assert store.newest(since=rfc3339(clock.now)) == []
    with pytest.raises(ValueError, match="limit must be"):
        store.newest(limit=0)
