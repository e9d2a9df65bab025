"""Ranked alternatives (``"alternatives": k``) held to brute force and to networkx.

* Small instances: every plan enumerated (tests/brute.py); the k best objectives after the
  optimum must be exactly the next k of the enumeration, ties included, each alternative a
  plan of the enumeration, no two alike; fewer plans than asked: all of them.
* Larger instances: each alternative re-solved by ``networkx.network_simplex`` within the
  bounds of its cell must cost exactly what the answer says, and so must the cells left in
  the frontier be no cheaper than their stated bounds (reference library: networkx).
"""

from __future__ import annotations

from fractions import Fraction
from typing import Any

import networkx as nx
import numpy as np
import pytest

from service.settings import Settings
from service.solve.pipeline import solve_body
from tests.brute import canonical, flows_of, plans


def small_problem(seed: int) -> dict[str, Any]:
    """An assignment matrix (up to 6 x 6, some cells forbidden) or a small
    transportation problem with capacities and penalties, in turn."""
    rng = np.random.default_rng([seed, 14])
    if seed % 2 == 0:
        n, m = int(rng.integers(1, 7)), int(rng.integers(1, 7))
        costs: list[list[Any]] = rng.integers(0, 6, size=(n, m)).tolist()
        for i in range(n):
            for j in range(m):
                if rng.random() < 0.15:
                    costs[i][j] = None
        return {"sources": [{"id": f"s{i}"} for i in range(n)],
                "sinks": [{"id": f"t{j}"} for j in range(m)], "costs": costs,
                "objective": "max" if seed % 4 == 0 else "min"}
    n, m = int(rng.integers(1, 4)), int(rng.integers(1, 4))
    sinks: list[dict[str, Any]] = [{"id": f"t{j}", "demand": int(rng.integers(1, 3))}
                                   for j in range(m)]
    for t in sinks:
        if rng.random() < 0.4:
            t["penalty"] = int(rng.integers(0, 20))
    arcs = [{"from": f"s{i}", "to": f"t{j}", "cost": int(rng.integers(-4, 10)),
             "capacity": int(rng.integers(1, 3)) if rng.random() < 0.5 else None}
            for i in range(n) for j in range(m) if rng.random() < 0.85]
    if rng.random() < 0.2 and arcs:
        arcs.append(dict(arcs[0], cost=arcs[0]["cost"] + 1))      # a parallel arc
    if not arcs:
        arcs = [{"from": "s0", "to": "t0", "cost": 1}]
    return {"sources": [{"id": f"s{i}", "supply": int(rng.integers(1, 4))}
                        for i in range(n)], "sinks": sinks, "arcs": arcs,
            "objective": "max" if seed % 5 == 0 else "min"}


def _solve(problem: dict[str, Any]) -> dict[str, Any]:
    return solve_body(problem, Settings())


@pytest.mark.parametrize("seed", range(80))
def test_the_k_best_are_those_of_brute_force(seed):
    # reference: every plan enumerated (tests/brute.py)
    problem = small_problem(seed)
    k = 1 + seed % 20
    answer = _solve({**problem, "alternatives": k})
    every = plans(problem)
    by_arc = "arcs" in problem
    got = [answer["objective"]] + [a["objective"] for a in answer["alternatives"]]
    assert got == [p.objective for p in every[: k + 1]]
    seen = [canonical(flows_of(answer, by_arc))]
    seen += [canonical(flows_of(a, by_arc)) for a in answer["alternatives"]]
    assert len(set(seen)) == len(seen)                     # distinct plans
    listed = {canonical(p.flows): p.objective for p in every}
    assert all(s in listed for s in seen)                  # each a plan of the problem
    assert all(listed[s] == o for s, o in zip(seen, got, strict=True))
    assert answer["partition"]["requested"] == k


def test_fewer_plans_than_asked_returns_them_all():
    # worked by hand: a 2 x 2 assignment has two plans serving both sinks
    problem = {"sources": [{"id": "a"}, {"id": "b"}], "sinks": [{"id": "x"}, {"id": "y"}],
               "costs": [[1, 5], [4, 1]], "alternatives": 5}
    answer = _solve(problem)
    assert [a["objective"] for a in answer["alternatives"]] == [9]
    assert all("empty" in f for f in answer["partition"]["frontier"])
    assert all(b is not None for b in answer["partition"]["branches"])


