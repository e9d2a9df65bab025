"""Assignment on a dense cost matrix: lapjv when square, else scipy's linear_sum_assignment."""

from __future__ import annotations

from typing import Literal

import lapjv
import numpy as np
from scipy.optimize import linear_sum_assignment

from service.network.model import FORBIDDEN, Flow, Network
from service.solve import isolation
from service.solve.engines import Run

__all__ = ["NAME", "SQUARE_NAME", "solve"]

NAME = "linear_sum_assignment"
SQUARE_NAME = "lapjv"

#: lapjv computes in float64: costs, their sums along augmenting paths and its duals stay
#: exact integers while n x (cost range + the forbidden-cell surcharge) is below this.
_FLOAT_EXACT = 2**50


def solve(net: Network) -> tuple[str, Run] | None:
    """A least-cost matching covering the smaller side, with the engine's name; or None.

    Parameters
    ----------
    net : an assignment-shaped network given as a cost matrix (unit supplies and demands).

    Returns
    -------
    (engine name, run), or None when no matching covers the smaller side (the dispatcher
    then falls through to min-cost flow). A square matrix is solved by lapjv, which also
    returns its duals; a rectangular one, or one whose costs are too large for exact
    float64, by scipy, without duals.

    Notes
    -----
    lapjv: R. Jonker and A. Volgenant, "A shortest augmenting path algorithm for dense and
    sparse linear assignment problems", Computing 38 (1987), 325-340; O(n^3), always in
    float64 (``force_doubles``: its default float32 mode loses exactness above 2**24).
    Forbidden cells get a surcharge ``n x range + 1`` above every allowed cost, so any
    matching avoiding them is cheaper than any using one; an optimum that uses one proves
    that no perfect matching avoids them. scipy: the shortest augmenting path method of
    D. F. Crouse, "On implementing 2D rectangular assignment algorithms", IEEE TAES 52(4),
    2016, O(n^2 m) for n <= m, forbidden cells as +inf.
    """
    assert net.dense is not None
    n, m = net.dense.shape
    if n == m and n > 0:
        run = _square(net)
        if run is None or isinstance(run, Run):
            return None if run is None else (SQUARE_NAME, run)
    out = isolation.run(_rectangular, net.dense, work=min(n, m) ** 2 * max(n, m))
    if "rows" not in out:
        return None
    # rows come back sorted, so the cell ids are ascending
    rows = out["rows"].astype(np.int64)
    return NAME, Run(Flow(arc=rows * m + out["cols"], amount=np.ones(len(rows), np.int64)))


def _square(net: Network) -> Run | None | Literal[False]:
    """lapjv's matching and duals; None: no perfect matching; False: costs too large."""
    dense = net.dense
    assert dense is not None
    n = dense.shape[0]
    allowed = dense != FORBIDDEN
    everywhere = bool(allowed.all())
    # reductions with ``where`` read the matrix in place: no copy of its allowed cells
    low = int(dense.min(where=allowed, initial=FORBIDDEN))
    high = int(dense.max(where=allowed, initial=-FORBIDDEN))
    surcharge = 0 if everywhere else n * (high - low) + 1
    if n * (high - low + surcharge) >= _FLOAT_EXACT:
        return False
    out = isolation.run(_lapjv, dense, low, None if everywhere else high + surcharge,
                        work=n**3)
    col = out["col"].astype(np.int64)
    cells = np.arange(n, dtype=np.int64) * n + col
    if not allowed.reshape(-1)[cells].all():
        return None
    duals = np.zeros(net.n_user + 3)
    duals[:n] = out["u"] + low
    duals[n:2 * n] = -out["v"]
    # every supply and demand arc is full: S above every source, T and P below every sink
    duals[net.n_user] = duals[:n].max()
    duals[net.n_user + 1:] = duals[n:2 * n].min()
    return Run(Flow(arc=cells, amount=np.ones(n, np.int64)), duals)


def _lapjv(dense: np.ndarray, low: int, forbidden: int | None) -> isolation.Arrays:
    """The bare lapjv call on costs shifted to start at 0 (built here, in the child)."""
    matrix = dense.astype(np.float64)
    matrix -= low                       # exact: integers of magnitude below 2**53
    if forbidden is not None:
        matrix[dense == FORBIDDEN] = float(forbidden - low)
    col, _, (_, u, v) = lapjv.lapjv(matrix, force_doubles=True)
    return {"col": col, "u": u, "v": v}


def _rectangular(dense: np.ndarray) -> isolation.Arrays:
    """The bare scipy call; nothing when no matching covers the smaller side."""
    matrix = dense.astype(np.float64)
    matrix[dense == FORBIDDEN] = np.inf
    try:
        rows, cols = linear_sum_assignment(matrix)
    except ValueError:  # "cost matrix is infeasible": the smaller side cannot be covered
        return {}
    return {"rows": rows, "cols": cols}
