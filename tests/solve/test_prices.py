"""Override prices held to every plan enumerated (tests/brute.py) on small instances."""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest

from service.settings import Settings
from service.solve.pipeline import solve_body
from tests.brute import plans


def _loss(problem: dict, best: Fraction, other: Fraction) -> Fraction:
    return best - other if problem.get("objective") == "max" else other - best


def brute_prices(problem: dict) -> dict[tuple, tuple]:
    """(force_delta, forbid_delta) per pair key, from every plan serving the most hard
    demand: the least loss among plans with / without flow on the pair (None: no plan)."""
    every = plans(problem)
    best = every[0].objective
    out = {}
    keys = _pair_keys(problem)
    for key in keys:
        on = [p.objective for p in every if dict(p.flows).get(key, 0) > 0]
        off = [p.objective for p in every if dict(p.flows).get(key, 0) == 0]
        out[key] = (min((_loss(problem, best, o) for o in on), default=None),
                    min((_loss(problem, best, o) for o in off), default=None))
    return out


def _pair_keys(problem: dict) -> list[tuple]:
    if "costs" in problem:
        return [(s["id"], t["id"], None) for s, row in zip(problem["sources"],
                                                           problem["costs"], strict=True)
                for t, c in zip(problem["sinks"], row, strict=True) if c is not None]
    return [(a["from"], a["to"], k) for k, a in enumerate(problem["arcs"])]


def _exact(value) -> Fraction | None:
    return None if value is None else Fraction(repr(value)) if isinstance(value, float) \
        else Fraction(value)


def small(seed: int) -> dict:
    """A small bipartite problem: assignment, rectangular, forbidden cells, max, soft and
    hard sinks, transportation with supplies of a few units, capacitated parallel arcs."""
    rng = np.random.default_rng([seed, 14])
    kind = seed % 6
    n, m = int(rng.integers(1, 6)), int(rng.integers(1, 6))
    sources = [{"id": f"s{i}"} for i in range(n)]
    sinks = [{"id": f"t{j}"} for j in range(m)]
    problem: dict = {"sources": sources, "sinks": sinks}
    if kind in (0, 1, 2):          # unit assignment, sometimes with null cells, sometimes max
        cost = rng.integers(0, 20, size=(n, m)).tolist()
        if kind == 1:
            cost = [[None if rng.random() < 0.3 else c for c in row] for row in cost]
        problem["costs"] = cost
        if kind == 2:
            problem["objective"] = "max"
        return problem
    for s in sources:
        s["supply"] = int(rng.integers(1, 4))
    for t in sinks:
        t["demand"] = int(rng.integers(1, 4))
        if rng.random() < 0.4:
            t["penalty"] = int(rng.integers(0, 30))
    if kind == 3:
        problem["costs"] = [[None if rng.random() < 0.2 else int(rng.integers(-5, 20))
                             for _ in range(m)] for _ in range(n)]
        return problem
    arcs = []
    for i in range(n):
        for j in range(m):
            for _ in range(int(rng.integers(0, 3))):
                arc = {"from": f"s{i}", "to": f"t{j}", "cost": int(rng.integers(0, 15))}
                if rng.random() < 0.6:
                    arc["capacity"] = int(rng.integers(0, 3))
                arcs.append(arc)
    if not arcs:
        arcs.append({"from": "s0", "to": "t0", "cost": 1})
    problem["arcs"] = arcs
    if kind == 5:
        problem["objective"] = "max"
    return problem


@pytest.mark.parametrize("seed", range(120))
def test_every_price_equals_brute_force(seed):
    problem = small(seed)
    answer = solve_body({**problem, "prices": True}, Settings())
    want = brute_prices(problem)
    rows = answer["prices"]
    assert len(rows) == len(want)
    for row in rows:
        key = (row["from"], row["to"], row.get("arc"))
        assert "force_delta" in row and "forbid_delta" in row
        got = (_exact(row["force_delta"]), _exact(row["forbid_delta"]))
        # reference: tests/brute.py, every plan serving the most hard demand enumerated
        assert got == want[key], (key, got, want[key])


def test_seven_by_seven_assignment():
    rng = np.random.default_rng(77)
    problem = {"sources": [{"id": f"w{i}"} for i in range(7)],
               "sinks": [{"id": f"j{j}"} for j in range(7)],
               "costs": rng.integers(0, 50, size=(7, 7)).tolist()}
    answer = solve_body({**problem, "prices": True}, Settings())
    want = brute_prices(problem)
    for row in answer["prices"]:
        assert (row["force_delta"], row["forbid_delta"]) == want[(row["from"], row["to"], None)]


def test_rerouting_many_units_one_by_one_counts_against_the_cap():
    # 40 units on a -> t must go around it through 40 arcs of capacity 1: forty
    # augmentations, each a Dijkstra; a cap that allows the distance rows but not those
    # forty runs is a 413 naming /prices (common practice, no source: a budget per run)
    arcs = [{"from": "a", "to": "t", "cost": 0, "capacity": 40}]
    arcs += [{"from": "a", "to": f"m{k}", "cost": 1, "capacity": 1} for k in range(40)]
    arcs += [{"from": f"m{k}", "to": "t", "cost": 1, "capacity": 1} for k in range(40)]
    problem = {"sources": [{"id": "a", "supply": 40}], "nodes": [{"id": f"m{k}"}
                                                                 for k in range(40)],
               "sinks": [{"id": "t", "demand": 40}], "arcs": arcs, "prices": True}
    answer = solve_body(problem, Settings())
    # forbidding a -> t: every unit takes a two-arc detour of cost 2 (worked by hand)
    assert answer["prices"][0]["forbid_delta"] == 80
    from service.errors import TooLarge
    # the distance rows take 5,418 units here (41 roots x 132 nodes and arcs): 8,000 lets
    # them through, and the forty runs then exhaust it
    with pytest.raises(TooLarge, match="rerouting the used pairs"):
        solve_body(problem, Settings(max_prices_work=8_000))
