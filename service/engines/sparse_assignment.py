"""Rectangular assignment on a sparse graph: scipy's min_weight_full_bipartite_matching."""

from __future__ import annotations

import numpy as np
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import min_weight_full_bipartite_matching

from service.network import Network

__all__ = ["NAME", "solve"]

NAME = "min_weight_full_bipartite_matching"


def solve(net: Network) -> np.ndarray | None:
    """Flows (0/1 per arc) of a least-cost matching covering the smaller side, or None.

    Notes
    -----
    scipy implements LAPJVsp (Jonker & Volgenant 1987, sparse variant). It drops explicit
    zero weights, so every weight is shifted to at least 1; a full matching of the smaller
    side uses exactly ``min(n, m)`` arcs, so the shift changes every candidate's cost by
    the same amount and not the optimum.
    """
    n, m = net.n_sources, net.n_sinks
    rows, cols = net.tail, net.head - net.sink_offset
    if net.n_arcs == 0:
        return None
    weights = net.min_cost - net.min_cost.min() + 1
    graph = csr_matrix((weights.astype(np.float64), (rows, cols)), shape=(n, m))
    try:
        r, c = min_weight_full_bipartite_matching(graph)
    except ValueError:  # "no full matching exists"
        return None
    keys = rows * m + cols
    order = np.argsort(keys)
    chosen = order[np.searchsorted(keys[order], r.astype(np.int64) * m + c)]
    flow = np.zeros(net.n_arcs, np.int64)
    flow[chosen] = 1
    return flow
