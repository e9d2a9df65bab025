"""What each wire form costs before the engine: parse, repeated keys, checks, freeing.

    .venv/bin/python tests/perf/forms.py [--arcs 1000000] [--repeats 3]

In process, on the D family's body (generators.ticket_routing_scaled) sent as records and
as columns: ``orjson.loads``, the repeated-key check (service.http.duplicates), the schema's
checks (``ProblemSchema().load``), ``build_network``, and freeing the parsed body; then the
other way the service could have checked the columnar form (turn it into records, check
those), which README "Wire forms" compares. The collector is off, as during a request.
Medians of ``--repeats`` rounds, each form once per round, in seconds.
"""

from __future__ import annotations

import argparse
import gc
import statistics
import sys
import time
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
for _p in (str(HERE.parents[1]), str(HERE.parent), str(HERE)):
    if _p not in sys.path:
        sys.path.insert(0, _p)

import generators as gen  # noqa: E402
import orjson  # noqa: E402

from schemas import ProblemSchema  # noqa: E402
from schemas.columns import as_columns, as_records  # noqa: E402
from schemas.problem import TABLES  # noqa: E402
from service.http.duplicates import duplicate_keys  # noqa: E402
from service.network.build import build_network  # noqa: E402
from service.settings import Settings  # noqa: E402


def _tables(req: dict[str, Any], convert: Any) -> dict[str, Any]:
    return {k: convert(v) if k in TABLES else v for k, v in req.items()}


def one_round(bodies: dict[str, bytes], schema: ProblemSchema) -> dict[str, float]:
    out: dict[str, float] = {}
    for name, raw in bodies.items():
        t0 = time.perf_counter()
        doc = orjson.loads(raw)
        t1 = time.perf_counter()
        duplicate_keys(raw, doc)
        t2 = time.perf_counter()
        data = schema.load(doc)
        t3 = time.perf_counter()
        build_network(data, Settings())
        t4 = time.perf_counter()
        if name == "columnar":
            records = _tables(doc, as_records)
            t5 = time.perf_counter()
            schema.load(records)
            out["columnar: into records"] = t5 - t4
            out["columnar: records checked"] = time.perf_counter() - t5
            del records
        t6 = time.perf_counter()
        del doc, data
        out.update({f"{name}: parse": t1 - t0, f"{name}: repeated keys": t2 - t1,
                    f"{name}: checks": t3 - t2, f"{name}: build": t4 - t3,
                    f"{name}: free": time.perf_counter() - t6})
    return out


def main() -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--arcs", type=int, default=1_000_000)
    p.add_argument("--repeats", type=int, default=3)
    args = p.parse_args()
    req = gen.ticket_routing_scaled(args.arcs, seed=5)
    bodies = {"record": orjson.dumps(req), "columnar": orjson.dumps(_tables(req, as_columns))}
    del req
    schema = ProblemSchema()
    gc.disable()
    rounds = [one_round(bodies, schema) for _ in range(args.repeats)]
    print(f"D {args.arcs:,} arcs; bodies: " + ", ".join(
        f"{k} {len(v) / 1e6:.1f} MB" for k, v in bodies.items()))
    for key in rounds[0]:
        print(f"{key:28s} {statistics.median(r[key] for r in rounds):.3f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
