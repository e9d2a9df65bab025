"""What recording a decision adds to POST /v1/solve (a benchmark, not a test).

    .venv/bin/python tests/records/bench/solve_overhead.py
    .venv/bin/python tests/records/bench/solve_overhead.py --count 40 --postgres URL

The same request through the app's test client with CERTIMATCH_RECORD off, digest and
full, on SQLite (a fresh data folder under /tmp) and on PostgreSQL (a fresh schema,
dropped afterwards); prints the median time of a request and what each mode adds to off.
Two bodies: the README's 2 x 3 example and a 300 x 300 assignment (seeded costs).
"""

from __future__ import annotations

import argparse
import json
import os
import random
import statistics
import tempfile
import time
import uuid

import psycopg

from service.app import create_app

SMALL = {"sources": [{"id": "north", "supply": 2}, {"id": "south", "supply": 1}],
         "sinks": [{"id": "fridge"}, {"id": "oven"}, {"id": "washer", "penalty": 50}],
         "costs": [[20, 35, 60], [30, 25, None]]}


def _square(n: int) -> dict:
    rng = random.Random(7)
    return {"sources": [{"id": f"tech-{i}"} for i in range(n)],
            "sinks": [{"id": f"ticket-{j}"} for j in range(n)],
            "costs": [[rng.randint(1, 500) for _ in range(n)] for _ in range(n)]}


def _median_ms(app, body: bytes, count: int) -> float:
    client = app.test_client()
    for _ in range(3):                                     # warm caches and the pool
        client.post("/v1/solve", data=body, content_type="application/json", buffered=True)
    times = []
    for _ in range(count):
        start = time.perf_counter()
        response = client.post("/v1/solve", data=body, content_type="application/json",
                               buffered=True)
        times.append(time.perf_counter() - start)
        assert response.status_code == 200, response.data[:200]
    return statistics.median(times) * 1000


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--count", type=int, default=30)
    parser.add_argument("--postgres", default="postgresql+psycopg://postgres@127.0.0.1:5432/test")
    args = parser.parse_args()
    for name in [n for n in os.environ if n.startswith("CERTIMATCH_")]:
        del os.environ[name]
    schema = f"bench_{uuid.uuid4().hex[:10]}"
    libpq = args.postgres.replace("postgresql+psycopg://", "postgresql://", 1)
    with psycopg.connect(libpq, autocommit=True) as admin:
        admin.execute(f'CREATE SCHEMA "{schema}"')
        try:
            backends = {"sqlite": None,
                        "postgresql": f"{args.postgres}?options=-csearch_path%3D{schema}"}
            for label, problem, count in (("2 x 3", SMALL, args.count),
                                          ("300 x 300", _square(300), max(5, args.count // 5))):
                body = json.dumps(problem).encode()
                for backend, url in backends.items():
                    with tempfile.TemporaryDirectory() as data:
                        config = {"DATA_DIR": data, **({"DATABASE_URL": url} if url else {})}
                        ms = {mode: _median_ms(create_app({**config, "RECORD": mode}), body,
                                               count)
                              for mode in ("off", "digest", "full")}
                    print(f"{label:>9} {backend:<10} off {ms['off']:7.1f} ms   "
                          f"digest +{ms['digest'] - ms['off']:5.1f} ms   "
                          f"full +{ms['full'] - ms['off']:5.1f} ms   (median of {count})")
        finally:
            admin.execute(f'DROP SCHEMA "{schema}" CASCADE')


if __name__ == "__main__":
    main()
