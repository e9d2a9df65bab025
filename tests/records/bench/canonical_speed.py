"""Speed of RFC 8785 canonicalisation on a 600,000-arc body (a benchmark, not a test).

    .venv/bin/python tests/records/bench/canonical_speed.py [--arcs 600000] [--reference]

Bodies from the benchmark's family D generator (tests/perf/generators.py), in four
variants: integer costs (as generated), costs divided by 4 (fractional floats), costs as
integral floats (3.0: what a Python client sending floats writes), and every capacity
null. The collector is off, as in the service's request scope. --reference also times the
plain walk and the rfc8785 package on the first variant.
"""

from __future__ import annotations

import argparse
import copy
import gc
import statistics
import sys
import time
from pathlib import Path

import orjson
import rfc8785

sys.path.insert(0, str(Path(__file__).resolve().parents[3]))
from service.records.canonical import canonical_json, reference_json  # noqa: E402
from tests.perf.generators import ticket_routing_scaled  # noqa: E402


def _ms(fn, *args, repeat: int = 5) -> float:  # type: ignore[no-untyped-def]
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        fn(*args)
        times.append(time.perf_counter() - start)
    return statistics.median(times) * 1000


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--arcs", type=int, default=600_000)
    parser.add_argument("--reference", action="store_true")
    args = parser.parse_args()
    gc.disable()
    base = ticket_routing_scaled(args.arcs)
    variants = {"integer costs": base}
    for name, change in (("quarter costs", lambda a: a["cost"] / 4),
                         ("integral float costs", lambda a: float(a["cost"]))):
        body = copy.deepcopy(base)
        for arc in body["arcs"]:
            arc["cost"] = change(arc)
        variants[name] = body
    nulls = copy.deepcopy(base)
    for arc in nulls["arcs"]:
        arc["capacity"] = None
    variants["null capacities"] = nulls
    print(f"{len(base['arcs']):,} arcs, {len(orjson.dumps(base)) / 1e6:.1f} MB as JSON")
    for name, body in variants.items():
        floor = _ms(orjson.dumps, body, orjson.OPT_SORT_KEYS)
        parsed = _ms(lambda b: canonical_json(b, parsed=True), body)
        print(f"{name:<22} canonical_json {_ms(canonical_json, body):7.0f} ms, parsed=True "
              f"{parsed:5.0f} ms   (orjson.dumps with sorted keys alone: {floor:5.0f} ms)")
    if args.reference:
        print(f"{'integer costs':<22} reference_json {_ms(reference_json, base, repeat=1):7.0f} ms"
              f"   rfc8785.dumps {_ms(rfc8785.dumps, base, repeat=1):7.0f} ms")


if __name__ == "__main__":
    main()
