"""Shortest paths with negative arc costs, vectorised (Bellman-Ford in rounds).

Used for the potentials of the certificate (shortest distances in the residual graph)
and to find a negative cycle of unbounded arcs. Each round relaxes every arc at once with
numpy; the number of rounds is the depth of the shortest-path forest, small in practice.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class ShortestPaths:
    """Distances from a virtual root joined to every node by 0-cost arcs."""

    dist: np.ndarray       # int64 per node
    pred: np.ndarray       # arc index per node, -1 for none (only when asked)
    converged: bool        # False: a negative cycle exists
    last_improved: np.ndarray  # nodes improved in the final round


@dataclass(frozen=True)
class DenseBlock:
    """Arcs from every row node to every column node, costs in a matrix.

    Row ``i`` is node ``row_start + i``, column ``j`` node ``col_start + j``; a cell of at
    least :data:`service.network.model.FORBIDDEN` is no arc (its candidate distance never wins,
    since distances never exceed 0).
    """

    row_start: int
    col_start: int
    cost: np.ndarray


#: Rows of a dense block relaxed at once: bounds the temporary to this x columns.
_CHUNK_ROWS = 256


def bellman_ford(n: int, tail: np.ndarray, head: np.ndarray, cost: np.ndarray, *,
                 dense: DenseBlock | None = None, max_rounds: int | None = None,
                 want_pred: bool = False, smallest_first: bool = False) -> ShortestPaths:
    """Shortest distances from a virtual root with 0-cost arcs to all ``n`` nodes.

    Parameters
    ----------
    n : number of nodes; arcs are given by ``tail``, ``head`` (node indices) and integer
        ``cost``, plus, optionally, a ``dense`` block of arcs given as a matrix.
    max_rounds : stop after this many FIFO rounds (default ``n + 1``, enough for any graph
        without a negative cycle).
    want_pred : also record, per node, the arc of its last improvement (listed arcs only).
    smallest_first : first scan, in batches, the pending nodes of smallest distance (a
        label-correcting method in Dijkstra's order), within a budget of node scans; then
        FIFO rounds from the distances reached. Same answer, far fewer scans when the
        shortest-path forest is deep (the residual graph of an assignment).

    Notes
    -----
    Ahuja, Magnanti & Orlin, *Network Flows* (1993), §5.4: the FIFO variant relaxes, each
    round, the arcs leaving the nodes improved in the round before (all nodes at first).
    After round ``k`` each distance is at most the shortest path of ``k`` arcs, so with no
    negative cycle nothing improves after ``n`` rounds. The same section's label-correcting
    framework allows any order of scanning: a node is pending from when its distance drops
    until its arcs are relaxed, so no pending node means every arc is satisfied. Scanning
    the smallest distances first settles most nodes once, as Dijkstra's method would with
    non-negative costs; the FIFO rounds that follow keep the ``n``-round bound, and so the
    negative-cycle test, whatever the start.
    """
    dist = np.zeros(n, np.int64)
    pred = np.full(n, -1, np.int64)
    empty = np.zeros(0, np.int64)
    by_tail = order_by(tail, n)
    # the arcs in tail order, so that a node's arcs are one contiguous slice
    head_t, cost_t = head[by_tail], cost[by_tail]
    indptr = np.searchsorted(tail[by_tail], np.arange(n + 1))
    slot = np.zeros(n, np.int64)            # scratch for de-duplicating improved nodes

    def scan(nodes: np.ndarray) -> list[np.ndarray]:
        """Relax the arcs leaving ``nodes``; the nodes improved, possibly repeated."""
        improved = []
        starts, stops = indptr[nodes], indptr[nodes + 1]
        at = _ranges(starts, stops)
        if len(at):
            h = head_t[at]
            cand = np.repeat(dist[nodes], stops - starts) + cost_t[at]
            better = cand < dist[h]
            if better.any():
                at, h, cand = at[better], h[better], cand[better]
                np.minimum.at(dist, h, cand)
                if want_pred:
                    won = cand == dist[h]
                    pred[h[won]] = by_tail[at[won]]
                improved.append(h)
        if dense is not None:
            improved.append(_relax_dense(dist, nodes, dense))
        return improved

    active = np.arange(n)
    if smallest_first:
        active = _smallest_first(dist, active, scan, slot)
    rounds = n + 1 if max_rounds is None else max_rounds
    for _ in range(rounds):
        if len(active) == 0:
            break
        improved = scan(active)
        active = _distinct(np.concatenate(improved), slot) if improved else empty
    converged = len(active) == 0
    return ShortestPaths(dist, pred, converged, empty if converged else active)


#: Smallest-first batches: this share of the pending nodes, and at least this many or
#: n / _BATCH_PER_NODES (a batch is one vectorised pass: too small and the per-pass cost
#: dominates, too large and it is FIFO again). Measured on the benchmark's families.
_BATCH_SHARE = 0.02
_BATCH_MIN = 64
_BATCH_PER_NODES = 64
#: Node scans allowed before handing over to FIFO rounds, per node (a deep forest took
#: about 4-7 per node; a negative cycle would scan for ever).
_SCAN_BUDGET = 20


def _smallest_first(dist: np.ndarray, pending: np.ndarray,
                    scan: Callable[[np.ndarray], list[np.ndarray]],
                    slot: np.ndarray) -> np.ndarray:
    """Scan pending nodes, smallest distance first, in batches; the nodes still pending."""
    n = len(dist)
    floor = max(_BATCH_MIN, n // _BATCH_PER_NODES)
    budget = _SCAN_BUDGET * n
    while len(pending) and budget > 0:
        k = max(floor, int(len(pending) * _BATCH_SHARE))
        rest = pending[:0]
        if len(pending) > k:
            d = dist[pending]
            cut = d <= np.partition(d, k)[k]
            pending, rest = pending[cut], pending[~cut]
        budget -= len(pending)
        pending = _distinct(np.concatenate([rest, *scan(pending)]), slot)
    return pending


def _relax_dense(dist: np.ndarray, active: np.ndarray, block: DenseBlock) -> np.ndarray:
    """Relax the block's arcs out of the active row nodes; the column nodes improved."""
    n_rows, n_cols = block.cost.shape
    rows = active[(active >= block.row_start) & (active < block.row_start + n_rows)]
    if len(rows) == 0:
        return np.zeros(0, np.int64)
    cols = slice(block.col_start, block.col_start + n_cols)
    best = np.full(n_cols, np.iinfo(np.int64).max, np.int64)
    for k in range(0, len(rows), _CHUNK_ROWS):
        part = rows[k: k + _CHUNK_ROWS]
        cand = block.cost[part - block.row_start] + dist[part][:, None]
        np.minimum(best, cand.min(axis=0), out=best)
    better = best < dist[cols]
    dist[cols] = np.where(better, best, dist[cols])
    return np.flatnonzero(better) + block.col_start


def _distinct(nodes: np.ndarray, slot: np.ndarray) -> np.ndarray:
    """The distinct values of ``nodes`` in linear time (``slot`` is scratch of size n)."""
    position = np.arange(len(nodes))
    slot[nodes] = position                  # the last write for each node wins
    return nodes[slot[nodes] == position]


def order_by(keys: np.ndarray, n: int) -> np.ndarray:
    """Stable order of non-negative integer ``keys`` below ``n``, in linear time.

    numpy sorts 16-bit keys by radix; larger ones take two stable 16-bit passes (low
    half, then high half), which beats a comparison sort on large arrays.
    """
    if n <= 1 << 16:
        return np.argsort(keys.astype(np.uint16), kind="stable")
    assert n <= 1 << 32
    low = np.argsort((keys & 0xFFFF).astype(np.uint16), kind="stable")
    high = (keys[low] >> 16).astype(np.uint16)
    return low[np.argsort(high, kind="stable")]


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
