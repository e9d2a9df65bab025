"""Pins, changes against a previous plan, load costs: the checker's own extended network.

Rebuilt here from the problem alone, as README "The certificate" defines it:

* a pin fixes an arc's flow: lower = upper bound = the pinned amount;
* a previous plan puts beside each arc it used a *keep* arc of capacity
  ``k = min(previous units, capacity, pin)`` at cost ``c - change_penalty``; the arc keeps
  the rest of its capacity at cost ``c``. Of a flow ``x`` the keep arc carries
  ``min(k, x)`` (the cheaper part first), and the objective holds the constant
  ``change_penalty x all previous units``, so it charges each unit not kept;
* load costs split a source's supply arc into tiers (one unit each at ``c_1, c_2, ...``,
  the last the rest of the supply); a source sending ``s`` fills them in order.

Every part is an arc with bounds ``l <= x <= u``; the potentials prove optimality when
no unbounded part has a negative reduced cost and the dual objective
``D (pi(S) - pi(T)) + sum l max(0, c^pi) - sum u max(0, -c^pi) + constant`` equals the
cost (Ahuja, Magnanti & Orlin 1993, §9.4 with bounds).
"""

from __future__ import annotations

import numpy as np

from service.check.exact import _dot, _first, _show
from service.network.model import FORBIDDEN, Network


def _lookup(keys: np.ndarray, values: np.ndarray, wanted: np.ndarray, missing: int
            ) -> np.ndarray:
    """``values`` at the positions of ``wanted`` in the ascending ``keys``, else ``missing``."""
    out = np.full(len(wanted), missing, np.int64)
    if not len(keys):
        return out
    at = np.minimum(np.searchsorted(keys, wanted), len(keys) - 1)
    hit = keys[at] == wanted
    out[hit] = values[at[hit]]
    return out


def _pin_of(net: Network, arc: np.ndarray) -> np.ndarray:
    """The pinned flow of each arc id, -1 where not pinned."""
    if net.pins is None:
        return np.full(len(arc), -1, np.int64)
    return _lookup(net.pins.arc, net.pins.flow, arc, -1)


def _pins_breach(net: Network, arc: np.ndarray, x: np.ndarray, rows: object) -> str | None:
    """The first pin whose arc does not carry exactly its amount, or a wrong ``fixed`` flag."""
    if net.pins is not None:
        carried = _lookup(arc[np.argsort(arc)], x[np.argsort(arc)], net.pins.arc, 0)
        bad = _first(carried != net.pins.flow)
        if bad is not None:
            return (f"pin /fixed/{int(net.pins.entry[bad])} fixes {int(net.pins.flow[bad])} "
                    f"units, its arc carries {int(carried[bad])}")
    present = getattr(rows, "present", {})
    if "fixed" in present and present["fixed"].any():
        flags = rows.columns["fixed"]      # type: ignore[attr-defined]
        wrong = _first(present["fixed"] & (flags != (_pin_of(net, arc) >= 0)))
        if wrong is not None:
            return f"allocation row {wrong}: 'fixed' is {bool(flags[wrong])}".lower()
    return None


def _keep_capacity(net: Network) -> np.ndarray:
    """Keep arc capacities: 0 on an arc the network does not have (a bottleneck's matrix
    cell above the threshold)."""
    assert net.keep is not None
    cap = np.where(net.arc_exists(net.keep.arc), net.keep.amount, 0).astype(np.int64)
    if net.arc_list is not None:
        arcs = net.arc_list
        bounded = arcs.bounded[net.keep.arc]
        cap = np.where(bounded, np.minimum(cap, arcs.capacity[net.keep.arc]), cap)
    pin = _pin_of(net, net.keep.arc)
    return np.where(pin >= 0, np.minimum(cap, pin), cap)


