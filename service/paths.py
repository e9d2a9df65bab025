"""Shortest paths with negative arc costs, vectorised (Bellman-Ford in rounds).

Used for the potentials of the certificate (shortest distances in the residual graph)
and to find a negative cycle of unbounded arcs. Each round relaxes every arc at once with
numpy; the number of rounds is the depth of the shortest-path forest, small in practice.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class ShortestPaths:
    """Distances from a virtual root joined to every node by 0-cost arcs."""

    dist: np.ndarray       # int64 per node
    pred: np.ndarray       # arc index per node, -1 for none (only when asked)
    converged: bool        # False: a negative cycle exists
    last_improved: np.ndarray  # nodes improved in the final round


def bellman_ford(n: int, tail: np.ndarray, head: np.ndarray, cost: np.ndarray, *,
                 max_rounds: int | None = None, want_pred: bool = False) -> ShortestPaths:
    """Shortest distances from a virtual root with 0-cost arcs to all ``n`` nodes.

    Parameters
    ----------
    n : number of nodes; arcs are given by ``tail``, ``head`` (node indices) and integer
        ``cost``.
    max_rounds : stop after this many rounds (default ``n + 1``, enough for any graph
        without a negative cycle).
    want_pred : also record, per node, the arc of its last improvement.

    Notes
    -----
    Ahuja, Magnanti & Orlin, *Network Flows* (1993), §5.4: a round relaxes all arcs; with
    no negative cycle distances are final after at most ``n - 1`` rounds.
    """
    dist = np.zeros(n, np.int64)
    pred = np.full(n, -1, np.int64)
    empty = np.zeros(0, np.int64)
    if len(tail) == 0:
        return ShortestPaths(dist, pred, True, empty)
    order = np.argsort(head, kind="stable")
    t_s, h_s, c_s = tail[order], head[order], cost[order]
    targets, starts = np.unique(h_s, return_index=True)
    rounds = n + 1 if max_rounds is None else max_rounds
    improved_nodes = empty
    for _ in range(rounds):
        cand = dist[t_s] + c_s
        best = np.minimum.reduceat(cand, starts)
        improved = best < dist[targets]
        if not improved.any():
            return ShortestPaths(dist, pred, True, empty)
        improved_nodes = targets[improved]
        if want_pred:
            seg = np.repeat(best, np.diff(np.append(starts, len(h_s))))
            hit = (cand == seg) & improved[np.searchsorted(targets, h_s)]
            pred[h_s[hit]] = order[hit]
        dist[improved_nodes] = best[improved]
    return ShortestPaths(dist, pred, False, improved_nodes)


def cycle_through_pred(paths: ShortestPaths, tail: np.ndarray) -> list[int]:
    """A cycle of the predecessor graph, as arc indices in path order, after non-convergence."""
    v = int(paths.last_improved[0])
    seen: dict[int, int] = {}
    walk: list[int] = []
    while v not in seen:
        arc = int(paths.pred[v])
        if arc < 0:
            return []
        seen[v] = len(walk)
        walk.append(arc)
        v = int(tail[arc])
    cycle = walk[seen[v]:]
    cycle.reverse()
    return cycle
