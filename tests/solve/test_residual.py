"""The residual graph of an answer, held to a residual graph built in the test from the
request and the answer alone, and to networkx's all-pairs shortest paths."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest
from scipy.sparse.csgraph import dijkstra

from schemas import ProblemSchema
from service.network.build import build_network
from service.settings import Settings
from service.solve import dispatch
from service.solve.answer import build_answer
from service.solve.certificate import certify
from service.solve.residual import residual_graph
from tests.reference import FAMILIES, instance, read

SMALL = ("dense_square", "max", "forbidden", "sparse_arcs", "transportation", "penalties",
         "transshipment", "unmet_hard")


def solved(problem: dict):
    """Network, solution, certificate and answer of ``problem`` (no HTTP)."""
    net = build_network(ProblemSchema().load(problem), Settings())
    solution = dispatch.solve(net)
    cert = certify(net, solution)
    return net, solution, cert, build_answer(net, solution, cert)


def _raw_residual(problem: dict, answer: dict) -> tuple[list[str], list[tuple]]:
    """Residual arcs (tail, head, cost in the min form) from the request and the answer:
    the definition (forward where x < u, backward where x > 0), written out here."""
    net = read(problem)
    sign = net.sense
    flow: dict = {}
    for row in answer["allocation"]:
        flow[row.get("arc", (row["from"], row["to"]))] = row["flow"]
    arcs = []
    for k, (frm, to, cost, cap) in enumerate(net.arcs):
        x = flow.get(k if "arcs" in problem else (frm, to), 0)
        c = sign * cost
        if cap is None or x < cap:
            arcs.append((frm, to, c))
        if x > 0:
            arcs.append((to, frm, -c))
    unused = {u["id"]: u["amount"] for u in answer["unused"]}
    unmet = {u["id"]: u["amount"] for u in answer["unmet"]}
    S, T, P = "*S", "*T", "*P"
    virtual = [(S, sid, 0, supply, supply - unused.get(sid, 0)) for sid, supply in net.sources]
    pool = 0
    for tid, demand, penalty in net.sinks:
        virtual.append((tid, T, 0, demand, demand))
        short = unmet.get(tid, 0)
        if penalty is None:
            virtual.append((P, tid, 0, demand, short))
            pool += short
        else:
            virtual.append((S, tid, penalty, demand, short))
    virtual.append((S, P, 0, answer["certificate"]["hard_shortfall"], pool))
    for t, h, c, cap, x in virtual:
        if x < cap:
            arcs.append((t, h, c))
        if x > 0:
            arcs.append((h, t, -c))
    ids = [s for s, _ in net.sources] + net.nodes + [t for t, _, _ in net.sinks] + [S, T, P]
    return ids, arcs


@pytest.mark.parametrize("family", SMALL)
@pytest.mark.parametrize("seed", range(3))
def test_distances_match_networkx_on_the_residual_graph_built_from_the_answer(family, seed):
    problem = instance(family, seed)
    net, solution, cert, answer = solved(problem)
    res = residual_graph(net, solution.flow, cert)
    assert int(res.reduced.min(initial=0)) >= 0
    ids, raw = _raw_residual(problem, answer)
    g = nx.DiGraph()
    g.add_nodes_from(ids)
    for t, h, c in raw:
        if not g.has_edge(t, h) or g[t][h]["weight"] > c:
            g.add_edge(t, h, weight=c)
    # reference library: networkx.floyd_warshall (negative costs, no negative cycle)
    far = nx.floyd_warshall(g)
    pi = cert.potential
    for reverse in (False, True):
        graph = res.graph(reverse=reverse)
        dist = dijkstra(graph.csr, directed=True)
        for u in range(len(ids)):
            for v in range(len(ids)):
                want = far[ids[v]][ids[u]] if reverse else far[ids[u]][ids[v]]
                got = dist[u, v]
                if want == float("inf"):
                    assert got == np.inf
                else:
                    # reduced lengths shift a path by its end points' potentials
                    a, b = (v, u) if reverse else (u, v)
                    assert got == want - pi[a] + pi[b]


def test_entries_name_the_cheapest_parallel_arc():
    problem = {"sources": [{"id": "a", "supply": 2}], "sinks": [{"id": "b", "demand": 2}],
               "arcs": [{"from": "a", "to": "b", "cost": 5, "capacity": 1},
                        {"from": "a", "to": "b", "cost": 3, "capacity": 1},
                        {"from": "a", "to": "b", "cost": 4}]}
    net, solution, cert, _ = solved(problem)
    res = residual_graph(net, solution.flow, cert)
    graph = res.graph()
    e = graph.entry(np.array([0]), np.array([1]))
    assert e[0] >= 0
    # arcs 1 (cost 3) and 2 (cost 4) carry the two units; only arc 0 (5) and 2 have room
    assert res.arc[graph.best[e[0]]] == 2 and res.forward[graph.best[e[0]]]
    assert graph.entry(np.array([1]), np.array([1]))[0] == -1


def test_every_family_is_covered():
    assert set(SMALL) <= set(FAMILIES)
