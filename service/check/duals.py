"""The dual side: reduced costs of every arc, the dual objective's terms, the cut."""

from __future__ import annotations

from typing import Any

import numpy as np

from service.check.exact import _dot, _first, _fit, _total
from service.check.replan import _cut_pins
from service.network.model import FORBIDDEN, Network

#: Rows of a cost matrix checked at once: bounds the temporary to this x columns.
_CHUNK_ROWS = 256


def _unbounded_negative(net: Network, pi: np.ndarray) -> tuple[str, int] | None:
    """The first unbounded user arc with a negative reduced cost, as (name, reduced cost)."""
    if net.dense is not None:
        n_rows, n_cols = net.dense.shape
        col_pi = pi[net.sink_offset: net.sink_offset + n_cols]
        for start in range(0, n_rows, _CHUNK_ROWS):
            block = net.dense[start: start + _CHUNK_ROWS]
            # forbidden cells are 2**62: with int64 potentials (within 2**60) they stay far
            # positive, no mask needed; Python-int potentials may be larger
            reduced = block - pi[start: start + len(block)][:, None] + col_pi[None, :]
            negative = reduced < 0
            if pi.dtype == object:
                negative &= block != FORBIDDEN
            hit = _first(negative.reshape(-1))
            if hit is not None:
                r, c = divmod(hit, n_cols)
                return (f"{net.ids[start + r]} -> {net.ids[net.sink_offset + c]}",
                        int(reduced[r, c]))
        return None
    arcs = net.arcs
    free = ~arcs.bounded
    reduced = arcs.cost[free] - pi[arcs.tail[free]] + pi[arcs.head[free]]
    hit = _first(reduced < 0)
    if hit is None:
        return None
    t, h = arcs.tail[free][hit], arcs.head[free][hit]
    return f"{net.ids[t]} -> {net.ids[h]}", int(reduced[hit])


def _bounded_below_capacity(net: Network, pi: np.ndarray, arc: np.ndarray,
                            x: np.ndarray) -> str | None:
    """A bounded user arc with negative reduced cost and flow below capacity, named."""
    if net.arc_list is None:
        return None
    arcs = net.arc_list
    flow = np.zeros(len(arcs), np.int64)
    flow[arc] = x
    reduced = arcs.cost - pi[arcs.tail] + pi[arcs.head]
    hit = _first(arcs.bounded & (reduced < 0) & (flow < arcs.capacity))
    if hit is None:
        return None
    return f"{net.ids[arcs.tail[hit]]} -> {net.ids[arcs.head[hit]]}"


def _bounded_dual_term(net: Network, pi: np.ndarray) -> int:
    """Sum over bounded user arcs of capacity x max(0, -reduced cost)."""
    if net.arc_list is None:
        return 0
    arcs = net.arc_list
    b = arcs.bounded
    reduced = arcs.cost[b] - pi[arcs.tail[b]] + pi[arcs.head[b]]
    return _dot(arcs.capacity[b], np.maximum(0, -reduced))


def _pinned_mask(net: Network) -> np.ndarray | None:
    """Which of ``net.arcs`` are pinned; None without pins."""
    if net.pins is None:
        return None
    mask = np.zeros(len(net.arcs), bool)
    mask[np.searchsorted(net.arcs.id, net.pins.arc)] = True
    return mask


