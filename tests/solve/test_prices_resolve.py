"""Override prices held to re-solving with the pair pinned or forbidden (networkx), on
200 seeded instances of every shape, "max" and unmet soft and hard demand included."""

from __future__ import annotations

from fractions import Fraction

import networkx as nx
import numpy as np
import pytest

from service.settings import Settings
from service.solve.pipeline import solve_body
from tests.reference import COST_SCALE, FAMILIES, instance, read, solve_networkx

SEEDS = range(20)          # x 10 families = 200 instances
PER_KIND = 3               # pairs re-solved per instance and kind (forced, forbidden)


def _arc_list(problem: dict) -> list[tuple[str, str, int | float, int | None]]:
    return read(problem).arcs


def resolved_loss(problem: dict, k: int, mode: str) -> Fraction | None:
    """Least loss against the optimum of a plan serving as much hard demand with arc
    ``k`` (in read() order) carrying at least one unit (``mode="force"``) or none
    (``"forbid"``), by networkx.network_simplex on the extended network; None: no plan."""
    net = read(problem)
    scale = 1 if net.integral else COST_SCALE
    hard_short = solve_networkx(problem).hard_shortfall
    best = _min_form_cost(net, scale, hard_short, None, None)
    assert best is not None
    other = _min_form_cost(net, scale, hard_short, k, mode)
    return None if other is None else Fraction(other - best, scale)


def _min_form_cost(net, scale: int, hard_short: int, k: int | None, mode: str | None):
    S, T, P = ("*", "S"), ("*", "T"), ("*", "P")
    total = sum(d for _, d, _ in net.sinks)
    g = nx.MultiDiGraph()
    demand: dict = {S: -total, T: total, P: 0}
    for sid, _ in net.sources:
        demand[("id", sid)] = 0
    for v in net.nodes:
        demand[("id", v)] = 0
    for tid, _, _ in net.sinks:
        demand[("id", tid)] = 0
    fixed = 0
    for sid, supply in net.sources:
        g.add_edge(S, ("id", sid), capacity=supply, weight=0)
    for a, (frm, to, cost, cap) in enumerate(net.arcs):
        w = round(net.sense * cost * scale)
        u, v = ("id", frm), ("id", to)
        if a == k and mode == "forbid":
            continue
        if a == k and mode == "force":
            # lower bound 1: send the unit up front (common practice, no source)
            if cap is not None and cap < 1:
                return None
            demand[u] += 1
            demand[v] -= 1
            fixed += w
            cap = None if cap is None else cap - 1
        attrs = {"weight": w} if cap is None else {"weight": w, "capacity": cap}
        g.add_edge(u, v, key=a, **attrs)
    g.add_edge(S, P, capacity=hard_short, weight=0)
    for tid, d, penalty in net.sinks:
        g.add_edge(("id", tid), T, capacity=d, weight=0)
        if penalty is None:
            g.add_edge(P, ("id", tid), capacity=d, weight=0)
        else:
            g.add_edge(S, ("id", tid), capacity=d, weight=round(penalty * scale))
    for node, d in demand.items():
        g.add_node(node, demand=d)
    try:
        # reference library: networkx.network_simplex
        cost, _ = nx.network_simplex(g)
    except nx.NetworkXUnfeasible:
        return None
    return cost + fixed


def _value(v) -> Fraction | None:
    return None if v is None else Fraction(repr(v)) if isinstance(v, float) else Fraction(v)


@pytest.mark.parametrize("family", FAMILIES)
@pytest.mark.parametrize("seed", SEEDS)
def test_prices_equal_re_solving_with_the_pair_pinned_or_forbidden(family, seed):
    problem = instance(family, seed)
    answer = solve_body({**problem, "prices": True}, Settings())
    rows = answer["prices"]
    arcs = _arc_list(problem)
    assert len(rows) == len(arcs)
    rng = np.random.default_rng([seed, 1414])
    used = [k for k, r in enumerate(rows) if r["flow"] > 0]
    unused = [k for k, r in enumerate(rows) if r["flow"] == 0]
    for k in used:
        assert rows[k]["force_delta"] == 0
    for k in unused:
        assert rows[k]["forbid_delta"] == 0
    for pool, mode in ((unused, "force"), (used, "forbid")):
        for k in rng.permutation(pool)[:PER_KIND].tolist():
            row = rows[k]
            assert (row["from"], row["to"]) == arcs[k][:2]
            got = _value(row[f"{mode}_delta"])
            assert got == resolved_loss(problem, k, mode), (family, seed, k, mode)
            assert got is None or got >= 0


@pytest.mark.parametrize("seed", range(4))
def test_larger_transportation_with_capacities_and_soft_sinks(seed):
    rng = np.random.default_rng([seed, 2828])
    n, m = 12, 15
    problem = {
        "sources": [{"id": f"s{i}", "supply": int(rng.integers(1, 12))} for i in range(n)],
        "sinks": [{"id": f"t{j}", "demand": int(rng.integers(1, 10)),
                   **({"penalty": int(rng.integers(5, 80))} if j % 3 == 0 else {})}
                  for j in range(m)],
        "arcs": [{"from": f"s{i}", "to": f"t{j}", "cost": int(rng.integers(-20, 60)),
                  **({"capacity": int(rng.integers(1, 6))} if rng.random() < 0.5 else {})}
                 for i in range(n) for j in range(m) if rng.random() < 0.6],
        "objective": "max" if seed % 2 else "min",
    }
    answer = solve_body({**problem, "prices": True}, Settings())
    rows = answer["prices"]
    for k in rng.permutation(len(rows))[:10].tolist():
        mode = "forbid" if rows[k]["flow"] > 0 else "force"
        assert _value(rows[k][f"{mode}_delta"]) == resolved_loss(problem, k, mode)
