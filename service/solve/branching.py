"""Helpers of the ranked search (:mod:`service.solve.ranked`): the most a plan can carry
on each arc, two smallest weights per node, a short Dijkstra search, and the residual
cycles left once branch arcs are fixed."""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import connected_components, dijkstra

from service.network.model import Network

if TYPE_CHECKING:
    from service.solve.ranked import Plan, Ranked

#: Upper bound of an unbounded arc (a matrix cell, an arc without capacity).
INF = 2**62


def natural_caps(net: Network) -> np.ndarray:
    """The most any plan can put on each user arc: its capacity, and no more than its
    source's supply when nothing enters that source, nor its sink's demand when nothing
    leaves that sink (INF when none of these binds)."""
    arcs = net.arcs
    top = np.where(arcs.bounded, arcs.capacity, INF)
    entered = np.zeros(net.n_user, bool)
    entered[arcs.head] = True
    left = np.zeros(net.n_user, bool)
    left[arcs.tail] = True
    supply = np.full(net.n_user, INF, np.int64)
    supply[: net.n_sources] = np.where(entered[: net.n_sources], INF, net.supply)
    demand = np.full(net.n_user, INF, np.int64)
    demand[net.sink_offset:] = np.where(left[net.sink_offset:], INF, net.demand)
    return np.minimum(top, np.minimum(supply[arcs.tail], demand[arcs.head]))


def two_smallest(keys: np.ndarray, weight: np.ndarray, n: int
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per node (``keys`` of each entry): the least weight, its entry, the second least."""
    order = np.lexsort((weight, keys))
    k = keys[order]
    first = np.flatnonzero(np.concatenate(([True], k[1:] != k[:-1]))) if len(k) else k
    least = np.full(n, np.inf)
    arg = np.full(n, -1, np.int64)
    second = np.full(n, np.inf)
    least[k[first]] = weight[order[first]]
    arg[k[first]] = order[first]
    nxt = first + 1
    has = nxt < len(k)
    has[has] = k[nxt[has]] == k[first[has]]
    second[k[first[has]]] = weight[order[nxt[has]]]
    return least, arg, second


#: Nodes a shortest-path search settles itself before it hands over to scipy's Dijkstra.
BUDGET = 48


def near(graph: csr_matrix, source: int, target: int, limit: float) -> np.ndarray:
    """Dijkstra's distances from ``source`` until ``target`` is settled or every distance
    left exceeds ``limit``: exact for the nodes settled, inf for the others.

    Most children of a cell are decided within a few nodes, so the first ``BUDGET`` are
    settled here, one array pass each, and only a larger search goes to scipy (whose every
    call validates the whole graph first).
    """
    n = graph.shape[0]
    indptr, indices, data = graph.indptr, graph.indices, graph.data
    tent = np.full(n, np.inf)
    dist = np.full(n, np.inf)
    tent[source] = 0.0
    for _ in range(BUDGET):
        node = int(np.argmin(tent))
        d = tent[node]
        if d == np.inf or d > limit:
            return dist
        dist[node] = d
        tent[node] = np.inf
        if node == target:
            return dist
        lo, hi = indptr[node], indptr[node + 1]
        heads = indices[lo:hi]
        cand = d + data[lo:hi]
        open_ = np.isinf(dist[heads])
        np.minimum.at(tent, heads[open_], cand[open_])
    full = dijkstra(graph, indices=source, limit=limit)
    settled = full <= min(limit, full[target])
    return np.where(settled, full, np.inf)


def leftover_cycles(n: int, o: Ranked, plan: Plan, fixed_more: np.ndarray) -> np.ndarray:
    """Mask of extended arcs that may lie on a cycle of the residual graph once the arcs
    ``fixed_more`` are fixed at the plan's flow (none: the plan is the only one left).

    Arcs with room both ways are undirected edges; each component they join is contracted
    and the rest is a directed graph, whose strong components hold every cycle.
    """
    lo, hi = plan.lo.copy(), plan.hi.copy()
    lo[fixed_more] = hi[fixed_more] = plan.x[fixed_more]
    up, down = plan.x < hi, plan.x > lo
    both = up & down
    edges = csr_matrix((np.ones(int(both.sum())), (o.tail[both], o.head[both])), shape=(n, n))
    n_comp, comp = connected_components(edges, directed=False)
    on_cycle = np.zeros(len(o.tail), bool)
    if both.sum() > n - n_comp:
        on_cycle |= both                  # the undirected edges hold a cycle
    one = up ^ down
    t = np.where(up, o.tail, o.head)[one]
    h = np.where(up, o.head, o.tail)[one]
    ct, ch = comp[t], comp[h]
    graph = csr_matrix((np.ones(len(ct)), (ct, ch)), shape=(n_comp, n_comp))
    _, strong = connected_components(graph, directed=True, connection="strong")
    on_cycle[np.flatnonzero(one)] = strong[ct] == strong[ch]
    return on_cycle
