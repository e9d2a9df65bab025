"""Rectangular assignment on a dense cost matrix: scipy's linear_sum_assignment."""

from __future__ import annotations

import numpy as np
from scipy.optimize import linear_sum_assignment

from service.network.model import FORBIDDEN, Flow, Network

__all__ = ["NAME", "solve"]

NAME = "linear_sum_assignment"


def solve(net: Network) -> Flow | None:
    """A least-cost matching covering the smaller side, or None.

    Parameters
    ----------
    net : an assignment-shaped network given as a cost matrix (unit supplies and demands).

    Returns
    -------
    The matched cells as a flow, or None when no matching covers the smaller side (the
    dispatcher then falls through to min-cost flow).

    Notes
    -----
    Forbidden cells are +inf. scipy implements the shortest augmenting path method of
    D. F. Crouse, "On implementing 2D rectangular assignment algorithms", IEEE TAES 52(4),
    2016. Costs are exact integers below 2**53, so float64 holds them exactly.
    """
    assert net.dense is not None
    matrix = net.dense.astype(np.float64)
    matrix[net.dense == FORBIDDEN] = np.inf
    try:
        rows, cols = linear_sum_assignment(matrix)
    except ValueError:  # "cost matrix is infeasible": the smaller side cannot be covered
        return None
    # rows come back sorted, so the cell ids are ascending
    return Flow(arc=rows.astype(np.int64) * net.n_sinks + cols,
                amount=np.ones(len(rows), np.int64))
