"""Checking why each unmet sink waits, from the definitions (README, "Why a sink waits").

For every unmet row that gives a ``reason``:

* ``no-eligible-source`` exactly when no source with supply reaches the sink over arcs that
  can carry flow (a request-only search);
* ``capacity`` exactly when it is eligible and no source with spare supply reaches it in the
  residual graph of the answer's allocation (a hard sink then lies on the sink side of every
  cut that proves the hard shortfall, so ``shortfall_cut`` covers that);
* ``penalty`` otherwise, only for a soft sink, and its ``reduced_cost`` must be
  ``pi(super-source) - pi(sink) - penalty`` exactly (and so at least 0 once complementary
  slackness holds).

A hard sink reached by spare supply would make the hard shortfall not least: no reason
fits it, and the check fails.
"""

from __future__ import annotations

from itertools import repeat
from typing import Any

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import breadth_first_order

from service.check.exact import _first, _grid_values, _ids_to_index, _show
from service.network.model import FORBIDDEN, Network

_KNOWN = ("no-eligible-source", "capacity", "penalty")
_CODE = {name: k for k, name in enumerate(_KNOWN)}
_BLOCK = 512


def _reasons_differ(net: Network, rows: Any, index: dict[str, int], arc: np.ndarray,
                    x: np.ndarray, spare: np.ndarray, pi: np.ndarray,
                    within: Network) -> str | None:
    """What is wrong with the reasons the unmet rows give, or None (also when none do).
    ``within``: the network whose residual graph counts (``net`` itself, or a bottleneck's
    pairs at or below the threshold)."""
    if "reason" not in rows.present:
        return None
    ids = rows.columns["id"]
    # rows naming no sink are the unmet check's to report; a row of 0 says nothing
    where = _ids_to_index(ids, index) - net.sink_offset
    given = np.flatnonzero(rows.present["reason"] & (rows.columns["amount"] > 0)
                           & (where >= 0) & (where < net.n_sinks))
    if not len(given):
        return None
    said = [rows.columns["reason"][i] for i in given.tolist()]
    code = np.fromiter(map(_CODE.get, said, repeat(-1)), np.int64, len(said))
    unknown = _first(code < 0)
    if unknown is not None:
        return f"unknown reason {said[unknown]!r}; the reasons are {', '.join(_KNOWN)}"
    off = net.sink_offset
    sink = where[given]
    node = sink + off
    fed = _search(net, net.supply > 0, None, None)[node]
    open_ = _search(within, spare > 0, arc, x)[node]
    hard = ~net.soft[sink]
    stuck = _first(fed & open_ & hard)
    if stuck is not None:
        return (f"hard sink {ids[int(given[stuck])]} can be reached from a source with spare "
                "supply: the hard shortfall is not least, and no reason fits")
    truth = np.where(~fed, 0, np.where(~open_, 1, 2))
    bad = _first(code != truth)
    if bad is not None:
        return (f"sink {ids[int(given[bad])]} waits for {_KNOWN[int(truth[bad])]}, "
                f"not {said[bad]}")
    return _prices_differ(net, rows, given, sink, said, pi)


def _prices_differ(net: Network, rows: Any, given: np.ndarray, sink: np.ndarray,
                   said: list[str], pi: np.ndarray) -> str | None:
    """A ``penalty`` row needs ``reduced_cost`` = pi(S) - pi(t) - penalty(t), exactly; the
    other rows must not carry one."""
    has = (rows.present["reduced_cost"][given] if "reduced_cost" in rows.present
           else np.zeros(len(given), bool))
    priced = np.array([r == "penalty" for r in said], bool)
    wrong = _first(has != priced)
    if wrong is not None:
        name = rows.columns["id"][int(given[wrong])]
        return (f"sink {name}: a reduced_cost goes with reason penalty, and only with it")
    if not priced.any():
        return None
    at = np.flatnonzero(priced)
    reported, not_whole = _grid_values(rows.columns["reduced_cost"][given[at]], net.cost_scale)
    exact = (int(pi[net.n_user]) - pi[sink[at] + net.sink_offset].astype(object)
             - net.penalty[sink[at]].astype(object))
    bad = _first(not_whole | (reported.astype(object) != exact))
    if bad is None:
        return None
    return (f"sink {rows.columns['id'][int(given[at[bad]])]}: reduced_cost is "
            f"{rows.columns['reduced_cost'][given[at[bad]]]}, pi(super-source) - pi(sink) - "
            f"penalty is {_show(int(exact[bad]), net.cost_scale)}")


def _search(net: Network, start: np.ndarray, arc: np.ndarray | None,
            x: np.ndarray | None) -> np.ndarray:
    """Which user nodes the sources in ``start`` reach: over arcs that can carry flow when
    ``arc`` is None, else over the residual graph of the flow ``x`` on ``arc``."""
    n = net.n_user
    if net.dense is not None and net.pins is None:
        return _search_matrix(net, start, arc, x)
    arcs = net.arcs
    # a pin is an arc at both bounds: it can carry flow when its pin is above 0, and has
    # no residual arc
    pinned = np.zeros(len(arcs), bool)
    if net.pins is not None:
        pinned[np.searchsorted(arcs.id, net.pins.arc)] = True
    if arc is None:
        usable = ~arcs.bounded | (arcs.capacity > 0)
        if net.pins is not None:
            usable[pinned] = net.pins.flow > 0
        t, h = arcs.tail[usable], arcs.head[usable]
    else:
        assert x is not None
        flow = np.zeros(len(arcs), np.int64)
        flow[np.searchsorted(arcs.id, arc)] = x
        ahead = (~arcs.bounded | (flow < arcs.capacity)) & ~pinned
        back = (flow > 0) & ~pinned
        t = np.concatenate([arcs.tail[ahead], arcs.head[back]])
        h = np.concatenate([arcs.head[ahead], arcs.tail[back]])
    seeds = np.flatnonzero(start)
    t = np.concatenate([np.full(len(seeds), n), t])
    h = np.concatenate([seeds, h])
    graph = coo_matrix((np.ones(len(t), np.int8), (t, h)), shape=(n + 1, n + 1)).tocsr()
    seen = np.zeros(n + 1, bool)
    seen[breadth_first_order(graph, n, directed=True, return_predecessors=False)] = True
    return seen[:n]


def _search_matrix(net: Network, start: np.ndarray, arc: np.ndarray | None,
                   x: np.ndarray | None) -> np.ndarray:
    """:func:`_search` on a cost matrix, level by level, each row read once."""
    assert net.dense is not None
    n_src, n_snk = net.n_sources, net.n_sinks
    row_seen = start.astype(bool).copy()
    col_seen = np.zeros(n_snk, bool)
    if arc is not None:
        assert x is not None
        used = x > 0
        used_row, used_col = arc[used] // n_snk, arc[used] % n_snk
    todo = np.flatnonzero(row_seen)
    while len(todo):
        cols = np.zeros(n_snk, bool)
        for lo in range(0, len(todo), _BLOCK):
            cols |= np.any(net.dense[todo[lo:lo + _BLOCK]] != FORBIDDEN, axis=0)
        fresh = cols & ~col_seen
        col_seen |= fresh
        if arc is None:
            break
        rows = np.zeros(n_src, bool)
        rows[used_row[fresh[used_col]]] = True
        todo = np.flatnonzero(rows & ~row_seen)
        row_seen |= rows
    return np.concatenate([row_seen, col_seen])
