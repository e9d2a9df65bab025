"""Override prices against the solve: what ``"prices": true`` adds (issue 14's speed bar).

Run by hand, never by pytest (conftest.py). In this process, through the same pipeline
as /v1/solve (schema, network, engine, certificate, answer, self-check): each instance is
solved without and with prices, ``--repeats`` times each, alternating, and the medians of
the whole call and of its phases are printed as Markdown. The machine is shared: read the
figures as one run's, not as a property of the code.

    .venv/bin/python tests/perf/prices.py [--repeats 5]
"""

from __future__ import annotations

import argparse
import datetime
import json
import os
import statistics
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from service.settings import Settings  # noqa: E402
from service.solve.pipeline import solve_body  # noqa: E402
from tests.perf import generators as gen  # noqa: E402

INSTANCES = {
    "A dense 300 x 300 assignment": lambda: gen.dense_assignment(300, seed=1),
    "D ticket routing, 300 agents x 5,000 tickets (150k arcs)":
        lambda: gen.ticket_routing(5000, 300, seed=4),
}


def _once(req: dict, prices: bool) -> tuple[float, dict[str, float], int]:
    timings: dict[str, float] = {}
    start = time.perf_counter()
    answer = solve_body({**req, "prices": prices}, Settings(), timings=timings)
    total = time.perf_counter() - start
    size = len(json.dumps(answer, separators=(",", ":"))) if prices else 0
    return total, timings, size


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args()
    now = datetime.datetime.now(datetime.UTC).strftime("%Y-%m-%d %H:%M UTC")
    print(f"Override prices vs the solve, {now}, load average "
          f"{' '.join(f'{x:.1f}' for x in os.getloadavg())}, {args.repeats} rounds, "
          "medians in ms (in process, self-check included)\n")
    print("| instance | solve | solve + prices | prices phase | self-check | ratio | "
          "answer size with prices |")
    print("|---|---|---|---|---|---|---|")
    for name, make in INSTANCES.items():
        req = make()
        _once(req, True)                     # warm: imports, first-touch memory
        plain, priced, phase, check, size = [], [], [], [], 0
        for _ in range(args.repeats):
            plain.append(_once(req, False)[0])
            total, timings, size = _once(req, True)
            priced.append(total)
            phase.append(timings["prices"])
            check.append(timings["self_verify"])
        a, b = statistics.median(plain), statistics.median(priced)
        print(f"| {name} | {a * 1e3:.0f} | {b * 1e3:.0f} | "
              f"{statistics.median(phase) * 1e3:.0f} | {statistics.median(check) * 1e3:.0f} "
              f"| {b / a:.1f} | {size / 1e6:.1f} MB |", flush=True)


if __name__ == "__main__":
    main()
