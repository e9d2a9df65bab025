"""Pins, the previous plan and load costs of a loaded problem, on the network's arcs.

``fixed`` and ``previous.allocation`` name pairs (or arcs, by ``arc``); they become arc ids
of the :class:`~service.network.model.Network` here. A pin must name one allowed arc; a
previous row may name a pair that no longer exists (its units simply cannot be kept).
Load costs become tiers of the supply arcs on the network's cost grid.
"""

from __future__ import annotations

from dataclasses import replace
from itertools import repeat
from typing import Any

import numpy as np

from service.errors import InvalidProblem
from service.network.model import FORBIDDEN, Keep, Load, Network, Pins


def replan_numbers(data: dict[str, Any]) -> np.ndarray:
    """Every load cost and the change penalty, for the choice of the cost grid."""
    values: list[float] = []
    for costs in data["sources"].columns.get("load_costs", []):
        if costs:
            values.extend(costs)
    if data.get("previous"):
        values.append(data["previous"]["change_penalty"])
    return np.array(values, dtype=np.float64)


def with_replan(net: Network, data: dict[str, Any], scaled: Any) -> Network:
    """``net`` with its pins, previous plan and load tiers; InvalidProblem naming every
    bad entry. ``scaled`` puts numbers onto the network's cost grid."""
    errors: list[dict[str, str]] = []
    pins = keep = load = None
    if data.get("fixed") is not None and len(data["fixed"]):
        pins = _pins(net, data["fixed"], errors)
    previous = data.get("previous")
    if previous is not None:
        keep = _keep(net, previous, scaled, errors)
    costs = data["sources"].columns.get("load_costs")
    if costs is not None and any(c is not None for c in costs):
        load = _load(net, costs, scaled)
    if errors:
        raise InvalidProblem(errors)
    if pins is None and keep is None and load is None:
        return net
    return replace(net, pins=pins, keep=keep, load=load)


def _pair_arcs(net: Network, rows: Any, vanish: bool, where: str,
               errors: list[dict[str, str]]) -> np.ndarray:
    """Arc id of each row, -1 where the pair does not exist (an error unless ``vanish``).

    Looked up in bulk: a sorted key per arc, a binary search per row; only rows with a
    fault are then read one by one, to name them.
    """
    index = dict(zip(net.ids, range(net.n_user), strict=True))
    n = len(rows)
    tails = np.fromiter(map(index.get, rows.columns["from"], repeat(-1)), np.int64, n)
    heads = np.fromiter(map(index.get, rows.columns["to"], repeat(-1)), np.int64, n)
    known = (tails >= 0) & (heads >= 0)
    given = rows.present.get("arc", np.zeros(n, bool))
    out = np.full(n, -1, np.int64)
    count = np.zeros(n, np.int64)
    if net.dense is not None:
        col = heads - net.sink_offset
        cell = known & (tails < net.n_sources) & (col >= 0) & (col < net.n_sinks)
        ids = np.where(cell, tails * net.n_sinks + col, 0)
        hit = cell.copy()
        if cell.any():                  # an empty day has no cell to read
            hit &= net.dense.reshape(-1)[ids] != FORBIDDEN
        out[hit] = ids[hit]
        count[hit] = 1
        bad_arc = given
    else:
        arcs = net.arcs
        keys = arcs.tail * net.n_user + arcs.head
        order = np.argsort(keys, kind="stable")
        ordered = keys[order]
        want = np.where(known, tails * net.n_user + heads, -1)
        lo = np.searchsorted(ordered, want, "left")
        hi = np.searchsorted(ordered, want, "right")
        count = np.where(known, hi - lo, 0)
        single = count == 1
        out[single] = order[lo[single]]
        # an arc index picks one of parallel arcs; it must join the pair
        arc = np.where(given, rows.columns["arc"], 0)
        inside = given & (arc < len(arcs))
        joins = np.zeros(n, bool)
        if inside.any():
            safe = np.where(inside, arc, 0)
            joins = (inside & known & (arcs.tail[safe] == tails)
                     & (arcs.head[safe] == heads))
        out[joins] = arc[joins]
        count[joins] = 1
        bad_arc = given & ~joins & ~vanish
    faults = np.flatnonzero(bad_arc | (count != 1) & (~np.asarray(vanish) | (count > 1)))
    for i in faults.tolist():
        pointer = f"/{where}/{i}"
        if given[i] and net.dense is not None:
            errors.append({"pointer": f"{pointer}/arc",
                           "detail": "the problem gives a cost matrix, not arcs"})
        elif given[i] and not vanish:
            errors.append({"pointer": f"{pointer}/arc", "detail":
                           f"arc {int(rows.columns['arc'][i])} does not join "
                           f"{rows.columns['from'][i]!r} to {rows.columns['to'][i]!r}"})
        elif count[i] > 1:
            errors.append({"pointer": pointer, "detail": "several arcs join this pair; "
                           "give the arc index in 'arc'"})
        elif tails[i] < 0 or heads[i] < 0:
            key = "from" if tails[i] < 0 else "to"
            errors.append({"pointer": f"{pointer}/{key}",
                           "detail": f"unknown id {rows.columns[key][i]!r}"})
        else:
            errors.append({"pointer": pointer, "detail":
                           f"{rows.columns['from'][i]!r} -> {rows.columns['to'][i]!r} "
                           "is not an allowed pair"})
    found = np.flatnonzero(out >= 0)
    if len(found):
        first = np.unique(out[found], return_index=True)[1]
        repeated = np.setdiff1d(np.arange(len(found)), first)
        taken = {int(out[found[k]]): int(found[k]) for k in first.tolist()}
        for k in repeated.tolist():
            i = int(found[k])
            errors.append({"pointer": f"/{where}/{i}",
                           "detail": f"names the same pair as /{where}/{taken[int(out[i])]}"})
    return out


def _pins(net: Network, rows: Any, errors: list[dict[str, str]]) -> Pins:
    arc = _pair_arcs(net, rows, False, "fixed", errors)
    order = np.argsort(arc, kind="stable")
    return Pins(arc=arc[order], flow=rows.columns["flow"].astype(np.int64)[order],
                entry=order.astype(np.int64))


def _keep(net: Network, previous: dict[str, Any], scaled: Any,
          errors: list[dict[str, str]]) -> Keep:
    rows = previous["allocation"]
    arc = _pair_arcs(net, rows, True, "previous/allocation", errors)
    flow = rows.columns["flow"].astype(np.int64)
    found = (arc >= 0) & (flow > 0)
    order = np.argsort(arc[found], kind="stable")
    penalty = int(scaled(np.array([previous["change_penalty"]]))[0])
    return Keep(arc=arc[found][order], amount=flow[found][order], total=int(flow.sum()),
                penalty=penalty)


def _load(net: Network, costs: list[Any], scaled: Any) -> Load:
    """Tiers: for a source of supply q with costs c_1..c_k, tiers 1..min(k, q) of one unit
    each at c_j, the last taking the rest of q (one tier of q units at 0 without costs)."""
    source: list[int] = []
    cost: list[Any] = []
    capacity: list[int] = []
    for s, q in enumerate(net.supply.tolist()):
        given = costs[s]
        if not given:
            source.append(s)
            cost.append(0)
            capacity.append(q)
            continue
        tiers = max(1, min(len(given), q))
        source.extend([s] * tiers)
        cost.extend(given[:tiers])
        capacity.extend([1] * (tiers - 1) + [q - (tiers - 1)])
    return Load(source=np.array(source, np.int64),
                cost=scaled(np.array(cost, dtype=np.float64)).astype(np.int64),
                capacity=np.array(capacity, np.int64))
