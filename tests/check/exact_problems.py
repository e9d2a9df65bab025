"""Seeded problems of mixed families in the wire format of ``POST /v1/solve``.

Every family is a kind of request the service must answer: assignments (dense matrix, sparse
matrix, arc list), transportation with penalties, transshipment with capacities (flow may
also pass through sinks and into sources), ``max`` objectives, fractional costs, parallel
arcs, hard demand that cannot all be met, and the ``reject`` policy. Sizes stay small, so
that the exact reference and networkx answer at once. No family builds a cycle of unbounded
arcs with negative min-form cost (that is an unbounded problem, tested elsewhere).
"""

from __future__ import annotations

import random
from collections.abc import Callable
from typing import Any

Problem = dict[str, Any]


def _ids(prefix: str, k: int) -> list[str]:
    return [f"{prefix}{i}" for i in range(k)]


def _cost(rng: random.Random, low: int, high: int, decimals: int) -> int | float:
    """A cost in [low, high]; with decimals > 0 a decimal of that many places."""
    if decimals == 0:
        return rng.randint(low, high)
    unit = 10**decimals
    return rng.randint(low * unit, high * unit) / unit


def _sense(rng: random.Random, problem: Problem, max_share: float = 0.3) -> Problem:
    if rng.random() < max_share:
        problem["objective"] = "max"
    return problem


def assign_dense(rng: random.Random) -> Problem:
    n, m = rng.randint(1, 7), rng.randint(1, 7)
    null = rng.choice([0.0, 0.0, 0.2])
    costs = [[None if rng.random() < null else rng.randint(0, 99) for _ in range(m)]
             for _ in range(n)]
    return _sense(rng, {"sources": [{"id": i} for i in _ids("tech", n)],
                        "sinks": [{"id": j} for j in _ids("job", m)], "costs": costs})


def assign_sparse(rng: random.Random) -> Problem:
    n = rng.randint(2, 8)
    costs: list[list[int | None]] = [[None] * n for _ in range(n)]
    for i in range(n):
        costs[i][rng.randrange(n) if rng.random() < 0.2 else i] = rng.randint(0, 50)
        if rng.random() < 0.5:
            costs[i][rng.randrange(n)] = rng.randint(0, 50)
    return _sense(rng, {"sources": [{"id": i} for i in _ids("tech", n)],
                        "sinks": [{"id": j} for j in _ids("job", n)], "costs": costs})


def assign_arcs(rng: random.Random) -> Problem:
    n, m = rng.randint(1, 6), rng.randint(1, 6)
    pairs = {(rng.randrange(n), rng.randrange(m)) for _ in range(rng.randint(1, 2 * n * m))}
    arcs = [{"from": f"tech{i}", "to": f"job{j}", "cost": rng.randint(0, 40),
             **({"capacity": 1} if rng.random() < 0.5 else {})} for i, j in sorted(pairs)]
    return _sense(rng, {"sources": [{"id": i} for i in _ids("tech", n)],
                        "sinks": [{"id": j} for j in _ids("job", m)], "arcs": arcs})


def _sides(rng: random.Random, n: int, m: int, soft: float, decimals: int
           ) -> tuple[list[dict[str, Any]], list[dict[str, Any]]]:
    sources = [{"id": i, "supply": rng.randint(0, 12)} for i in _ids("depot", n)]
    sinks: list[dict[str, Any]] = []
    for j in _ids("store", m):
        sink: dict[str, Any] = {"id": j, "demand": rng.randint(0, 12)}
        if rng.random() < soft:
            sink["penalty"] = _cost(rng, 0, 150, decimals)
        sinks.append(sink)
    return sources, sinks


def transport(rng: random.Random, decimals: int = 0) -> Problem:
    n, m = rng.randint(1, 5), rng.randint(1, 6)
    sources, sinks = _sides(rng, n, m, 0.5, decimals)
    problem: Problem = {"sources": sources, "sinks": sinks}
    if rng.random() < 0.5:
        problem["costs"] = [[None if rng.random() < 0.2 else _cost(rng, 0, 60, decimals)
                             for _ in range(m)] for _ in range(n)]
    else:
        problem["arcs"] = [
            {"from": s["id"], "to": t["id"], "cost": _cost(rng, 0, 60, decimals),
             **({"capacity": rng.randint(0, 10)} if rng.random() < 0.5 else {})}
            for s in sources for t in sinks if rng.random() < 0.7]
    return _sense(rng, problem)


def transship(rng: random.Random, decimals: int = 0, *, dag: bool = False) -> Problem:
    n, k, m = rng.randint(1, 4), rng.randint(1, 4), rng.randint(1, 5)
    sources, sinks = _sides(rng, n, m, 0.4, decimals)
    nodes = _ids("hub", k)
    order = [s["id"] for s in sources] + nodes + [t["id"] for t in sinks]
    arcs = []
    for a in range(len(order)):
        for b in range(len(order)):
            backwards = b < a
            if a == b or (backwards and (dag or rng.random() < 0.85)) or rng.random() < 0.55:
                continue
            arc: dict[str, Any] = {"from": order[a], "to": order[b],
                                   "cost": _cost(rng, 0, 30, decimals)}
            if rng.random() < 0.6:
                arc["capacity"] = rng.randint(0, 15)
            arcs.append(arc)
            if rng.random() < 0.1:          # a parallel arc at another price
                arcs.append({**arc, "cost": _cost(rng, 0, 30, decimals)})
    if not arcs:
        arcs.append({"from": order[0], "to": order[-1], "cost": 1})
    rng.shuffle(arcs)
    problem = {"sources": sources, "nodes": [{"id": v} for v in nodes], "sinks": sinks,
               "arcs": arcs}
    return _sense(rng, problem) if dag else problem


def fractional(rng: random.Random) -> Problem:
    decimals = rng.randint(1, 6)
    pick = rng.random()
    if pick < 0.4:
        return transport(rng, decimals)
    return transship(rng, decimals, dag=pick < 0.7)


def unmet_hard(rng: random.Random) -> Problem:
    """Hard demand well above what can reach it."""
    problem = transship(rng, dag=rng.random() < 0.5) if rng.random() < 0.6 else transport(rng)
    for sink in problem["sinks"]:
        if rng.random() < 0.7:
            sink.pop("penalty", None)
        sink["demand"] = rng.randint(3, 20)
    return problem


def reject_policy(rng: random.Random) -> Problem:
    problem = transport(rng) if rng.random() < 0.5 else transship(rng)
    problem["unmet_demand"] = "reject"
    if rng.random() < 0.5:          # make it satisfiable: plenty of supply, direct arcs
        for s in problem["sources"]:
            s["supply"] = 100
        if "arcs" in problem:
            problem["arcs"] += [{"from": problem["sources"][0]["id"], "to": t["id"],
                                 "cost": 1000} for t in problem["sinks"]]
        else:
            problem["costs"][0] = [1000] * len(problem["sinks"])
    return problem


FAMILIES: dict[str, Callable[[random.Random], Problem]] = {
    "assign_dense": assign_dense,
    "assign_sparse": assign_sparse,
    "assign_arcs": assign_arcs,
    "transport": transport,
    "transship": transship,
    "transship_max": lambda rng: transship(rng, dag=True),
    "fractional": fractional,
    "unmet_hard": unmet_hard,
    "reject_policy": reject_policy,
}


def instance(family: str, seed: int) -> Problem:
    """The problem of ``family`` for ``seed``: the same on every machine and run."""
    return FAMILIES[family](random.Random(f"{family}/{seed}"))
