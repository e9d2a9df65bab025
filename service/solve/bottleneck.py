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

import math
from dataclasses import dataclass, replace

import numpy as np

from service.network.model import FORBIDDEN, Arcs, Network
from service.solve import isolation
from service.solve.dispatch import Solution, _least_shortfall_arrays, solve
from service.solve.feasibility import Shortfall, reject_if_short

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
    ``limit`` None keeps no pair."""
    if net.dense is not None:
        dense = net.dense.copy()
        if limit is None:
            dense[:] = FORBIDDEN
        else:
            dense[(dense >= limit) if strict else (dense > limit)] = FORBIDDEN
        return replace(net, dense=dense)
    arcs = net.arcs
    if limit is None:
        out = np.ones(len(arcs), bool)
    else:
        out = (arcs.cost >= limit) if strict else (arcs.cost > limit)
    return replace(net, arc_list=Arcs(
        id=arcs.id, tail=arcs.tail, head=arcs.head, cost=arcs.cost,
        capacity=np.where(out, 0, arcs.capacity), bounded=arcs.bounded | out))


def _shortfall(net: Network) -> Shortfall:
    """Stage 1 of ``net`` through the runner, as :func:`dispatch._stage_one` runs it."""
    n = net.n_user + 2
    out = isolation.run(_least_shortfall_arrays, net,
                        work=n * n * max(1, math.isqrt(len(net.arcs) + n)))
    if "out_of_range" in out:
        from service.errors import OutOfRange
        raise OutOfRange(str(out["out_of_range"].item()))
    return Shortfall(int(out["amount"]), out["sink_side"].astype(bool))


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
    whole = _shortfall(net)
    reject_if_short(net, whole)
    if whole.amount == net.hard_demand:
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

    def serves(k: int) -> bool:
        return _shortfall(restricted(net, int(costs[k]))).amount == whole.amount

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
    below = _shortfall(restricted(net, theta, strict=True))
    within = restricted(net, theta)
    solution = solve(within)
    if solution.shortfall.amount != whole.amount:
        raise RuntimeError("the last stage left another hard shortfall than stage 1")
    return Bottleneck(replace(solution, shortfall=whole), within, theta, below)


def threshold_certificate(net: Network, result: Bottleneck) -> dict:
    """``certificate.bottleneck`` of the answer: the threshold in the caller's units and the
    cut of the network of strictly cheaper pairs (README, "The certificate")."""
    if result.threshold is None or result.below is None:
        return {"threshold": None, "cut": None}
    cheaper = restricted(net, result.threshold, strict=True)
    side = result.below.sink_side
    off = net.sink_offset
    sinks = np.flatnonzero(side[off:] & ~net.soft)
    capacity = int(net.supply[side[: net.n_sources]].sum())
    if net.arc_list is not None:
        arcs = cheaper.arcs
        crossing = ~side[arcs.tail] & side[arcs.head]
        capacity += int(arcs.capacity[crossing & arcs.bounded].sum())
    theta = result.threshold
    return {
        "threshold": theta if net.cost_scale == 1 else theta / net.cost_scale,
        "cut": {"sink_side": [net.ids[i] for i in np.flatnonzero(side).tolist()],
                "sinks": [net.ids[off + i] for i in sinks.tolist()],
                "demand": int(net.demand[sinks].sum()), "capacity": capacity},
    }
