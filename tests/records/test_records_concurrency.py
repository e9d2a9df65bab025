"""Appends from several processes, and appenders killed mid-write, on both backends: one
gap-free total order, whole records only, and a log that still checks."""

from __future__ import annotations

import io
import multiprocessing
import os
import random
import signal
import time

from records_helpers import append_and_hang, append_forever, append_many, append_with_key

from service.records.audit import check, export
from service.records.signing import Signer
from service.records.store import DecisionStore

PROCESSES, APPENDS = 4, 50
_spawn = multiprocessing.get_context("spawn")


def _audit(store: DecisionStore, signer: Signer) -> None:
    out = io.BytesIO()
    export(store, signer, out)
    report = check(out.getvalue().splitlines(), public_key=signer.public_key_b64)
    assert report.ok, report.findings
    assert report.records == store.head()[0]


def test_concurrent_appends_form_one_gap_free_order(store: DecisionStore,
                                                    database_url: str, signer: Signer) -> None:
    with _spawn.Pool(PROCESSES) as pool:
        results = pool.starmap(append_many, [(database_url, APPENDS, f"worker-{w}")
                                             for w in range(PROCESSES)])
    total = PROCESSES * APPENDS
    indexes = sorted(i for done in results for i, _ in done)
    assert indexes == list(range(total))                     # no gap, no duplicate
    assert len({d for done in results for _, d in done}) == total
    for done in results:                                     # each worker's order kept
        assert [i for i, _ in done] == sorted(i for i, _ in done)
    log = store.page(limit=1000)
    assert [d.log_index for d in log] == list(range(total))
    assert [d.recorded_at for d in log] == sorted(d.recorded_at for d in log)
    assert {d.id: d.log_index for d in log} == {d: i for done in results for i, d in done}
    _audit(store, signer)


def test_one_key_sent_by_several_processes_at_once_records_once(
        store: DecisionStore, database_url: str) -> None:
    with _spawn.Pool(PROCESSES) as pool:
        results = pool.starmap(append_with_key, [(database_url, "same-key")] * PROCESSES)
    assert len({(i, r) for i, r, _ in results}) == 1          # one id, the same bytes
    assert sorted(replayed for _, _, replayed in results) == [False] + [True] * (PROCESSES - 1)
    assert store.head()[0] == 1


def test_an_appender_killed_inside_its_transaction_leaves_nothing(
        store: DecisionStore, database_url: str, signer: Signer) -> None:
    for i in range(3):
        store.append(__import__("records_helpers").decision_input(i))
    before = store.head()
    ready = _spawn.Event()
    child = _spawn.Process(target=append_and_hang, args=(database_url, ready, "doomed"))
    child.start()
    assert ready.wait(60), "the child never reached the middle of its append"
    os.kill(child.pid, signal.SIGKILL)
    child.join()
    assert child.exitcode == -signal.SIGKILL
    assert store.head() == before                            # nothing of it remains
    assert store.page(caller="doomed") == []
    # the lock died with the process: appends go on at the next index
    after = store.append(__import__("records_helpers").decision_input(7))
    assert after.decision.log_index == before[0]
    _audit(store, signer)


def test_appenders_killed_at_random_moments_leave_whole_records(
        store: DecisionStore, database_url: str, signer: Signer) -> None:
    rng = random.Random(20261203)
    for round_ in range(3):
        started = [_spawn.Event() for _ in range(2)]
        children = [_spawn.Process(target=append_forever,
                                   args=(database_url, f"r{round_}-{k}", started[k]))
                    for k in range(2)]
        for child in children:
            child.start()
        for event in started:
            assert event.wait(60), "a child never appended"
        time.sleep(rng.uniform(0.05, 0.5))                  # then die mid-stream
        for child in children:
            os.kill(child.pid, signal.SIGKILL)
            child.join()
    size = store.head()[0]
    assert size >= 6
    assert [d.log_index for d in store.page(limit=1000)][:size] == list(range(min(size, 1000)))
    _audit(store, signer)
