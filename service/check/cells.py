"""Cells of the partition of plans, read from the definitions: bounds, duals, emptiness.

The extended network (README, "The certificate") as one table of arcs: the user arcs in
the order of ``net.arcs`` (a matrix's allowed cells in row order), then the virtual arcs.
A *cell* is a pair of bound arrays ``lo <= x <= hi`` over that table (``hi`` =
:data:`INF`: no upper bound); the plans of a cell are the integer flows of the stage-2
network within them. For any potentials ``pi`` and any such flow ``x``,

    cost(x) = sum_i b(i) pi(i) + sum_a c^pi_a x_a            (flow conservation)

so ``dual(pi) = sum_i b(i) pi(i) + sum_a (lo_a max(0, c^pi_a) - hi_a max(0, -c^pi_a))`` is a
lower bound on every plan of the cell (weak duality, Ahuja, Magnanti & Orlin, *Network
Flows*, 1993, §9.4 with bounds), provided no arc without an upper bound has a negative
reduced cost. With a reference plan ``x`` this reads ``dual(pi) = cost(x) - sum_a g_a``,
``g_a = c^pi_a x_a - lo_a max(0, c^pi_a) + hi_a max(0, -c^pi_a)``: only arcs whose ``g``
changes need to be looked at, which keeps each unexpanded cell's check small.

Nothing here is shared with the solving core; the sums are exact (Python integers where
int64 could wrap).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import connected_components

from service.check.duals import _virtual_arcs
from service.check.exact import _dot, _fit, _total
from service.network.model import Network

#: No upper bound: matrix cells, arcs without a capacity.
INF = 2**62


@dataclass(frozen=True)
class Table:
    """The extended network's arcs, with incidence lists for the nodes."""

    n_nodes: int
    n_user: int               # user arcs come first
    tail: np.ndarray
    head: np.ndarray
    cost: np.ndarray
    cap: np.ndarray           # the most a plan can carry (:func:`_most`), INF: no bound
    by_tail: np.ndarray       # arc positions ordered by tail, with ``tail_ptr``
    tail_ptr: np.ndarray
    by_head: np.ndarray
    head_ptr: np.ndarray
    supply_at: np.ndarray     # b per node: D at the super-source, -D at the super-sink

    def touching(self, nodes: np.ndarray, inside: np.ndarray) -> np.ndarray:
        """Positions of the arcs with an end in ``nodes`` (each once); ``inside`` is the
        mask of ``nodes`` over all nodes."""
        v = nodes.tolist()
        out = [self.by_tail[self.tail_ptr[i]:self.tail_ptr[i + 1]] for i in v]
        into = [self.by_head[self.head_ptr[i]:self.head_ptr[i + 1]] for i in v]
        if not out:
            return np.zeros(0, np.int64)
        into_all = np.concatenate(into)
        # an arc with both ends inside is among the arcs leaving a node already
        return np.concatenate([*out, into_all[~inside[self.tail[into_all]]]])


def table(net: Network, shortfall: int) -> Table:
    """The arc table of ``net``'s stage-2 network with the hard pool capped at ``shortfall``."""
    arcs = net.arcs
    n = net.n_user
    zeros = np.zeros(net.n_sinks, np.int64)
    v_tail, v_head, v_cost, v_cap, _ = _virtual_arcs(
        net, zeros, np.zeros(net.n_sources, np.int64), shortfall, n, n + 1, n + 2)
    tail = np.concatenate([arcs.tail, v_tail])
    head = np.concatenate([arcs.head, v_head])
    n_nodes = n + 3
    by_tail = np.argsort(tail, kind="stable")
    by_head = np.argsort(head, kind="stable")
    b = np.zeros(n_nodes, np.int64)
    b[n], b[n + 1] = net.total_demand, -net.total_demand
    return Table(n_nodes, len(arcs), tail, head, np.concatenate([arcs.cost, v_cost]),
                 np.concatenate([_most(net), v_cap]),
                 by_tail, np.searchsorted(tail[by_tail], np.arange(n_nodes + 1)),
                 by_head, np.searchsorted(head[by_head], np.arange(n_nodes + 1)), b)


def _most(net: Network) -> np.ndarray:
    """The most a plan can put on each user arc: its capacity; its source's supply when no
    arc enters that source (what leaves it is at most its supply); its sink's demand when
    no arc leaves that sink (what enters is at most its demand). INF when none binds."""
    arcs = net.arcs
    most = np.where(arcs.bounded, arcs.capacity, INF)
    n_in = np.bincount(arcs.head, minlength=net.n_user)
    n_out = np.bincount(arcs.tail, minlength=net.n_user)
    src = arcs.tail < net.n_sources
    src_alone = src & (n_in[arcs.tail] == 0)
    most = np.where(src_alone, np.minimum(most, net.supply[np.where(src, arcs.tail, 0)]), most)
    snk = arcs.head >= net.sink_offset
    sink_at = np.where(snk, arcs.head - net.sink_offset, 0)
    snk_alone = snk & (n_out[arcs.head] == 0)
    return np.where(snk_alone, np.minimum(most, net.demand[sink_at]), most)


