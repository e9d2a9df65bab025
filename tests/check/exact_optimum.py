"""The lexicographic optimum of a problem by networkx, to cross-check the exact reference.

Stage 1 is ``networkx.maximum_flow_value`` into the hard sinks (least hard shortfall H);
stage 2 is ``networkx.network_simplex`` on the extended network of the design notes with the
hard pool capped at H (both networkx 3.x, documented at networkx.org under "Flows"). Weights
are the exact grid integers of :func:`exact_reference.read_problem`, so the optimum is exact.
"""

from __future__ import annotations

from fractions import Fraction
from typing import Any

import networkx as nx
from exact_reference import Model, read_problem

_S, _T, _P = ("virtual", "S"), ("virtual", "T"), ("virtual", "P")


def least_shortfall(m: Model) -> int:
    """Hard demand no flow can serve: hard demand minus the stage-1 maximum flow."""
    g = nx.DiGraph()
    g.add_nodes_from([_S, _T, *m.ids])

    def add(u: Any, v: Any, cap: int | None) -> None:
        # parallel arcs merge: capacities add, and one unbounded arc makes the pair unbounded
        if g.has_edge(u, v):
            old = g[u][v].get("capacity")
            if old is None or cap is None:
                g[u][v].pop("capacity", None)
            else:
                g[u][v]["capacity"] = old + cap
        elif cap is None:
            g.add_edge(u, v)
        else:
            g.add_edge(u, v, capacity=cap)

    for s, q in m.supply.items():
        add(_S, s, q)
    for arc in m.arcs:
        add(arc.tail, arc.head, arc.cap)
    hard = [t for t in m.demand if m.hard(t)]
    for t in hard:
        add(t, _T, m.demand[t])
    return sum(m.demand[t] for t in hard) - nx.maximum_flow_value(g, _S, _T)


def optimum(problem: dict[str, Any]) -> tuple[int, Fraction]:
    """(least hard shortfall, least objective in the caller's sense and units)."""
    m = read_problem(problem)
    h = least_shortfall(m)
    g = nx.MultiDiGraph()
    d = m.total_demand
    g.add_node(_S, demand=-d)
    g.add_node(_T, demand=d)
    g.add_node(_P, demand=0)
    for v in m.ids:
        g.add_node(v, demand=0)

    def add(u: Any, v: Any, cost: int, cap: int | None) -> None:
        if cap is None:
            g.add_edge(u, v, weight=cost)
        else:
            g.add_edge(u, v, weight=cost, capacity=cap)

    for arc in m.arcs:
        add(arc.tail, arc.head, arc.cost, arc.cap)
    for s, q in m.supply.items():
        add(_S, s, 0, q)
    for t, q in m.demand.items():
        add(t, _T, 0, q)
        if m.hard(t):
            add(_P, t, 0, q)
        else:
            add(_S, t, m.penalty[t], q)
    add(_S, _P, 0, h)
    cost, _ = nx.network_simplex(g)
    return h, Fraction(m.sigma * cost, m.scale)
