"""Seeded re-planning instances and an independent reference for them.

The reference is written from the definitions of issue 13 (README, "Re-planning"), not
from the service: networkx's network simplex (networkx.algorithms.flow.network_simplex,
exact on integers) on a network transformed here:

* a pin (l = u = n on an arc) is sent ahead: the arc disappears, its tail must find n more
  units, its head has n to pass on (the standard substitution x = l + x', Ahuja,
  Magnanti & Orlin 1993, §2.4);
* a previous plan: beside each arc it used, a parallel arc of capacity min(previous units,
  capacity) at cost c - penalty, plus the constant penalty x all previous units
  (common practice, no source: a concave "bonus" capped at the previous amount);
* load costs: parallel supply arcs of one unit each at c_1, c_2, ..., the last taking the
  rest (convex piecewise-linear cost as parallel arcs, AMO §14.2);
* hard demand first: a hard sink's shortfall costs M, larger than any plan's total cost
  (big-M, common practice), so the least shortfall wins before the least cost.

All costs are doubled so that half-unit penalties stay integers.
"""

from __future__ import annotations

import random
from typing import Any

import networkx as nx


def instance(seed: int, controls: tuple[str, ...]) -> dict[str, Any]:
    """A small problem with the given controls among "fixed", "previous", "load"."""
    rng = random.Random(seed)
    n_src, n_snk = rng.randint(1, 4), rng.randint(1, 5)
    n_mid = rng.choice([0, 0, 1, 2])
    sources = [{"id": f"s{i}", "supply": rng.randint(0, 6)} for i in range(n_src)]
    sinks = []
    for j in range(n_snk):
        sink: dict[str, Any] = {"id": f"t{j}", "demand": rng.randint(0, 5)}
        if rng.random() < 0.4:
            sink["penalty"] = rng.randint(0, 12)
        sinks.append(sink)
    problem: dict[str, Any] = {"sources": sources, "sinks": sinks,
                               "objective": rng.choice(["min", "min", "max"])}
    pairs: list[tuple[str, str]] = []
    if n_mid == 0 and rng.random() < 0.5:
        costs = [[rng.randint(-3, 9) if rng.random() < 0.8 else None for _ in range(n_snk)]
                 for _ in range(n_src)]
        problem["costs"] = costs
        pairs = [(f"s{i}", f"t{j}") for i in range(n_src) for j in range(n_snk)
                 if costs[i][j] is not None]
    else:
        nodes = [f"m{k}" for k in range(n_mid)]
        if nodes:
            problem["nodes"] = [{"id": v} for v in nodes]
        tails = [s["id"] for s in sources] + nodes
        heads = nodes + [t["id"] for t in sinks]
        arcs = []
        for _ in range(rng.randint(1, 12)):
            a, b = rng.choice(tails), rng.choice(heads)
            if a == b or (a, b) in pairs or (a in nodes and b in nodes):
                continue
            arc: dict[str, Any] = {"from": a, "to": b, "cost": rng.randint(0, 9)}
            if rng.random() < 0.5:
                arc["capacity"] = rng.randint(0, 5)
            arcs.append(arc)
            pairs.append((a, b))
        problem["arcs"] = arcs
    if "fixed" in controls and pairs:
        chosen = rng.sample(pairs, rng.randint(1, min(3, len(pairs))))
        # mostly routable pins, now and then too many (the 422 with its witness)
        top = 1 if rng.random() < 0.7 else 3
        problem["fixed"] = [{"from": a, "to": b, "flow": rng.randint(0, top)}
                            for a, b in chosen]
    if "previous" in controls:
        rows = []
        ends = [s["id"] for s in sources] + ["gone"]
        for a in ends:
            for t in sinks:
                if rng.random() < 0.4:
                    rows.append({"from": a, "to": t["id"], "flow": rng.randint(1, 3)})
        for a, b in pairs:
            if b.startswith("m") or a.startswith("m"):
                if rng.random() < 0.3:
                    rows.append({"from": a, "to": b, "flow": rng.randint(1, 3)})
        problem["previous"] = {"allocation": rows,
                               "change_penalty": rng.choice([0, 1, 2.5, 4, 20])}
    if "load" in controls:
        for s in sources:
            if rng.random() < 0.7:
                first = rng.randint(-2, 3)
                steps = [rng.choice([0, 0.5, 1, 3]) for _ in range(rng.randint(0, 4))]
                costs_ = [first]
                for step in steps:
                    costs_.append(costs_[-1] + step)
                s["load_costs"] = costs_
    return problem


