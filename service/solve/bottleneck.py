"""``"objective": "bottleneck"``: the least possible largest cost of a used pair, then cost.

Lexicographic, in three stages (README, "The certificate", bottleneck):

1. as much hard demand served as possible: stage 1 on the whole network (its cut proves it);
2. the threshold ``theta``: the least cost such that the pairs (arcs, matrix cells) costing
   at most ``theta`` still serve that much hard demand. The served amount only grows with
   ``theta``, so a binary search over the sorted distinct costs finds it with O(log k)
   maximum flows (Gross 1959; Garfinkel 1971). Its proof is stage 1's cut in the network of
   the pairs strictly cheaper than ``theta``, which serves less;
3. the least total cost (penalties included) among plans serving that much hard demand on
   the pairs at or below ``theta`` (Burkard & Rendl 1991): the ordinary two stages on that
   network, proved by its potentials.

The restricted networks keep the arc ids of the whole one: a matrix cell above the limit
becomes forbidden, a listed arc above it an arc of capacity 0 (it can carry nothing, and
adds nothing to the dual objective), so flows and answers read the same on either.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from service.errors import InvalidProblem, PinsInfeasible
from service.network.model import FORBIDDEN, Arcs, Network
from service.solve.dispatch import Solution, _stage_one, solve
from service.solve.feasibility import Shortfall, check_bounded, reject_if_short
from service.solve.pinned import check_pin_capacity

__all__ = ["Bottleneck", "restricted", "solve_bottleneck"]


@dataclass(frozen=True)
class Bottleneck:
    """The three stages' results: the last stage's solution on ``within``, the threshold
    (min-form grid value; None when no hard demand can be served, so no pair is needed) and
    the cut of the network of strictly cheaper pairs (None with no threshold)."""

    solution: Solution
    within: Network
    threshold: int | None
    below: Shortfall | None


def restricted(net: Network, limit: int | None, *, strict: bool = False) -> Network:
    """``net`` with only the pairs costing at most ``limit`` (below it when ``strict``);
    ``limit`` None keeps no pair. A previous plan's units on the other pairs cannot be kept
    (as on a pair that no longer exists), and pins on them are dropped (they pin 0 units:
    a pinned pair with flow is used, so the threshold is at least its cost)."""
    def out_of(cost: np.ndarray) -> np.ndarray:
        if limit is None:
            return np.ones(len(cost), bool)
        return (cost >= limit) if strict else (cost > limit)

    keep, pins = net.keep, net.pins
    if keep is not None:
        stay = ~out_of(net.arc_cost(keep.arc))
        keep = replace(keep, arc=keep.arc[stay], amount=keep.amount[stay])
    if pins is not None:
        stay = ~out_of(net.arc_cost(pins.arc))
        pins = replace(pins, arc=pins.arc[stay], flow=pins.flow[stay], entry=pins.entry[stay])
    if net.dense is not None:
        dense = net.dense.copy()
        dense[out_of(dense.reshape(-1)).reshape(dense.shape)] = FORBIDDEN
        return replace(net, dense=dense, keep=keep, pins=pins)
    arcs = net.arcs
    out = out_of(arcs.cost)
    return replace(net, keep=keep, pins=pins, arc_list=Arcs(
        id=arcs.id, tail=arcs.tail, head=arcs.head, cost=arcs.cost,
        capacity=np.where(out, 0, arcs.capacity), bounded=arcs.bounded | out))


def _shortfall(net: Network) -> Shortfall | None:
    """Stage 1 of ``net`` (:func:`dispatch._stage_one`, pins included); None when the
    pins cannot be routed on its pairs at all."""
    try:
        return _stage_one(net)
    except PinsInfeasible:
        return None


def _pinned_top(net: Network) -> int | None:
    """The largest cost of a pair pinned with flow (a used pair in every plan), or None."""
    if net.pins is None or not (net.pins.flow > 0).any():
        return None
    return int(net.arc_cost(net.pins.arc[net.pins.flow > 0]).max())


def _costs(net: Network) -> np.ndarray:
    """The distinct min-form costs of the pairs that can carry flow, ascending."""
    if net.dense is not None:
        cells = net.dense[net.dense != FORBIDDEN]
        return np.unique(cells)
    arcs = net.arcs
    return np.unique(arcs.cost[~arcs.bounded | (arcs.capacity > 0)])


def _cheapest_in(net: Network) -> int:
    """The largest, over hard sinks with demand, of the cheapest pair into each (a lower
    bound on the threshold when every hard demand is met); the least cost if none."""
    off = net.sink_offset
    need = ~net.soft & (net.demand > 0)
    if net.dense is not None:
        cheapest = net.dense.min(axis=0) if net.n_sources else np.full(net.n_sinks, FORBIDDEN)
    else:
        arcs = net.arcs
        usable = (~arcs.bounded | (arcs.capacity > 0)) & (arcs.head >= off)
        cheapest = np.full(net.n_sinks, FORBIDDEN, np.int64)
        np.minimum.at(cheapest, arcs.head[usable] - off, arcs.cost[usable])
    return int(cheapest[need].max()) if need.any() else -FORBIDDEN


def solve_bottleneck(net: Network) -> Bottleneck:
    """The three stages; raises Infeasible when unmet hard demand is rejected."""
    check_bounded(net)
    if net.pins is not None:
        check_pin_capacity(net)
    whole = _stage_one(net)            # raises PinsInfeasible: no plan at all
    reject_if_short(net, whole)
    top = _pinned_top(net)
    if whole.amount == net.hard_demand and top is None:
        # nothing hard can be served: the empty set of pairs is the least largest cost
        within = restricted(net, None)
        solution = solve(within)
        return Bottleneck(replace(solution, shortfall=whole), within, None, None)
    costs = _costs(net)
    lo, hi = 0, len(costs) - 1          # the largest cost serves it: the whole network
    if whole.amount == 0:
        # every hard sink is then served, over some arc into it: the search starts at the
        # largest of their cheapest incoming costs
        lo = min(hi, int(np.searchsorted(costs, _cheapest_in(net))))
    if top is not None:                 # pinned pairs are used pairs
        lo = max(lo, min(hi, int(np.searchsorted(costs, top))))

    def serves(k: int) -> bool:
        found = _shortfall(restricted(net, int(costs[k])))
        return found is not None and found.amount == whole.amount

    # galloping up from the lower bound first: the networks probed stay small when the
    # threshold is near it (the common case), then bisection (O(log k) probes either way)
    step = 1
    while lo < hi:                      # the threshold is within costs[lo..hi]
        probe = min(hi, lo + step - 1)
        if serves(probe):
            hi = probe
            break
        lo, step = probe + 1, step * 2
    while lo < hi:
        mid = (lo + hi) // 2
        if serves(mid):
            hi = mid
        else:
            lo = mid + 1
    theta = int(costs[lo])
    # a pin with flow at the threshold proves it by itself (no plan avoids that pair)
    below = None if top == theta else _shortfall(restricted(net, theta, strict=True))
    if below is None and top != theta:
        raise InvalidProblem([{"pointer": "/fixed", "detail":
                               "the pins cannot be routed on the pairs cheaper than the "
                               "bottleneck threshold, and that proof is not offered: send "
                               "the problem without objective bottleneck, or other pins"}])
    within = restricted(net, theta)
    solution = solve(within)
    if solution.shortfall.amount != whole.amount:
        raise RuntimeError("the last stage left another hard shortfall than stage 1")
    return Bottleneck(replace(solution, shortfall=whole), within, theta, below)


def threshold_certificate(net: Network, result: Bottleneck) -> dict:
    """``certificate.bottleneck`` of the answer: the threshold in the caller's units and the
    cut of the network of strictly cheaper pairs (README, "The certificate"); no cut when
    a pair pinned with flow costs the threshold (that pin is the proof)."""
    theta = result.threshold
    if theta is None:
        return {"threshold": None, "cut": None}
    shown = theta if net.cost_scale == 1 else theta / net.cost_scale
    if result.below is None:
        return {"threshold": shown, "cut": None}
    cheaper = restricted(net, theta, strict=True)
    side = result.below.sink_side
    off = net.sink_offset
    sinks = np.flatnonzero(side[off:] & ~net.soft)
    capacity = int(net.supply[side[: net.n_sources]].sum())
    if net.arc_list is not None or cheaper.pins is not None:
        arcs = cheaper.arcs
        crossing = ~side[arcs.tail] & side[arcs.head] & arcs.bounded
        if cheaper.pins is not None:
            # a pin is an arc with lower = upper bound: it carries its pin either way
            crossing[np.searchsorted(arcs.id, cheaper.pins.arc)] = False
            tail, head = cheaper.endpoints(cheaper.pins.arc)
            capacity += (int(cheaper.pins.flow[~side[tail] & side[head]].sum())
                         - int(cheaper.pins.flow[side[tail] & ~side[head]].sum()))
        capacity += int(arcs.capacity[crossing].sum())
    return {
        "threshold": shown,
        "cut": {"sink_side": [net.ids[i] for i in np.flatnonzero(side).tolist()],
                "sinks": [net.ids[off + i] for i in sinks.tolist()],
                "demand": int(net.demand[sinks].sum()), "capacity": capacity},
    }
