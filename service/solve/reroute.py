"""Forbidding one used pair: the cheapest way to send its units around it.

A plan that puts nothing on a used arc ``a = (i, j)`` of flow ``k`` differs from the
optimum by a circulation in the residual graph that takes ``k`` units off ``a`` (the
backward arc ``j -> i``) and so sends ``k`` units from ``i`` to ``j`` through the rest of
the residual graph. Its least extra cost is ``k`` times the backward reduced cost plus a
min-cost flow of ``k`` units from ``i`` to ``j`` in the residual graph without ``a``
(Ahuja, Magnanti & Orlin, *Network Flows*, 1993, §9.3: the cost of a flow change is the
reduced cost of its circulation).

That min-cost flow is found by successive shortest paths (AMO §9.7): Dijkstra from ``i``
under the current reduced lengths, augment along the path, add the distances (capped at
the distance of ``j``) to the labels, repeat. The final labels ``l`` prove the flow
optimal: ``k (l(j) - l(i)) - sum_e u_e max(0, l(head) - l(tail) - r_e)`` is a lower
bound on every such flow (weak duality) and equals its cost (complementary slackness).
When no ``k`` units fit, the nodes reached last form a cut of residual capacity below
``k``: no plan without the pair serves the same demand.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.sparse.csgraph import dijkstra

from service.errors import OutOfRange, TooLarge
from service.solve.residual import EXACT, Residual

__all__ = ["Reroute", "reroute"]


@dataclass(frozen=True)
class Reroute:
    """How ``units`` units of one pair go around it, and the proof.

    ``extra``: least reduced cost of the rerouting flow (None: no ``units`` units fit);
    ``steps``: rows (tail, head, amount, residual arc index) of the flow, along residual
    arcs; ``labels``: int64 per node, the lower-bound labels; ``reached``: bool per node,
    with ``extra`` None the side of the cut that holds ``i``.
    """

    units: int
    extra: int | None
    steps: np.ndarray
    labels: np.ndarray
    reached: np.ndarray


def reroute(res: Residual, arc_id: int, i: int, j: int, k: int,
            budget: list[int]) -> Reroute:
    """``k`` units from ``i`` to ``j`` in ``res`` without the user arc ``arc_id``.

    ``budget``: ``[work left, the limit]``, spent at nodes + arcs per Dijkstra; TooLarge naming
    ``/prices`` when it runs out (a pair may need one augmentation per unit).
    """
    n = res.n_nodes
    keep = np.flatnonzero(res.arc != arc_id)
    t, h, r = res.tail[keep], res.head[keep], res.reduced[keep]
    # an arc without a bound never needs more than k + 1 units of room here, and with
    # k + 1 it is never full, so its labels never need a bound either
    cap = np.where(res.unbounded[keep], k + 1, res.room[keep])
    z = np.zeros(len(keep), np.int64)
    labels = np.zeros(n, np.int64)
    sent = 0
    while sent < k:
        fwd, bwd = np.flatnonzero(z < cap), np.flatnonzero(z > 0)
        length = r + labels[t] - labels[h]
        sub = Residual(n_nodes=n, tail=np.concatenate([t[fwd], h[bwd]]),
                       head=np.concatenate([h[fwd], t[bwd]]),
                       reduced=np.concatenate([length[fwd], -length[bwd]]),
                       room=np.concatenate([cap[fwd] - z[fwd], z[bwd]]),
                       unbounded=np.zeros(len(fwd) + len(bwd), bool),
                       arc=np.concatenate([fwd, bwd]),
                       forward=np.concatenate([np.ones(len(fwd), bool),
                                               np.zeros(len(bwd), bool)]))
        if len(sub) and int(sub.reduced.max()) >= EXACT:
            raise OutOfRange("an override price needs distances beyond 2**53; use smaller "
                             "costs")
        budget[0] -= n + len(sub)
        if budget[0] < 0:
            raise TooLarge("/prices: rerouting the used pairs takes more work than the "
                           "limit (setting MAX_PRICES_WORK); ask for prices on a smaller "
                           "problem", limit=budget[1], pointer="/prices")
        graph = sub.graph()
        dist, pred = dijkstra(graph.csr, directed=True, indices=i, return_predecessors=True)
        reached = np.isfinite(dist)
        if not reached[j]:
            return Reroute(k, None, _steps(res, keep, t, h, z), labels, reached)
        if float(dist[reached].max()) >= EXACT:
            raise OutOfRange("an override price needs distances beyond 2**53; use smaller "
                             "costs")
        d = np.where(reached, np.rint(dist), np.inf)
        dj = d[j]
        labels = labels + np.minimum(d, dj).astype(np.int64)
        nodes = [j]
        while nodes[-1] != i:
            nodes.append(int(pred[nodes[-1]]))
        nodes.reverse()
        e = graph.best[graph.entry(np.array(nodes[:-1]), np.array(nodes[1:]))]
        along = sub.forward[e]
        which = sub.arc[e]
        push = min(k - sent, int(sub.room[e].min()))
        z[which[along]] += push
        z[which[~along]] -= push
        sent += push
    extra = int(np.dot(z, r))
    return Reroute(k, extra, _steps(res, keep, t, h, z), labels, np.ones(n, bool))


def _steps(res: Residual, keep: np.ndarray, t: np.ndarray, h: np.ndarray,
           z: np.ndarray) -> np.ndarray:
    """Rows (tail, head, amount, residual arc index) of the arcs that carry flow."""
    on = np.flatnonzero(z > 0)
    return np.stack([t[on], h[on], z[on], keep[on]], axis=1).astype(np.int64)