def cut_bound(net: Network, cut: dict[str, Any], index: dict[str, int]
              ) -> tuple[str | None, int, int, np.ndarray]:
    """What a cut proves on ``net``: (a fault, or None; the hard demand on its sink side;
    the capacity into that side, pins included; which sinks are its hard sinks).

    Shared by the shortfall cut and the bottleneck's cut (on the network of the cheaper
    pairs): the same arithmetic, held to different claims.
    """
    side = np.zeros(net.n_user, bool)
    off = net.sink_offset
    for id_ in cut["sink_side"]:
        if id_ not in index:
            return f"the cut names unknown id {id_!r}", 0, 0, side[off:]
        side[index[id_]] = True
    hard_in = side[off:] & ~net.soft
    demand = int(net.demand[hard_in].sum())
    capacity = int(net.supply[side[: net.n_sources]].sum())
    pinned = _pinned_mask(net)
    if net.dense is not None and pinned is None:
        outside, inside = ~side[: net.n_sources], side[off:]
        if inside.any() and (net.dense[np.ix_(outside, inside)] != FORBIDDEN).any():
            return "an unbounded matrix cell crosses the cut", demand, capacity, hard_in
    else:
        arcs = net.arcs
        crossing = ~side[arcs.tail] & side[arcs.head]
        if pinned is not None:
            # a pin is an arc with lower = upper bound: it carries its pin either way
            crossing &= ~pinned
            capacity += _cut_pins(net, side)
        open_arc = _first(crossing & ~arcs.bounded)
        if open_arc is not None:
            return (f"unbounded arc {net.ids[arcs.tail[open_arc]]} -> "
                    f"{net.ids[arcs.head[open_arc]]} crosses the cut", demand, capacity,
                    hard_in)
        capacity += int(arcs.capacity[crossing].sum())
    return None, demand, capacity, hard_in


def cut_reported(net: Network, cut: dict[str, Any], demand: int, capacity: int,
                 hard_in: np.ndarray) -> str | None:
    """Whether the cut names its hard sinks and reports the recomputed figures."""
    off = net.sink_offset
    sinks = {net.ids[off + i] for i in np.flatnonzero(hard_in).tolist()}
    if set(cut["sinks"]) != sinks or len(cut["sinks"]) != len(sinks):
        return "the cut's sinks are not the hard sinks on its sink side"
    if (cut["demand"], cut["capacity"]) != (demand, capacity):
        return (f"the cut reports demand {cut['demand']} and capacity {cut['capacity']}, "
                f"recomputed {demand} and {capacity}")
    return None


def _cut_differs(net: Network, cut: dict[str, Any], index: dict[str, int],
                 shortfall: int) -> str | None:
    fault, demand, capacity, hard_in = cut_bound(net, cut, index)
    if fault is not None:
        return fault
    if demand - capacity != shortfall:
        return (f"hard sinks on the sink side need {demand}, arcs into it carry {capacity}: "
                f"that proves {max(0, demand - capacity)} short, not {shortfall}")
    return cut_reported(net, cut, demand, capacity, hard_in)


def _virtual_arcs(net: Network, unmet: np.ndarray, sent: np.ndarray, shortfall: int,
                  S: int, T: int, P: int) -> tuple[np.ndarray, ...]:
    """Virtual arcs of the extended network: (tail, head, min-form cost, capacity, flow).

    Five blocks, in this order: S -> each source (its supply), each sink -> T (its demand),
    S -> each soft sink (its unmet units, at the penalty), S -> P (the hard shortfall), and
    P -> each hard sink (its unmet units). Built column by column: a few array calls in all,
    whatever the size, since on a small problem each call costs more than its data.
    """
    off = net.sink_offset
    soft, hard = np.flatnonzero(net.soft), np.flatnonzero(~net.soft)
    n_src, n_snk, n_soft = net.n_sources, net.n_sinks, len(soft)
    tail = np.concatenate((np.full(n_src, S), np.arange(off, off + n_snk),
                           np.full(n_soft + 1, S), np.full(len(hard), P)))
    head = np.concatenate((np.arange(n_src), np.full(n_snk, T), soft + off, [P], hard + off))
    cost = np.zeros(len(tail), np.int64)
    cost[n_src + n_snk: n_src + n_snk + n_soft] = net.penalty[soft]
    cap = np.concatenate((net.supply, net.demand, net.demand[soft], [shortfall],
                          net.demand[hard]))
    # the pool's flow is a sum: beyond int64 when a forged allocation overfills the sinks
    flow = np.concatenate((sent, net.demand, unmet[soft], [_total(unmet[hard])], unmet[hard]))
    return (*(np.asarray(column, np.int64) for column in (tail, head, cost, cap)), _fit(flow))