def _kept(net: Network, arc: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Units each keep arc carries: min(its capacity, the arc's flow)."""
    assert net.keep is not None
    order = np.argsort(arc)
    flow = _lookup(arc[order], x[order], net.keep.arc, 0)
    return np.minimum(_keep_capacity(net), flow)


def _tiers(net: Network, sent: np.ndarray) -> np.ndarray:
    """Units on each load tier when every source fills its tiers in order."""
    assert net.load is not None
    load = net.load
    ends = np.cumsum(load.capacity)
    new = np.concatenate(([True], load.source[1:] != load.source[:-1]))
    start = np.maximum.accumulate(np.where(new, ends - load.capacity, 0))
    before = ends - load.capacity - start
    return np.clip(sent[load.source] - before, 0, load.capacity)


def _extra_cost(net: Network, arc: np.ndarray, x: np.ndarray, sent: np.ndarray) -> int:
    """Load costs and change penalties of a flow (min form, scaled)."""
    total = 0
    if net.load is not None:
        total += _dot(net.load.cost, _tiers(net, sent))
    if net.keep is not None:
        moved = net.keep.total - int(_kept(net, arc, x).sum())
        total += net.keep.penalty * moved
    return total


def _changes_differ(net: Network, changes: dict | None, arc: np.ndarray, x: np.ndarray,
                    grid: object) -> str | None:
    """What is wrong with a reported ``changes``, or None."""
    if net.keep is None:
        return None if changes is None else "changes reported without a previous plan"
    if changes is None:
        return None
    kept = int(_kept(net, arc, x).sum())
    moved = net.keep.total - kept
    penalty = net.keep.penalty * moved
    if (changes["kept"], changes["moved"]) != (kept, moved):
        return (f"changes reports {changes['kept']} kept and {changes['moved']} moved; "
                f"recomputed {kept} and {moved}")
    if grid(changes["penalty"]) != penalty:          # type: ignore[operator]
        return (f"changes reports penalty {changes['penalty']}, recomputed "
                f"{_show(penalty, net.cost_scale)}")
    return None


def _cut_pins(net: Network, side: np.ndarray) -> int:
    """Pinned flow into the sink side less pinned flow out of it (pins are l = u)."""
    if net.pins is None:
        return 0
    tail, head = net.endpoints(net.pins.arc)
    return (int(net.pins.flow[~side[tail] & side[head]].sum())
            - int(net.pins.flow[side[tail] & ~side[head]].sum()))


def _replan_parts(net: Network, arc: np.ndarray, x: np.ndarray, sent: np.ndarray, S: int
                  ) -> tuple[np.ndarray, ...]:
    """(tail, head, cost, lower, upper, flow) of every bounded part of the user arcs and of
    the keep and tier arcs, and (tail, head, cost, flow) of the used unbounded plain parts.

    The plain part of a user arc is the arc less its keep arc; tiers replace supply arcs.
    """
    arcs = net.arcs
    flow = np.zeros(len(arcs), np.int64)
    position = np.searchsorted(arcs.id, arc)
    flow[position] = x
    upper = np.where(arcs.bounded, arcs.capacity, 0)
    bounded = arcs.bounded.copy()
    pin = _pin_of(net, arcs.id)
    parts: list[tuple[np.ndarray, ...]] = []
    if net.keep is not None:
        there = net.arc_exists(net.keep.arc)     # a keep arc of a missing arc carries 0
        cap = _keep_capacity(net)[there]
        kept = _kept(net, arc, x)[there]
        at = np.searchsorted(arcs.id, net.keep.arc[there])
        flow[at] -= kept
        upper[at] -= np.where(bounded[at], cap, 0)
        pin[at] = np.where(pin[at] >= 0, pin[at] - cap, -1)
        k_tail, k_head = arcs.tail[at], arcs.head[at]
        k_lower = np.where(_pin_of(net, net.keep.arc[there]) >= 0, cap, 0)
        parts.append((k_tail, k_head, arcs.cost[at] - net.keep.penalty, k_lower, cap, kept))
    pinned = pin >= 0
    upper = np.where(pinned, pin, upper)
    bounded |= pinned
    lower = np.where(pinned, pin, 0)
    b = bounded
    parts.append((arcs.tail[b], arcs.head[b], arcs.cost[b], lower[b], upper[b], flow[b]))
    if net.load is not None:
        load = net.load
        parts.append((np.full(len(load.source), S), load.source, load.cost,
                      np.zeros(len(load.source), np.int64), load.capacity,
                      _tiers(net, sent)))
    free = ~bounded & (flow > 0)
    out = tuple(np.concatenate([p[k] for p in parts]).astype(np.int64) for k in range(6))
    return (*out, arcs.tail[free], arcs.head[free], arcs.cost[free], flow[free])


def _unbounded_negative_replan(net: Network, pi: np.ndarray) -> str | None:
    """The first unbounded unpinned user arc with a negative reduced cost, named."""
    arcs = net.arcs
    free = ~arcs.bounded & (_pin_of(net, arcs.id) < 0)
    if net.dense is not None:
        free &= arcs.cost != FORBIDDEN
    reduced = arcs.cost[free] - pi[arcs.tail[free]] + pi[arcs.head[free]]
    hit = _first(reduced < 0)
    if hit is None:
        return None
    return f"{net.ids[arcs.tail[free][hit]]} -> {net.ids[arcs.head[free][hit]]}"


def _replan_duals(net: Network, pi: np.ndarray, arc: np.ndarray, x: np.ndarray,
                  sent: np.ndarray, S: int) -> tuple[int, str | None, str | None]:
    """(dual terms of the user, keep and tier arcs, the first complementary-slackness
    breach, the first unbounded arc with a negative reduced cost)."""
    tail, head, cost, lower, upper, flow, f_tail, f_head, f_cost, f_flow = _replan_parts(
        net, arc, x, sent, S)
    reduced = cost - pi[tail] + pi[head]
    term = _dot(lower, np.maximum(0, reduced)) - _dot(upper, np.maximum(0, -reduced))
    bad = _first(((reduced > 0) & (flow > lower)) | ((reduced < 0) & (flow < upper)))
    f_reduced = f_cost - pi[f_tail] + pi[f_head]
    bad_free = _first((f_reduced > 0) & (f_flow > 0))
    slack = None
    labels = [*net.ids, "super_source"]
    if bad is not None:
        slack = (f"arc {labels[tail[bad]]} -> {labels[head[bad]]} (bounds {lower[bad]} to "
                 f"{upper[bad]}) has reduced cost {_show(int(reduced[bad]), net.cost_scale)} and "
                 f"flow {flow[bad]}")
    elif bad_free is not None:
        slack = (f"arc {net.ids[f_tail[bad_free]]} -> {net.ids[f_head[bad_free]]} has reduced "
                 f"cost {_show(int(f_reduced[bad_free]), net.cost_scale)} and flow "
                 f"{f_flow[bad_free]}")
    return term, slack, _unbounded_negative_replan(net, pi)
