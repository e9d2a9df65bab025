"""A realistic day for an invented appliance-repair firm, and the figures README quotes.

``python tests/perf/repair_day.py --write`` (re)writes ``service/demo/repair_day.json``: 40
technicians with 7 or 8 slots each, 300 tickets (260 hard, 40 routine visits with a
penalty), travel minutes from each technician's base to the ticket's address, ``null``
where the technician lacks the appliance skill; every name and address is invented.

Without ``--write`` it solves the day in process and prints what README "A realistic day"
shows: the longest trip and the total under ``min`` and under ``bottleneck``, and how many
assignments of the other technicians a one-technician-sick re-plan moves.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path
from typing import Any

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
DAY = ROOT / "service" / "demo" / "repair_day.json"

SKILLS = ("fridge", "washer", "dryer", "oven", "dishwasher", "boiler")
CREWS = ("alder", "basalt", "cedar", "dolomite", "elm", "flint", "garnet", "hazel", "iris",
         "jasper", "kestrel", "larch", "marble", "nettle", "onyx", "poplar", "quartz", "rowan",
         "sorrel", "tamarisk", "umber", "vetch", "willow", "yarrow", "zircon", "aspen",
         "birch", "cobalt", "dune", "ember", "fern", "granite", "heath", "ivy", "juniper",
         "kelp", "linden", "moss", "nimbus", "opal")
STREETS = ("Kettle Row", "Lantern Way", "Millrace Lane", "Quillon Street", "Tansy Walk",
           "Orrery Road", "Brackwater Close", "Spindle Court", "Gannet Hill", "Pewter Yard")


def make_day(seed: int = 2026) -> dict[str, Any]:
    rng = np.random.default_rng(seed)
    n_tech, n_tkt = 40, 300
    base = rng.uniform(0, 40, size=(n_tech, 2))              # km, a 40 x 40 km city
    where = rng.uniform(0, 40, size=(n_tkt, 2))
    skills = [sorted(rng.choice(SKILLS, size=int(rng.integers(2, 5)), replace=False).tolist())
              for _ in range(n_tech)]
    need = rng.choice(SKILLS, size=n_tkt, p=[0.24, 0.22, 0.12, 0.16, 0.18, 0.08])
    km = np.abs(base[:, None, :] - where[None, :, :]).sum(axis=2)   # street grid
    minutes = np.rint(6 + 1.7 * km).astype(int)
    sources = [{"id": f"tech-{name}", "supply": int(rng.integers(7, 9)),
                "data": {"crew": name.capitalize(), "skills": skills[i],
                         "van": f"V-{i + 1:02d}"}}
               for i, name in enumerate(CREWS)]
    sinks = []
    for j in range(n_tkt):
        sink: dict[str, Any] = {"id": f"tkt-{4100 + j}-{need[j]}",
                                "data": {"appliance": str(need[j]),
                                         "address": f"{int(rng.integers(1, 240))} "
                                                    f"{STREETS[int(rng.integers(len(STREETS)))]}",
                                         "window": "am" if rng.random() < 0.5 else "pm"}}
        if j % 15 == 7 or j % 15 == 11:                        # 40 routine visits
            sink["penalty"] = int(rng.integers(45, 121))
        sinks.append(sink)
    costs = [[int(minutes[i, j]) if need[j] in skills[i] else None for j in range(n_tkt)]
             for i in range(n_tech)]
    return {"sources": sources, "sinks": sinks, "costs": costs}


def _pairs(answer: dict[str, Any]) -> set[tuple[str, str]]:
    return {(r["from"], r["to"]) for r in answer["allocation"] if r["flow"] > 0}


def _longest(problem: dict[str, Any], answer: dict[str, Any]) -> int:
    return max((r["cost"] // r["flow"] for r in answer["allocation"] if r["flow"]), default=0)


def figures(problem: dict[str, Any]) -> dict[str, Any]:
    """What README quotes, solved in process (every answer verified before it is used)."""
    from service.settings import Settings
    from service.solve.pipeline import solve_body

    settings = Settings()
    plain = solve_body(problem, settings)
    short = solve_body({**problem, "objective": "bottleneck"}, settings)
    busiest = max(problem["sources"], key=lambda s: sum(
        1 for r in plain["allocation"] if r["from"] == s["id"]))["id"]
    sick = json.loads(json.dumps(problem))
    for s in sick["sources"]:
        if s["id"] == busiest:
            s["supply"] = 0
    again = solve_body(sick, settings)
    before, after = _pairs(plain), _pairs(again)
    others = {p for p in before if p[0] != busiest}
    kept_plans = {}
    for penalty in (20, 1000):
        replanned = solve_body({**sick, "previous": {"allocation": plain["allocation"],
                                                     "change_penalty": penalty}}, settings)
        kept_plans[penalty] = {
            "other_assignments_moved": len(others - _pairs(replanned)),
            "changes": replanned["changes"],
            "travel": replanned["objective"] - replanned["changes"]["penalty"],
            "unmet": len(replanned["unmet"])}
    return {
        "min": {"objective": plain["objective"], "longest": _longest(problem, plain),
                "unmet": len(plain["unmet"])},
        "bottleneck": {"objective": short["objective"], "longest": _longest(problem, short),
                       "threshold": short["certificate"]["bottleneck"]["threshold"],
                       "unmet": len(short["unmet"])},
        "sick": {"technician": busiest,
                 "their_tickets": len(before) - len(others),
                 "other_assignments_moved": len(others - after),
                 "objective": again["objective"],
                 "unmet": len(again["unmet"]),
                 "reasons": sorted({u["reason"] for u in again["unmet"]}),
                 "with_previous": kept_plans},
    }


def main(argv: list[str]) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--write", action="store_true", help="rewrite the demo file")
    args = parser.parse_args(argv)
    if args.write:
        DAY.write_text(json.dumps(make_day(), separators=(",", ":")) + "\n", encoding="utf-8")
        print(f"wrote {DAY}")
        return 0
    print(json.dumps(figures(json.loads(DAY.read_text(encoding="utf-8"))), indent=2))
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
