"""Bounds of many frontier cells of one split plan at once (see :mod:`service.check.cells`).

Each cell's proof names a few nodes with their distances and a shift for every other node;
its bound is ``cost(x) - sum g_a`` over the arcs at those nodes and the cell's branch pair
(the other arcs keep ``g_a = 0``, as the plan's own certificate proved). Here the arcs of
all cells are gathered into one table, the reduced costs and the cell bounds of every row
computed with numpy, and the ``g_a`` summed per cell in int64, after a float bound has
shown that no sum can wrap (else :func:`bounds` declines and the caller goes cell by cell).
"""

from __future__ import annotations

import numpy as np

from service.check.cells import INF, Table

#: Sums whose float bound stays below this are exact in int64.
_SAFE = 2.0**61


def _gather(ptr: np.ndarray, order: np.ndarray, nodes: np.ndarray, cells: np.ndarray
            ) -> tuple[np.ndarray, np.ndarray]:
    """The arcs listed for each node (``order[ptr[v]:ptr[v+1]]``) and the cell of each."""
    counts = ptr[nodes + 1] - ptr[nodes]
    total = int(counts.sum())
    ends = np.cumsum(counts)
    idx = np.arange(total) - np.repeat(ends - counts, counts) + np.repeat(ptr[nodes], counts)
    return order[idx], np.repeat(cells, counts)


def bounds(tab: Table, x: np.ndarray, pi: np.ndarray, lo: np.ndarray, hi: np.ndarray,
           rank: np.ndarray, branch: np.ndarray, cost: int, index: np.ndarray,
           below: np.ndarray, shift: np.ndarray, cell_of: np.ndarray, node: np.ndarray,
           dist: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
    """(bound per cell, mask of cells whose dual is minus infinity), or None when int64
    could wrap. ``index``, ``below``, ``shift``: per cell; ``cell_of``, ``node``,
    ``dist``: per named node, no node named twice in a cell."""
    if pi.dtype == object or not len(index):
        return None if len(index) else (np.zeros(0, np.int64), np.zeros(0, bool))
    n = tab.n_nodes
    n_cells = len(index)
    keys = cell_of * n + node
    order = np.argsort(keys, kind="stable")
    sorted_keys, sorted_dist = keys[order], dist[order]

    def named(cells: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        want = cells * n + v
        at = np.minimum(np.searchsorted(sorted_keys, want), max(len(sorted_keys) - 1, 0))
        found = (sorted_keys[at] == want) if len(sorted_keys) else np.zeros(len(want), bool)
        return found, sorted_dist[at] if len(sorted_keys) else np.zeros(len(want), np.int64)

    out_arc, out_cell = _gather(tab.tail_ptr, tab.by_tail, node, cell_of)
    in_arc, in_cell = _gather(tab.head_ptr, tab.by_head, node, cell_of)
    inside, _ = named(in_cell, tab.tail[in_arc])       # counted among the arcs leaving
    every = np.arange(n_cells)
    a = branch[index]
    t_in, _ = named(every, tab.tail[a])
    h_in, _ = named(every, tab.head[a])
    alone = ~(t_in | h_in)
    arcs = np.concatenate([out_arc, in_arc[~inside], a[alone]])
    cells = np.concatenate([out_cell, in_cell[~inside], every[alone]])

    def potential(v: np.ndarray) -> np.ndarray:
        found, d = named(cells, v)
        return pi[v] - np.where(found, d, shift[cells])

    reduced = tab.cost[arcs] - potential(tab.tail[arcs]) + potential(tab.head[arcs])
    flow = x[arcs]
    low, up = lo[arcs].copy(), hi[arcs].copy()
    r, at_cell = rank[arcs], index[cells]
    fixed = (r >= 0) & (r < at_cell)
    low[fixed] = up[fixed] = flow[fixed]
    here = r == at_cell
    side = below[cells]
    up = np.where(here & side, flow - 1, up)
    low = np.where(here & ~side, flow + 1, low)
    negative = reduced < 0
    endless = np.zeros(n_cells, bool)
    endless[cells[negative & (up >= INF)]] = True
    cap = np.where(negative & (up < INF), up, 0)
    size = np.abs(reduced).astype(np.float64) * np.maximum(
        np.abs(flow), np.maximum(np.abs(low), np.abs(cap))).astype(np.float64)
    if len(size) and float(size.max()) * 3 * max(1, len(size)) >= _SAFE:
        return None
    g = (reduced * flow - low * np.maximum(reduced, 0) + cap * np.maximum(-reduced, 0))
    total = np.zeros(n_cells, np.int64)
    np.add.at(total, cells, g)
    return cost - total, endless