def test_an_alternative_names_its_cell():
    # worked by hand: the optimum a-x, b-y (2); the runner-up forbids a-x: a-y, b-x (9)
    problem = {"sources": [{"id": "a"}, {"id": "b"}], "sinks": [{"id": "x"}, {"id": "y"}],
               "costs": [[1, 5], [4, 1]], "alternatives": 1}
    alt = _solve(problem)["alternatives"][0]
    assert alt["cell"]["parent"] == 0 and alt["cell"]["side"] == "below"
    assert alt["cell"]["bounds"] == [{"from": "a", "to": "x", "min": 0, "max": 0}]
    assert sorted((r["from"], r["to"]) for r in alt["allocation"]) == [("a", "y"), ("b", "x")]


# -- larger instances: every cell re-solved by networkx ----------------------------------


def larger_problem(seed: int) -> dict[str, Any]:
    rng = np.random.default_rng([seed, 41])
    n, m = int(rng.integers(4, 9)), int(rng.integers(4, 9))
    if seed % 2 == 0:
        costs = rng.integers(0, 30, size=(n, m)).tolist()
        return {"sources": [{"id": f"s{i}"} for i in range(n)],
                "sinks": [{"id": f"t{j}"} for j in range(m)], "costs": costs,
                "objective": "max" if seed % 6 == 0 else "min"}
    sinks: list[dict[str, Any]] = [{"id": f"t{j}", "demand": int(rng.integers(1, 5))}
                                   for j in range(m)]
    for t in sinks:
        if rng.random() < 0.3:
            t["penalty"] = int(rng.integers(5, 40))
    arcs = [{"from": f"s{i}", "to": f"t{j}", "cost": int(rng.integers(0, 25)),
             "capacity": int(rng.integers(1, 4)) if rng.random() < 0.4 else None}
            for i in range(n) for j in range(m) if rng.random() < 0.6]
    if not arcs:
        arcs = [{"from": "s0", "to": "t0", "cost": 1}]
    return {"sources": [{"id": f"s{i}", "supply": int(rng.integers(1, 6))} for i in range(n)],
            "sinks": sinks, "arcs": arcs}


def best_in_cell(problem: dict[str, Any], hard_short: int,
                 bounds: dict[tuple[str, str, int | None], tuple[int, int | None]]
                 ) -> Fraction | None:
    """Least min-form cost of a plan within ``bounds`` serving all but ``hard_short`` of the
    hard demand, by networkx.network_simplex on the extended network with lower bounds
    shifted out (Ahuja, Magnanti & Orlin 1993, §2.4); None when the cell holds no plan."""
    sign = -1 if problem.get("objective") == "max" else 1
    g = nx.MultiDiGraph()
    demand = sum(t.get("demand", 1) for t in problem["sinks"])
    balance: dict[Any, int] = {"S": -demand, "T": demand, "P": 0}
    constant = 0
    pairs = ([(s["id"], t["id"], c, None, None)
              for s, row in zip(problem["sources"], problem["costs"], strict=True)
              for t, c in zip(problem["sinks"], row, strict=True) if c is not None]
             if "costs" in problem else
             [(a["from"], a["to"], a["cost"], a.get("capacity"), k)
              for k, a in enumerate(problem["arcs"])])
    for s in problem["sources"]:
        g.add_edge("S", ("n", s["id"]), capacity=s.get("supply", 1), weight=0)
    for t in problem["sinks"]:
        d = t.get("demand", 1)
        g.add_edge(("n", t["id"]), "T", capacity=d, weight=0)
        if t.get("penalty") is not None:
            g.add_edge("S", ("n", t["id"]), capacity=d, weight=sign * t["penalty"])
        else:
            g.add_edge("P", ("n", t["id"]), capacity=d, weight=0)
    g.add_edge("S", "P", capacity=hard_short, weight=0)
    for frm, to, c, cap, k in pairs:
        lo, hi = bounds.get((frm, to, k), (0, cap))
        if cap is not None:
            hi = cap if hi is None else min(hi, cap)
        if hi is not None and lo > hi:
            return None
        w = sign * c
        constant += lo * w
        balance[("n", frm)] = balance.get(("n", frm), 0) + lo
        balance[("n", to)] = balance.get(("n", to), 0) - lo
        attrs = {"weight": w} if hi is None else {"weight": w, "capacity": hi - lo}
        g.add_edge(("n", frm), ("n", to), **attrs)
    for node, b in balance.items():
        g.add_node(node, demand=b)
    try:
        cost, _ = nx.network_simplex(g)
    except nx.NetworkXUnfeasible:
        return None
    return Fraction(cost + constant)


def _bounds_of(rows: list[dict[str, Any]]) -> dict:
    return {(r["from"], r["to"], r.get("arc")): (r["min"], r["max"]) for r in rows}


