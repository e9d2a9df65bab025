"""Rectangular assignment on a sparse graph: scipy's min_weight_full_bipartite_matching."""

from __future__ import annotations

import numpy as np
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import min_weight_full_bipartite_matching

from service.network.model import Flow, Network
from service.solve import isolation
from service.solve.engines import Run
from service.solve.paths import order_by

__all__ = ["NAME", "solve"]

NAME = "min_weight_full_bipartite_matching"


def solve(net: Network) -> Run | None:
    """A least-cost matching covering the smaller side, or None.

    Returns
    -------
    The matched arcs as a flow, without duals (scipy does not return them).

    Notes
    -----
    scipy implements LAPJVsp (Jonker & Volgenant 1987, sparse variant): one shortest
    augmenting path per row, each O(n^2 + arcs) steps at most. It drops explicit zero
    weights, so every weight is shifted to at least 1; a full matching of the smaller side
    uses exactly ``min(n, m)`` arcs, so the shift changes every candidate's cost by the
    same amount and not the optimum.
    """
    n, m = net.n_sources, net.n_sinks
    arcs = net.arcs
    if len(arcs) == 0:
        return None
    rows, cols = arcs.tail, arcs.head - net.sink_offset
    # one sort by (row, column) builds the CSR directly and maps the matching back to arcs
    keys = rows * m + cols
    order = order_by(keys, n * m)
    weights = arcs.cost[order] - arcs.cost.min() + 1
    indptr = np.searchsorted(rows[order], np.arange(n + 1))
    side = min(n, m)
    out = isolation.run(_call, weights, cols[order], indptr, n, m,
                        work=side * (side**2 + len(arcs)))
    if "rows" not in out:
        return None
    r, c = out["rows"], out["cols"]
    chosen = arcs.id[order[np.searchsorted(keys[order], r.astype(np.int64) * m + c)]]
    chosen.sort()
    return Run(Flow(arc=chosen, amount=np.ones(len(chosen), np.int64)))


def _call(weights: np.ndarray, cols: np.ndarray, indptr: np.ndarray, n: int,
          m: int) -> isolation.Arrays:
    """The bare library call: the matched (row, column) pairs, or nothing."""
    graph = csr_matrix((weights.astype(np.float64), cols, indptr), shape=(n, m))
    try:
        r, c = min_weight_full_bipartite_matching(graph)
    except ValueError:  # "no full matching exists"
        return {}
    return {"rows": r, "cols": c}