def plan_flow(net: Network, tab: Table, arc: np.ndarray, x: np.ndarray,
              shortfall: int) -> np.ndarray:
    """Flow on every arc of the table for an allocation (arc ids and flows) read by the
    checker; the virtual arcs' flows follow from conservation."""
    arcs = net.arcs
    flow = np.zeros(len(tab.tail), np.int64)
    pos = np.searchsorted(arcs.id, arc)
    flow[pos] = x
    net_out = np.zeros(net.n_user, np.int64)
    np.add.at(net_out, arcs.tail, flow[: tab.n_user])
    np.subtract.at(net_out, arcs.head, flow[: tab.n_user])
    n = net.n_user
    received = -net_out[net.sink_offset:]
    *_, v_flow = _virtual_arcs(net, net.demand - received, net_out[: net.n_sources],
                               shortfall, n, n + 1, n + 2)
    flow[tab.n_user:] = v_flow
    return flow


def cost_of(tab: Table, flow: np.ndarray) -> int:
    return _dot(tab.cost, flow)


def _reduced(tab: Table, pi: np.ndarray, where: np.ndarray | slice) -> np.ndarray:
    """Reduced costs of the arcs ``where``: int64 when no sum can wrap, else Python ints."""
    cost, t, h = tab.cost[where], pi[tab.tail[where]], pi[tab.head[where]]
    if pi.dtype != object and (not len(cost) or max(
            float(np.abs(cost).max()), float(np.abs(t).max()), float(np.abs(h).max()))
            < 2.0**60):
        return cost - t + h
    return _fit(cost.astype(object) - t.astype(object) + h.astype(object))


def _dot_small(a: np.ndarray, b: np.ndarray) -> int:
    """:func:`_dot` with a cheaper bound for the short arrays of one cell."""
    if a.dtype != object and b.dtype != object and len(a):
        top = max(-int(a.min()), int(a.max())) * max(-int(b.min()), int(b.max())) * len(a)
        if top < 2**62:
            return int(a @ b)
    return _dot(a, b)


def _terms(reduced: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> int | None:
    """``sum lo max(0, c) - hi max(0, -c)``; None when an unbounded arc has ``c < 0``."""
    negative = reduced < 0
    if bool(np.any(negative & (hi >= INF))):
        return None
    zero = np.zeros(len(reduced), reduced.dtype)
    return (_dot_small(lo, np.where(reduced > 0, reduced, zero))
            - _dot_small(np.where(negative, hi, 0), np.where(negative, -reduced, zero)))


def gaps(tab: Table, pi: np.ndarray, flow: np.ndarray, lo: np.ndarray, hi: np.ndarray,
         where: np.ndarray) -> int | None:
    """Sum of ``g_a`` over the arcs ``where`` (see module docstring), whose bounds are
    ``lo``, ``hi``; None when one of them has no upper bound and a negative reduced cost
    (the dual is then minus infinity)."""
    reduced = _reduced(tab, pi, where)
    terms = _terms(reduced, lo, hi)
    return None if terms is None else _dot_small(reduced, flow[where]) - terms


def dual(tab: Table, pi: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> int | None:
    """The dual objective of ``pi`` in the cell ``lo``/``hi``; None when minus infinity."""
    terms = _terms(_reduced(tab, pi, slice(None)), lo, hi)
    return None if terms is None else _dot(tab.supply_at, pi) + terms


def holds_no_plan(tab: Table, nodes: np.ndarray, where: np.ndarray, lo: np.ndarray,
                  hi: np.ndarray) -> bool:
    """Hoffman's condition: the balance of ``nodes`` exceeds what the bounds let leave.

    Every plan sends ``b(X)`` net out of a node set ``X``, at most the upper bounds of the
    arcs leaving ``X`` minus the lower bounds of those entering it; when ``b(X)`` exceeds
    that, the cell holds no plan (Hoffman's circulation theorem, AMO §6.7). ``where`` are
    the arcs touching ``X`` and ``lo``, ``hi`` their bounds in the cell.
    """
    inside = np.zeros(tab.n_nodes, bool)
    inside[nodes] = True
    t, h = inside[tab.tail[where]], inside[tab.head[where]]
    if not len(where):
        return _total(tab.supply_at[inside]) > 0
    leaving, entering = t & ~h, ~t & h
    if bool(np.any(hi[leaving] >= INF)):
        return False
    return _total(tab.supply_at[inside]) > _total(hi[leaving]) - _total(lo[entering])


def only_plan_left(tab: Table, flow: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> bool:
    """True when ``flow`` is the only plan within ``lo``/``hi``.

    Another plan differs from it by a circulation that decomposes into cycles of its
    residual graph, each arc used one way (AMO §3.5). Arcs with room both ways are
    undirected edges, the others directed ones; such a cycle exists exactly when the
    undirected edges hold a cycle, or a directed arc joins two nodes of one of their
    components, or the components, contracted, carry a directed cycle.
    """
    n = tab.n_nodes
    up, down = flow < hi, flow > lo
    both = up & down
    edges = csr_matrix((np.ones(int(both.sum())), (tab.tail[both], tab.head[both])),
                       shape=(n, n))
    n_comp, comp = connected_components(edges, directed=False)
    if int(both.sum()) > n - n_comp:
        return False
    one = up ^ down
    t = comp[np.where(up, tab.tail, tab.head)[one]]
    h = comp[np.where(up, tab.head, tab.tail)[one]]
    if bool(np.any(t == h)):
        return False
    graph = csr_matrix((np.ones(len(t)), (t, h)), shape=(n_comp, n_comp))
    n_strong, _ = connected_components(graph, directed=True, connection="strong")
    return n_strong == n_comp
