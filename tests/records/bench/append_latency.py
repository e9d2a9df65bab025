"""Latency of one append to the decision log (a benchmark, not a test).

    .venv/bin/python tests/records/bench/append_latency.py              # SQLite and PostgreSQL
    .venv/bin/python tests/records/bench/append_latency.py --count 1000 --postgres URL

Each append is a whole transaction: lock the log head, insert the record (a ~30 kB
problem and ~10 kB answer in full mode), its Merkle nodes and the new head, commit (SQLite
with synchronous=FULL: one fsync of the WAL per append). SQLite runs in a fresh file under
/tmp; PostgreSQL in a fresh schema, dropped afterwards.
"""

from __future__ import annotations

import argparse
import hashlib
import statistics
import tempfile
import time
import uuid

import psycopg

from service.records.migrate import upgrade
from service.records.model import NewDecision
from service.records.store import DecisionStore, make_engine

PROBLEM = b'{"arcs":[' + b",".join(b'{"cost":%d,"from":"a%d","to":"t%d"}' % (i % 97, i % 50, i)
                                   for i in range(1000)) + b"]}"
ANSWER = b'{"allocation":[' + b",".join(b'{"flow":1,"from":"a%d","to":"t%d"}' % (i % 50, i)
                                        for i in range(300)) + b"]}"


def _run(url: str, count: int, full: bool) -> list[float]:
    engine = make_engine(url)
    upgrade(engine)
    store = DecisionStore(engine)
    new = NewDecision("bench", hashlib.sha256(PROBLEM).hexdigest(),
                      hashlib.sha256(ANSWER).hexdigest(), "0.1.0",
                      PROBLEM if full else None, ANSWER if full else None)
    for _ in range(20):                                    # warm the pool and the caches
        store.append(new)
    times = []
    for _ in range(count):
        start = time.perf_counter()
        store.append(new)
        times.append(time.perf_counter() - start)
    engine.dispose()
    return times


def _report(name: str, times: list[float]) -> None:
    ms = sorted(t * 1000 for t in times)
    p99 = ms[min(len(ms) - 1, int(round(0.99 * len(ms))) - 1)]
    print(f"{name:<32} n={len(ms)}  median {statistics.median(ms):6.2f} ms  "
          f"p99 {p99:6.2f} ms  max {ms[-1]:6.2f} ms")


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--count", type=int, default=1000)
    parser.add_argument("--postgres", default="postgresql+psycopg://postgres@127.0.0.1:5432/test")
    args = parser.parse_args()
    print(f"problem {len(PROBLEM)} bytes, answer {len(ANSWER)} bytes")
    with tempfile.TemporaryDirectory() as folder:
        for full in (True, False):
            url = f"sqlite:///{folder}/{uuid.uuid4().hex}.sqlite3"
            _report(f"SQLite {'full' if full else 'digest'}", _run(url, args.count, full))
    schema = f"bench_{uuid.uuid4().hex[:12]}"
    libpq = args.postgres.replace("postgresql+psycopg://", "postgresql://", 1)
    with psycopg.connect(libpq, autocommit=True) as admin:
        admin.execute(f'CREATE SCHEMA "{schema}"')
        try:
            for full in (True, False):
                admin.execute(f'DROP SCHEMA "{schema}" CASCADE')
                admin.execute(f'CREATE SCHEMA "{schema}"')
                url = f"{args.postgres}?options=-csearch_path%3D{schema}"
                _report(f"PostgreSQL {'full' if full else 'digest'}",
                        _run(url, args.count, full))
        finally:
            admin.execute(f'DROP SCHEMA "{schema}" CASCADE')


if __name__ == "__main__":
    main()
