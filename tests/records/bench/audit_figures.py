"""Figures for the README (a benchmark, not a test): append throughput of the decision
log with several appending processes, and the time of ``audit export`` and ``audit
check`` per 1,000 records, on SQLite and on PostgreSQL.

    .venv/bin/python tests/records/bench/audit_figures.py
    .venv/bin/python tests/records/bench/audit_figures.py --records 2000 --processes 1 4

The records are real decisions: 10 x 10 assignment problems (made-up travel minutes)
solved by the service's pipeline, stored in full (RFC 8785 problem and answer), as the
service stores them. Throughput is records appended per second of wall time by N
processes appending at once (each append one transaction: lock, record, nodes, head,
commit; SQLite with synchronous=FULL). The check is timed with and without
re-verifying every stored answer by the independent verifier. SQLite runs in a fresh
file under /tmp, PostgreSQL in a fresh schema that is dropped afterwards.
"""

from __future__ import annotations

import argparse
import io
import multiprocessing
import sys
import tempfile
import time
import uuid
from pathlib import Path
from typing import Any

import psycopg
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))   # tests/records

from audit_helpers import new_decision, problem, solved  # noqa: E402

from service.records.audit import check, export  # noqa: E402
from service.records.migrate import upgrade  # noqa: E402
from service.records.signing import Signer  # noqa: E402
from service.records.store import DecisionStore, make_engine  # noqa: E402
from service.settings import load_settings  # noqa: E402
from service.solve.pipeline import recheck_stored  # noqa: E402

DISTINCT = 50          # distinct problems, appended round robin


def _decisions() -> list[Any]:
    out = []
    for seed in range(DISTINCT):
        body = problem(seed, n=10)
        out.append(new_decision(body, solved(body)))
    return out


def _append(url: str, start: int, count: int, barrier: Any) -> None:
    decisions = _decisions()
    store = DecisionStore(make_engine(url))
    store.append(decisions[0])                 # connect before the clock starts
    barrier.wait()
    for i in range(start, start + count - 1):
        store.append(decisions[i % DISTINCT])
    store.engine.dispose()


def _throughput(url: str, records: int, processes: int) -> float:
    spawn = multiprocessing.get_context("spawn")
    barrier = spawn.Barrier(processes + 1)
    share = records // processes
    workers = [spawn.Process(target=_append, args=(url, k * share, share, barrier))
               for k in range(processes)]
    for w in workers:
        w.start()
    barrier.wait()                             # every worker connected and ready
    started = time.perf_counter()
    for w in workers:
        w.join()
    return share * processes / (time.perf_counter() - started)


def _audit_times(url: str) -> tuple[int, float, float, float]:
    store = DecisionStore(make_engine(url))
    signer = Signer(Ed25519PrivateKey.generate())
    started = time.perf_counter()
    out = io.BytesIO()
    count = export(store, signer, out)
    exported = time.perf_counter() - started
    lines = out.getvalue().splitlines()
    settings = load_settings({}, environ={})

    def reverify(p: Any, a: Any) -> tuple[bool, str]:
        return recheck_stored(p, a, settings)

    started = time.perf_counter()
    report = check(lines, None, signer.public_key_b64)
    bare = time.perf_counter() - started
    assert report.ok, report.findings
    started = time.perf_counter()
    report = check(lines, reverify, signer.public_key_b64)
    full = time.perf_counter() - started
    assert report.ok and report.reverified == count, report.findings
    store.engine.dispose()
    return count, exported, bare, full


def _measure(name: str, fresh: Any, records: int, processes: list[int]) -> None:
    for n in processes:
        url = fresh()
        upgrade(make_engine(url))
        rate = _throughput(url, records, n)
        print(f"{name:<11} {n} appending process{'es' if n > 1 else '  '}: "
              f"{rate:7.0f} records/s")
    count, exported, bare, full = _audit_times(url)
    per = 1000 / count
    print(f"{name:<11} per 1,000 records: export {exported * per:5.2f} s, check without "
          f"re-verification {bare * per:5.2f} s, with it {full * per:5.2f} s "
          f"({count} records)")


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--records", type=int, default=2000)
    parser.add_argument("--processes", type=int, nargs="+", default=[1, 4])
    parser.add_argument("--postgres", default="postgresql+psycopg://postgres@127.0.0.1:5432/test")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as folder:
        _measure("SQLite", lambda: f"sqlite:///{folder}/{uuid.uuid4().hex}.sqlite3",
                 args.records, args.processes)
    libpq = args.postgres.replace("postgresql+psycopg://", "postgresql://", 1)
    schemas: list[str] = []

    def fresh_schema() -> str:
        schemas.append(f"bench_{uuid.uuid4().hex[:12]}")
        admin.execute(f'CREATE SCHEMA "{schemas[-1]}"')
        return f"{args.postgres}?options=-csearch_path%3D{schemas[-1]}"

    with psycopg.connect(libpq, autocommit=True) as admin:
        try:
            _measure("PostgreSQL", fresh_schema, args.records, args.processes)
        finally:
            for schema in schemas:
                admin.execute(f'DROP SCHEMA "{schema}" CASCADE')


if __name__ == "__main__":
    main()
