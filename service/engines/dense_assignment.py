"""Rectangular assignment on a dense cost matrix: scipy's linear_sum_assignment."""

from __future__ import annotations

import numpy as np
from scipy.optimize import linear_sum_assignment

from service.network import Network

__all__ = ["NAME", "solve"]

NAME = "linear_sum_assignment"


def solve(net: Network) -> np.ndarray | None:
    """Flows (0/1 per arc) of a least-cost matching covering the smaller side, or None.

    Parameters
    ----------
    net : an assignment-shaped network (unit supplies and demands, source->sink arcs,
        at most one arc per pair).

    Returns
    -------
    Flow per arc of ``net``, or None when no matching covers the smaller side (the
    dispatcher then falls through to min-cost flow).

    Notes
    -----
    Forbidden pairs are +inf. scipy implements the shortest augmenting path method of
    D. F. Crouse, "On implementing 2D rectangular assignment algorithms", IEEE TAES 52(4),
    2016. Costs are exact integers below 2**53, so float64 holds them exactly.
    """
    n, m = net.n_sources, net.n_sinks
    rows, cols = net.tail, net.head - net.sink_offset
    matrix = np.full((n, m), np.inf)
    matrix[rows, cols] = net.min_cost
    try:
        r, c = linear_sum_assignment(matrix)
    except ValueError:  # "cost matrix is infeasible": the smaller side cannot be covered
        return None
    arc_of_cell = np.full((n, m), -1, np.int64)
    arc_of_cell[rows, cols] = np.arange(net.n_arcs)
    flow = np.zeros(net.n_arcs, np.int64)
    flow[arc_of_cell[r, c]] = 1
    return flow
