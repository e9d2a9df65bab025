"""The residual graph of an answer: every way a plan can change, with its reduced cost.

From an optimal flow ``x`` on the extended network (:mod:`service.solve.extended`) and the
exact potentials ``pi`` of its certificate, the residual graph has

* a *forward* arc ``i -> j`` for every arc with ``x < u`` (or no bound), of room ``u - x``
  and reduced cost ``c - pi(i) + pi(j)``: sending more along the arc;
* a *backward* arc ``j -> i`` for every arc with ``x > 0``, of room ``x`` and reduced cost
  ``-(c - pi(i) + pi(j))``: sending less.

Complementary slackness (Ahuja, Magnanti & Orlin, *Network Flows*, 1993, thm 9.4) makes
every reduced cost ``>= 0``, which is checked here in exact int64. Any other flow of the
same network is ``x`` plus a circulation in this graph, and its extra cost is the sum of
the reduced costs along that circulation (AMO §9.3, the reduced-cost form of the cost of a
cycle): the graph is the one representation the next-best plans and the override prices
both start from. Matrix cells are unbounded, so each allowed cell is a forward arc here,
materialised (callers bound the size before they ask).

:meth:`Residual.graph` gives the scipy CSR form for ``scipy.sparse.csgraph.dijkstra``,
forward or reversed, parallel arcs merged to their cheapest (scipy would add them up), and
which residual arc stands behind each entry.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.sparse import csr_array

from service.errors import CertificateFailure
from service.network.model import Flow, Network
from service.solve.certificate import Certificate
from service.solve.paths import order_by

__all__ = ["EXACT", "Graph", "Residual", "residual_graph"]

#: float64 holds every integer below this exactly, with room for one addition; lengths
#: and distances of :meth:`Residual.graph` are exact below it.
EXACT = 2**53


@dataclass(frozen=True)
class Graph:
    """A residual graph in CSR form for scipy: one entry per (tail, head) pair.

    ``best[e]`` is the residual arc behind CSR entry ``e`` (the cheapest of its parallel
    arcs); ``key`` the sorted ``row * n + column`` of the entries, to find them again.
    ``reverse``: rows are heads and columns tails (distances *to* a node).
    """

    csr: csr_array
    best: np.ndarray
    key: np.ndarray
    reverse: bool

    def entry(self, row: np.ndarray, col: np.ndarray) -> np.ndarray:
        """CSR entry of each (row, column) pair, -1 where the graph has none."""
        n = self.csr.shape[0]
        want = np.asarray(row, np.int64) * n + np.asarray(col, np.int64)
        at = np.searchsorted(self.key, want)
        inside = at < len(self.key)
        found = inside & (self.key[np.where(inside, at, 0)] == want)
        return np.where(found, at, -1)


@dataclass(frozen=True)
class Residual:
    """The residual arcs of one answer (see module docstring), in parallel arrays."""

    n_nodes: int              # nodes of the extended network: user nodes, then S, T, P
    tail: np.ndarray          # int64
    head: np.ndarray          # int64
    reduced: np.ndarray       # int64, >= 0
    room: np.ndarray          # int64 residual capacity (meaningless where unbounded)
    unbounded: np.ndarray     # bool: a forward arc of an arc without a bound
    arc: np.ndarray           # int64: user arc id (>= 0), or -1 - k for virtual arc k
    forward: np.ndarray       # bool: forward (more flow) or backward (less flow)

    def __len__(self) -> int:
        return len(self.tail)

    def graph(self, *, reverse: bool = False, keep: np.ndarray | None = None) -> Graph:
        """The CSR graph of the arcs in ``keep`` (all by default), lengths = reduced costs.

        Parameters
        ----------
        reverse : rows are heads, so a Dijkstra from a row gives distances *to* it.
        keep : mask of the residual arcs to include.

        Notes
        -----
        Parallel arcs become one entry of the least length; ``best`` names it. Lengths go
        to float64, exact while below :data:`EXACT` (callers refuse distances beyond).
        """
        chosen = np.arange(len(self)) if keep is None else np.flatnonzero(keep)
        rows, cols = self.tail[chosen], self.head[chosen]
        if reverse:
            rows, cols = cols, rows
        n = self.n_nodes
        # order by (row, column, length): the first of each run is the cheapest
        by_len = np.argsort(self.reduced[chosen], kind="stable")
        by_col = by_len[order_by(cols[by_len], n)]
        order = by_col[order_by(rows[by_col], n)]
        key = rows[order] * np.int64(n) + cols[order]
        first = np.concatenate(([True], key[1:] != key[:-1])) if len(key) else key.astype(bool)
        order, key = order[first], key[first]
        r = rows[order]
        indptr = np.searchsorted(r, np.arange(n + 1)).astype(np.int64)
        csr = csr_array((self.reduced[chosen][order].astype(np.float64),
                         cols[order].astype(np.int32), indptr), shape=(n, n))
        return Graph(csr=csr, best=chosen[order], key=key, reverse=reverse)


def user_flow(net: Network, flow: Flow) -> np.ndarray:
    """Flow per position of ``net.arcs`` (for a matrix, its allowed cells in row order)."""
    arcs = net.arcs
    x = np.zeros(len(arcs), np.int64)
    if net.arc_list is not None:
        x[flow.arc] = flow.amount            # arc ids of a list are positions
    else:
        x[np.searchsorted(arcs.id, flow.arc)] = flow.amount
    return x


def residual_graph(net: Network, flow: Flow, cert: Certificate) -> Residual:
    """The residual graph of ``flow`` with reduced costs under ``cert``'s potentials.

    Raises CertificateFailure when a reduced cost is negative (the potentials do not prove
    the flow optimal), which a certified answer never has.
    """
    arcs, ext, pi = net.arcs, cert.ext, cert.potential
    x = user_flow(net, flow)
    xv = cert.virtual_flow
    n_virtual = len(ext.tail)
    tail = np.concatenate([arcs.tail, ext.tail])
    head = np.concatenate([arcs.head, ext.head])
    cost = np.concatenate([arcs.cost, ext.cost])
    cap = np.concatenate([arcs.capacity, ext.capacity])
    bounded = np.concatenate([arcs.bounded, np.ones(n_virtual, bool)])
    amount = np.concatenate([x, xv])
    name = np.concatenate([arcs.id, -1 - np.arange(n_virtual, dtype=np.int64)])
    reduced = cost - pi[tail] + pi[head]
    fwd = ~bounded | (amount < cap)
    bwd = amount > 0
    res = Residual(
        n_nodes=ext.n_nodes,
        tail=np.concatenate([tail[fwd], head[bwd]]),
        head=np.concatenate([head[fwd], tail[bwd]]),
        reduced=np.concatenate([reduced[fwd], -reduced[bwd]]),
        room=np.concatenate([np.where(bounded[fwd], cap[fwd] - amount[fwd], 0), amount[bwd]]),
        unbounded=np.concatenate([~bounded[fwd], np.zeros(int(bwd.sum()), bool)]),
        arc=np.concatenate([name[fwd], name[bwd]]),
        forward=np.concatenate([np.ones(int(fwd.sum()), bool), np.zeros(int(bwd.sum()), bool)]),
    )
    if len(res) and int(res.reduced.min()) < 0:
        raise CertificateFailure("a residual arc has a negative reduced cost: the potentials "
                                 "do not prove the flow optimal")
    return res
