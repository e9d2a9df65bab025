"""Forged answers whose node sums wrap around in 64-bit integers (the overflow class).

A node balance summed in int64 is the true balance modulo 2**64. Thousands of allocation rows
of flow near 2**53 (the largest flow a row may carry) on zero-cost, unbounded arcs add up to
2**64 - 1, which int64 sees as -1: a node that really ships 2**64 - 1 units out looks as if it
received one. Each builder returns ``(problem, answer)``: a request whose honest answer is
known, and a forged answer that is consistent in wrapped arithmetic but infeasible in exact
arithmetic, so a correct verifier says ``valid: false``.

Scenarios: invented (a parts network: a depot, a hub, stores).
"""

from __future__ import annotations

import random
from typing import Any

#: A node sum of this many units is 0 in int64.
WRAP = 2**64
#: Largest flow an allocation row may report (the answer's documented bound, 2**53).
ROW_MAX = 2**53


def split(total: int, k: int, rng: random.Random) -> list[int]:
    """``k`` flows from 0 to 2**53 that add up to ``total`` (needs k * 2**53 >= total)."""
    if not 0 <= total <= k * ROW_MAX:
        raise ValueError("total out of reach")
    base, extra = divmod(total, k)
    rows = [base + (i < extra) for i in range(k)]
    for _ in range(k):
        i, j = rng.randrange(k), rng.randrange(k)
        moved = rng.randint(0, min(rows[i], ROW_MAX - rows[j]))
        rows[i] -= moved
        rows[j] += moved
    rng.shuffle(rows)
    return rows


def _answer(rows: list[dict[str, Any]], objective: int, potentials: dict[str, int],
            virtual: tuple[int, int, int], flow_value: int) -> dict[str, Any]:
    return {
        "objective": objective, "flow_value": flow_value, "allocation": rows,
        "unmet": [], "unused": [],
        "certificate": {
            "negated": False, "potentials": potentials,
            "virtual_potentials": dict(zip(("super_source", "super_sink", "hard_pool"),
                                           virtual, strict=True)),
            "hard_shortfall": 0,
            "cut": {"sink_side": [], "sinks": [], "demand": 0, "capacity": 0},
            "dual_objective": objective},
    }


def _parallel(tail: str, head: str, start: int, flows: list[int]) -> tuple[list, list]:
    """(arcs, rows): one zero-cost unbounded arc per flow, and its allocation row."""
    arcs = [{"from": tail, "to": head, "cost": 0} for _ in flows]
    rows = [{"from": tail, "to": head, "flow": q, "cost": 0, "arc": start + i}
            for i, q in enumerate(flows)]
    return arcs, rows


def free_lunch(rng: random.Random, k: int = 2048, price: int = 100
               ) -> tuple[dict[str, Any], dict[str, Any]]:
    """An objective below the optimum, through a sink, a hub and a source.

    The only way to the store costs ``price``; the store and the hub have zero-cost arcs
    back to the depot. The forgery sends 2**64 - 1 units store -> hub -> depot and nothing on
    the paid arc: in int64 the depot then "sends" 1 and the store "receives" 1, at cost 0.
    """
    total = WRAP - 1
    back, back_rows = _parallel("store", "hub", 1, split(total, k, rng))
    home, home_rows = _parallel("hub", "depot", 1 + k, split(total, k, rng))
    problem = {"sources": [{"id": "depot"}], "nodes": [{"id": "hub"}],
               "sinks": [{"id": "store"}],
               "arcs": [{"from": "depot", "to": "store", "cost": price}, *back, *home]}
    answer = _answer(back_rows + home_rows, 0, {"depot": 0, "hub": 0, "store": 0},
                     (0, 0, 0), 1)
    return problem, answer


def unreachable_served(rng: random.Random, k: int = 2048, price: int = 7
                       ) -> tuple[dict[str, Any], dict[str, Any]]:
    """A hard sink that nothing can reach, claimed served (hard shortfall 0 instead of 1).

    The island store has arcs out only; 2**64 - 1 units island -> hub -> depot make it look
    as if it received one unit, and the depot as if it sent two (its supply).
    """
    total = WRAP - 1
    out, out_rows = _parallel("island", "hub", 1, split(total, k, rng))
    home, home_rows = _parallel("hub", "depot", 1 + k, split(total, k, rng))
    problem = {"sources": [{"id": "depot", "supply": 2}], "nodes": [{"id": "hub"}],
               "sinks": [{"id": "store"}, {"id": "island"}],
               "arcs": [{"from": "depot", "to": "store", "cost": price}, *out, *home]}
    rows = [{"from": "depot", "to": "store", "flow": 1, "cost": price, "arc": 0},
            *out_rows, *home_rows]
    # potentials that satisfy every check in wrapped arithmetic: the dual objective
    # 2 price - price (the island's demand arc) equals the cost
    potentials = {"depot": price, "hub": price, "island": price, "store": 0}
    return problem, _answer(rows, price, potentials, (price, 0, 0), 2)


def wrapped_row_cost(flow: int = ROW_MAX, price: int = 2048
                     ) -> tuple[dict[str, Any], dict[str, Any], int]:
    """A row whose cost, flow x price = 2**64, is reported as 0 (its int64 product).

    The flow runs around a cycle of two hubs (a feasible circulation); the row's cost and the
    objective are wrong. Returns (problem, answer, index of the row).
    """
    problem = {"sources": [{"id": "depot"}], "nodes": [{"id": "hub-a"}, {"id": "hub-b"}],
               "sinks": [{"id": "store"}],
               "arcs": [{"from": "depot", "to": "store", "cost": 1},
                        {"from": "hub-a", "to": "hub-b", "cost": price},
                        {"from": "hub-b", "to": "hub-a", "cost": 0}]}
    rows = [{"from": "depot", "to": "store", "flow": 1, "cost": 1, "arc": 0},
            {"from": "hub-a", "to": "hub-b", "flow": flow, "cost": (flow * price) % WRAP,
             "arc": 1},
            {"from": "hub-b", "to": "hub-a", "flow": flow, "cost": 0, "arc": 2}]
    potentials = {"depot": 1, "hub-a": 0, "hub-b": 0, "store": 0}
    return problem, _answer(rows, 1, potentials, (1, 0, 0), 1), 1
