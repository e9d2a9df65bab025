"""What the duplicate-key check adds to reading a large body (a measurement, not a test).

    .venv/bin/python tests/http/cost_of_duplicate_check.py [--runs N]

Builds the benchmark's 4000 x 4000 matrix (family A) and 600,000-arc (family C) bodies
with tests/perf/generators.py, and times, in CPU seconds of this process (less disturbed
than wall time on a shared machine), ``orjson.loads`` of the bytes against
``duplicate_keys`` on the bytes and the parsed body: for the body as generated, with a
``:`` in every id (the second count), and with one key repeated in the last record (the
exact pass that names it). Prints the fastest and the median of ``--runs`` runs.
"""

from __future__ import annotations

import argparse
import gc
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import orjson

ROOT = Path(__file__).resolve().parents[2]
sys.path[:0] = [str(ROOT), str(ROOT / "tests" / "perf")]

from generators import dense_assignment, sparse_assignment  # noqa: E402

from service.http.duplicates import duplicate_keys  # noqa: E402


def _times(fn: Callable[[], Any], runs: int) -> tuple[float, float]:
    samples = []
    for _ in range(runs):
        start = time.process_time()
        fn()
        samples.append(time.process_time() - start)
    samples.sort()
    return samples[0] * 1000, samples[len(samples) // 2] * 1000


def _variants(raw: bytes, key: bytes) -> dict[str, bytes]:
    colon_ids = (raw.replace(b'"w', b'"w:').replace(b'"j', b'"j:')
                 .replace(b'"r', b'"r:').replace(b'"c', b'"c:').replace(b'"c:ost"', b'"cost"')
                 .replace(b'"c:osts"', b'"costs"'))
    # the last '}' closes the whole body, the one before it the last record of a list
    closing = raw.rindex(b"}", 0, len(raw) - 1)
    repeated = raw[:closing] + b',"' + key + b'":1' + raw[closing:]
    return {"as generated": raw, "':' in every id": colon_ids, "one key repeated": repeated}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=7)
    args = parser.parse_args()
    gc.disable()          # as while a request is served (service/solve/pipeline.py)
    bodies = {"A 4000 x 4000 matrix": (orjson.dumps(dense_assignment(4000)), b"id"),
              "C 600,000 arcs": (orjson.dumps(sparse_assignment(20_000)), b"cost")}
    print(f"{'body':<22} {'variant':<18} {'MB':>6} {'loads ms':>16} {'check ms':>16} "
          f"{'check/loads':>11}")
    for name, (base, key) in bodies.items():
        for variant, raw in _variants(base, key).items():
            doc = orjson.loads(raw)
            found = duplicate_keys(raw, doc)
            assert bool(found) == (variant == "one key repeated"), found
            runs = args.runs if variant == "as generated" else max(3, args.runs // 2)
            loads = _times(lambda raw=raw: orjson.loads(raw), runs)
            check = _times(lambda raw=raw, doc=doc: duplicate_keys(raw, doc), runs)
            print(f"{name:<22} {variant:<18} {len(raw) / 1e6:6.1f} "
                  f"{loads[0]:7.0f} /{loads[1]:7.0f} {check[0]:7.1f} /{check[1]:7.1f} "
                  f"{check[0] / loads[0]:10.1%}")
            del doc
    print("(fastest / median of the runs, CPU time)")


if __name__ == "__main__":
    main()