@pytest.mark.parametrize("seed", range(200))
def test_each_alternative_is_the_best_of_its_cell(seed):
    # reference library: networkx.network_simplex, re-solving inside each cell
    problem = larger_problem(seed)
    answer = _solve({**problem, "alternatives": 4})
    short = answer["certificate"]["hard_shortfall"]
    sign = -1 if problem.get("objective") == "max" else 1
    for alt in answer["alternatives"]:
        best = best_in_cell(problem, short, _bounds_of(alt["cell"]["bounds"]))
        assert best is not None and sign * best == alt["objective"]
    # the whole problem's optimum too, as a check of the reference itself
    assert sign * best_in_cell(problem, short, {}) == answer["objective"]


def _frontier_bounds(answer: dict[str, Any], f: dict[str, Any]) -> dict:
    """The bounds of a frontier cell, derived as README "Ranked alternatives" defines."""
    q = f["parent"]
    plan = answer if q == 0 else answer["alternatives"][q - 1]
    bounds = {} if q == 0 else _bounds_of(plan["cell"]["bounds"])
    flow = {(r["from"], r["to"], r.get("arc")): r["flow"] for r in plan["allocation"]}
    branch = answer["partition"]["branches"][q]
    for pair in branch[: f["branch"]]:
        key = (pair["from"], pair["to"], pair.get("arc"))
        bounds[key] = (flow.get(key, 0), flow.get(key, 0))
    pair = branch[f["branch"]]
    key = (pair["from"], pair["to"], pair.get("arc"))
    lo, hi = bounds.get(key, (0, None))
    x = flow.get(key, 0)
    bounds[key] = (lo, x - 1) if f["side"] == "below" else (x + 1, hi)
    return bounds


@pytest.mark.parametrize("seed", range(0, 200, 4))
def test_frontier_cells_hold_nothing_below_their_bounds(seed):
    # reference library: networkx.network_simplex inside a sample of frontier cells
    problem = larger_problem(seed)
    answer = _solve({**problem, "alternatives": 3})
    short = answer["certificate"]["hard_shortfall"]
    sign = -1 if problem.get("objective") == "max" else 1
    frontier = answer["partition"]["frontier"]
    rng = np.random.default_rng(seed)
    for at in rng.permutation(len(frontier))[:4].tolist():
        f = frontier[at]
        best = best_in_cell(problem, short, _frontier_bounds(answer, f))
        if "empty" in f:
            assert best is None
        elif best is not None:
            assert best >= sign * f["bound"]             # min form on both sides


def transshipment_problem(seed: int) -> dict[str, Any]:
    """Sources, depots and sinks with arcs among them (some capacitated, a depot loop)."""
    rng = np.random.default_rng([seed, 77])
    sources = [{"id": f"s{i}", "supply": int(rng.integers(1, 5))} for i in range(2)]
    sinks: list[dict[str, Any]] = [{"id": f"t{j}", "demand": int(rng.integers(1, 4))}
                                   for j in range(3)]
    if rng.random() < 0.5:
        sinks[0]["penalty"] = int(rng.integers(5, 40))
    depots = ["d0", "d1"]
    pairs = ([(s["id"], d) for s in sources for d in depots]
             + [(d, t["id"]) for d in depots for t in sinks]
             + [("d0", "d1"), ("d1", "d0"), ("s0", "t0")])
    arcs = [{"from": a, "to": b, "cost": int(rng.integers(1, 15)),
             "capacity": int(rng.integers(1, 4)) if rng.random() < 0.6 else None}
            for a, b in pairs if rng.random() < 0.85]
    return {"sources": sources, "sinks": sinks, "nodes": [{"id": d} for d in depots],
            "arcs": arcs}


@pytest.mark.parametrize("seed", range(40))
def test_transshipment_alternatives_are_the_best_of_their_cells(seed):
    # reference library: networkx.network_simplex, re-solving inside each cell
    problem = transshipment_problem(seed)
    answer = _solve({**problem, "alternatives": 5})
    short = answer["certificate"]["hard_shortfall"]
    assert best_in_cell(problem, short, {}) == answer["objective"]
    for alt in answer["alternatives"]:
        assert best_in_cell(problem, short, _bounds_of(alt["cell"]["bounds"])) == \
            alt["objective"]
    frontier = answer["partition"]["frontier"]
    for f in frontier[:6]:
        best = best_in_cell(problem, short, _frontier_bounds(answer, f))
        assert best is None if "empty" in f else (best is None or best >= f["bound"])
