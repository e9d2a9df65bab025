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
    Ahuja, Magnanti & Orlin, *Network Flows* (1993), §5.4, the FIFO variant: a round
    relaxes the arcs leaving the nodes improved in the round before (all nodes at first).
    After round ``k`` each distance is at most the shortest path of ``k`` arcs, so with no
    negative cycle nothing improves after ``n`` rounds.
    """
    dist = np.zeros(n, np.int64)
    pred = np.full(n, -1, np.int64)
    empty = np.zeros(0, np.int64)
    if len(tail) == 0:
        return ShortestPaths(dist, pred, True, empty)
    by_tail = np.argsort(tail, kind="stable")
    indptr = np.searchsorted(tail[by_tail], np.arange(n + 1))
    active = np.arange(n)
    rounds = n + 1 if max_rounds is None else max_rounds
    for _ in range(rounds):
        arcs = by_tail[_ranges(indptr[active], indptr[active + 1])]
        h = head[arcs]
        cand = dist[tail[arcs]] + cost[arcs]
        better = cand < dist[h]
        if not better.any():
            return ShortestPaths(dist, pred, True, empty)
        arcs, h, cand = arcs[better], h[better], cand[better]
        np.minimum.at(dist, h, cand)
        if want_pred:
            won = cand == dist[h]
            pred[h[won]] = arcs[won]
        active = np.unique(h)
    return ShortestPaths(dist, pred, False, active)


def _ranges(starts: np.ndarray, stops: np.ndarray) -> np.ndarray:
    """Concatenation of ``arange(a, b)`` for each pair, without a Python loop."""
    counts = stops - starts
    total = int(counts.sum())
    if total == 0:
        return np.zeros(0, np.int64)
    offsets = np.repeat(starts - np.concatenate(([0], np.cumsum(counts)[:-1])), counts)
    return offsets + np.arange(total)


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