def _twice(value: float) -> int:
    doubled = 2 * value
    assert doubled == int(doubled)
    return int(doubled)


def reference(problem: dict[str, Any]) -> tuple[int, int] | None:
    """(least hard shortfall, twice the best objective) from networkx, or None when the
    pins alone cannot be routed."""
    sign = -1 if problem.get("objective") == "max" else 1
    sources, sinks = problem["sources"], problem["sinks"]
    arcs: list[tuple[str, str, int, int | None]] = []      # (from, to, min-form cost, cap)
    if "costs" in problem:
        for i, row in enumerate(problem["costs"]):
            for j, c in enumerate(row):
                if c is not None:
                    arcs.append((sources[i]["id"], sinks[j]["id"], sign * c, None))
    else:
        arcs = [(a["from"], a["to"], sign * a["cost"], a.get("capacity")) for a in
                problem["arcs"]]
    demand_total = sum(t["demand"] for t in sinks)
    big_cap = demand_total + sum(a[3] or 0 for a in arcs) + sum(
        p["flow"] for p in problem.get("fixed", [])) + 1
    total_abs = sum(abs(a[2]) for a in arcs) * big_cap + sum(
        t.get("penalty", 0) * t["demand"] for t in sinks)
    for s in sources:
        total_abs += sum(abs(c) for c in s.get("load_costs", [])) * max(1, s["supply"])
    M = 2 * (total_abs + 1) * 4 + 10**6
    g = nx.MultiDiGraph()
    need: dict[str, int] = {}
    pins = {(p["from"], p["to"]): p["flow"] for p in problem.get("fixed", [])}
    prev: dict[tuple[str, str], int] = {}
    constant = 0
    if "previous" in problem:
        lam = _twice(problem["previous"]["change_penalty"])
        for row in problem["previous"]["allocation"]:
            prev[(row["from"], row["to"])] = prev.get((row["from"], row["to"]), 0) + row["flow"]
            constant += lam * row["flow"]
    else:
        lam = 0
    objective = 0
    for a, b, c, cap in arcs:
        c2 = 2 * c
        k = prev.get((a, b), 0)
        if cap is not None:
            k = min(k, cap)
        if (a, b) in pins:
            n = pins[(a, b)]
            if cap is not None and n > cap:
                return None
            kept = min(k, n)
            objective += c2 * n - lam * kept
            need[a] = need.get(a, 0) + n
            need[b] = need.get(b, 0) - n
            continue
        if k:
            g.add_edge(a, b, weight=c2 - lam, capacity=k)
        rest = None if cap is None else cap - k
        if rest is None:
            g.add_edge(a, b, weight=c2, capacity=big_cap)
        elif rest > 0:
            g.add_edge(a, b, weight=c2, capacity=rest)
    for s in sources:
        costs = s.get("load_costs") or [0]
        q = s["supply"]
        tiers = max(1, min(len(costs), q))
        for j in range(tiers):
            cap = 1 if j < tiers - 1 else q - (tiers - 1)
            g.add_edge("S*", s["id"], weight=_twice(costs[j]), capacity=cap)
    for t in sinks:
        g.add_edge(t["id"], "T*", weight=0, capacity=t["demand"])
        shortfall = _twice(t["penalty"]) if "penalty" in t else M
        g.add_edge("S*", t["id"], weight=shortfall, capacity=t["demand"])
    for v in list(g.nodes) + list(need):
        g.add_node(v)
    for v in g.nodes:
        g.nodes[v]["demand"] = need.get(v, 0)
    g.nodes["S*"]["demand"] -= demand_total
    g.nodes["T*"]["demand"] += demand_total
    try:
        cost, flows = nx.network_simplex(g)
    except nx.NetworkXUnfeasible:
        return None
    hard = {t["id"] for t in sinks if "penalty" not in t}
    short = sum(f for t in hard for f in flows["S*"].get(t, {}).values())
    total = cost + objective + constant - M * short
    return short, sign * total
