"""What re-planning costs: the phases of a solve with and without pins, a previous plan and
load costs, in process (every answer verified by the self-check).

``python tests/perf/replan.py`` prints one line per solve: the realistic day
(service/demo/repair_day.json), the day with its first technician sick, re-planned without
and with the morning's answer as ``previous`` (and with load costs on every technician),
and a 1000 x 1000 assignment re-planned with its own answer as ``previous`` and one pin.
Figures depend on the machine and its load; README "Performance" quotes one run.
"""

from __future__ import annotations

import copy
import json
import time
from pathlib import Path
from typing import Any

import numpy as np

from service.settings import Settings
from service.solve.pipeline import solve_body

DAY = Path(__file__).resolve().parents[2] / "service" / "demo" / "repair_day.json"


def _run(body: dict[str, Any], label: str) -> dict[str, Any]:
    phases: dict[str, float] = {}
    start = time.perf_counter()
    answer = solve_body(copy.deepcopy(body), Settings(), phases)
    took = time.perf_counter() - start
    print(f"{label}: {took:.2f} s; " + ", ".join(f"{k} {v:.2f}" for k, v in phases.items()))
    return answer


def main() -> None:
    day = json.loads(DAY.read_text())
    morning = _run(day, "repair day")
    sick = copy.deepcopy(day)
    sick["sources"][0]["supply"] = 0
    _run(sick, "one technician sick, no previous")
    previous = {"allocation": morning["allocation"], "change_penalty": 20}
    _run({**sick, "previous": previous}, "one technician sick, previous")
    for source in sick["sources"]:
        source["load_costs"] = [0, 0, 0, 0, 0, 5, 10, 20]
    _run({**sick, "previous": previous}, "one technician sick, previous and load costs")
    n = 1000
    costs = np.random.default_rng(1).integers(1, 1000, (n, n)).tolist()
    big = {"sources": [{"id": f"s{i}"} for i in range(n)],
           "sinks": [{"id": f"t{j}"} for j in range(n)], "costs": costs}
    first = _run(big, f"{n} x {n} assignment")
    _run({**big, "previous": {"allocation": first["allocation"], "change_penalty": 50},
          "fixed": [{"from": "s0", "to": "t1", "flow": 1}]},
         f"{n} x {n} re-planned with previous and one pin")


if __name__ == "__main__":
    main()
