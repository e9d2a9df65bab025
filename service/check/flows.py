"""Reading an answer's allocation, unmet and unused rows against the problem's arcs."""

from __future__ import annotations

from typing import Any

import numpy as np

from service.check.checks import _Checks
from service.check.exact import (
    _first,
    _grid_values,
    _has_repeats,
    _ids_to_index,
    _products,
    _show,
)
from service.network.model import Network


def _allocation(net: Network, rows: Any, index: dict[str, int], checks: _Checks
                ) -> tuple[np.ndarray, np.ndarray] | None:
    """(arc ids, flows) named by the allocation rows, or None (check failed)."""
    n = len(rows)
    tails = _ids_to_index(rows.columns["from"], index)
    heads = _ids_to_index(rows.columns["to"], index)
    unknown = _first((tails < 0) | (heads < 0))
    if unknown is not None:
        checks.add("allocation_arcs", f"allocation row {unknown} names an unknown id", "")
        return None
    arc_given = rows.present["arc"] if "arc" in rows.present else np.zeros(n, bool)
    if net.dense is not None:
        if arc_given.any():
            checks.add("allocation_arcs", "allocation rows carry 'arc' but the problem "
                       "gives a cost matrix", "")
            return None
        col = heads - net.sink_offset
        cell = (tails < net.n_sources) & (col >= 0) & (col < net.n_sinks)
        arc = np.where(cell, tails * net.n_sinks + col, -1)
        missing = _first(~net.arc_exists(arc))
    else:
        arc = np.full(n, -1, np.int64)
        arc[arc_given] = rows.columns["arc"][arc_given]
        exists = net.arc_exists(arc)
        wrong = _first(arc_given & ~exists)
        if wrong is None and arc_given.any():
            given = np.flatnonzero(arc_given)
            t, h = net.endpoints(arc[given])
            mismatch = _first((t != tails[given]) | (h != heads[given]))
            wrong = None if mismatch is None else int(given[mismatch])
        if wrong is not None:
            checks.add("allocation_arcs", f"allocation row {wrong}: arc {arc[wrong]} does "
                       f"not join {rows.columns['from'][wrong]} to {rows.columns['to'][wrong]}",
                       "")
            return None
        missing = None
        lookup = ~arc_given
        if lookup.any():
            arcs = net.arcs
            keys = arcs.tail * net.n_user + arcs.head
            order = np.argsort(keys, kind="stable")
            sorted_keys = keys[order]
            want = tails * net.n_user + heads
            lo = np.searchsorted(sorted_keys, want, "left")
            hi = np.searchsorted(sorted_keys, want, "right")
            missing = _first(lookup & (lo == hi))
            ambiguous = _first(lookup & (hi - lo > 1))
            if missing is None and ambiguous is not None:
                checks.add("allocation_arcs", f"allocation row {ambiguous}: several arcs join "
                           "this pair; give the arc index in 'arc'", "")
                return None
            if missing is None:
                arc[lookup] = order[lo[lookup]]
    if missing is not None:
        checks.add("allocation_arcs", f"allocation row {missing}: no allowed arc "
                   f"{rows.columns['from'][missing]} -> {rows.columns['to'][missing]}", "")
        return None
    if _has_repeats(arc):
        checks.add("allocation_arcs", "an arc appears in more than one allocation row", "")
        return None
    checks.add("allocation_arcs", None, "every row names one allowed arc")
    x = rows.columns["flow"].astype(np.int64)
    if "cost" in rows.present:
        checks.add("allocation_costs", _row_cost_differs(net, rows, arc, x),
                   "row costs are flow x arc cost")
    return arc, x


def _row_cost_differs(net: Network, rows: Any, arc: np.ndarray, x: np.ndarray) -> str | None:
    """The first row whose reported cost is not exactly flow x the caller's arc cost."""
    given = rows.present["cost"]
    exact = _products(x, net.arc_cost(arc) * net.sign)
    reported, not_whole = _grid_values(rows.columns["cost"], net.cost_scale)
    off = _first(given & (not_whole | (reported != exact)))
    if off is None:
        return None
    return (f"allocation row {off}: cost {rows.columns['cost'][off]}, flow x arc cost is "
            f"{_show(int(exact[off]), net.cost_scale)}")


def _amounts_differ(rows: Any, actual: np.ndarray, ids: list[str], index: dict[str, int],
                    start: int, count: int, kind: str, hard: np.ndarray | None = None
                    ) -> str | None:
    """What is wrong with reported unmet or unused amounts, or None.

    ``hard`` (unmet rows only) says which sinks have hard demand; a row's optional
    ``hard`` flag must agree with it.
    """
    where = _ids_to_index(rows.columns["id"], index) - start
    stray = _first((where < 0) | (where >= count))
    if stray is not None:
        return f"{rows.columns['id'][stray]!r} is not a {kind}"
    if _has_repeats(where):
        return f"a {kind} is listed more than once"
    reported = np.zeros(count, np.int64)
    reported[where] = rows.columns["amount"]          # each at most once: checked above
    bad = _first(reported != actual)
    if bad is not None:
        return f"{kind} {ids[start + bad]}: reported {reported[bad]}, actual {actual[bad]}"
    if hard is None or "hard" not in rows.present:
        return None
    flags = rows.columns["hard"]
    wrong = _first(rows.present["hard"] & (flags != hard[where]))
    if wrong is None:
        return None
    really = "hard" if hard[where[wrong]] else "soft (it has a penalty)"
    return (f"{kind} {rows.columns['id'][wrong]}: reported hard "
            f"{str(bool(flags[wrong])).lower()}, but its demand is {really}")
