"""Checking a bottleneck answer: the threshold, the cut below it, the network of the proof.

Under ``"objective": "bottleneck"`` (README, "The certificate"):

* ``bottleneck_threshold``: every pair the allocation uses costs at most the threshold
  ``theta``; with no threshold (null), no hard demand can be served at all and no pair is
  used;
* ``bottleneck_cut``: in the network of the pairs costing strictly less than ``theta``, the
  cut's hard sinks need ``demand`` and at most ``capacity`` reaches them, with
  ``demand - capacity > hard_shortfall``: no plan on cheaper pairs serves as much hard
  demand as this one (max-flow min-cut);
* the potentials are then checked on the pairs at or below ``theta`` only: the cost stage
  optimises over those (:func:`_within`).
"""

from __future__ import annotations

from dataclasses import replace
from typing import Any

import numpy as np

from service.check.checks import _Checks
from service.check.exact import _first, _grid_value, _show
from service.network.model import FORBIDDEN, Arcs, Network


def _within(net: Network, limit: int | None, *, below: bool = False) -> Network:
    """The network of the pairs costing at most ``limit`` (less than it when ``below``);
    the others forbidden (a matrix) or given capacity 0 (a list); None: no pair at all."""
    if net.dense is not None:
        keep = (np.zeros(net.dense.shape, bool) if limit is None else
                (net.dense < limit) if below else (net.dense <= limit))
        return replace(net, dense=np.where(keep, net.dense, FORBIDDEN))
    arcs = net.arcs
    keep = (np.zeros(len(arcs), bool) if limit is None else
            (arcs.cost < limit) if below else (arcs.cost <= limit))
    return replace(net, arc_list=Arcs(id=arcs.id, tail=arcs.tail, head=arcs.head,
                                      cost=arcs.cost,
                                      capacity=np.where(keep, arcs.capacity, 0),
                                      bounded=arcs.bounded | ~keep))


def _threshold(net: Network, cert: dict[str, Any], arc: np.ndarray, x: np.ndarray,
               index: dict[str, int], checks: _Checks) -> Network:
    """Add the bottleneck checks; return the network the potentials are checked on."""
    given = cert.get("bottleneck")
    if not net.bottleneck:
        if given is not None:
            checks.add("bottleneck_threshold", "the answer gives a bottleneck threshold but "
                       "the objective is not bottleneck", "")
        return net
    if given is None:
        checks.add("bottleneck_threshold", "the objective is bottleneck but the certificate "
                   "has no bottleneck threshold", "")
        return net
    shortfall = cert["hard_shortfall"]
    used = x > 0
    if given["threshold"] is None:
        served = net.hard_demand - shortfall
        bad = (f"no threshold, yet the certificate says {served} units of hard demand are "
               "served" if served else
               "no threshold, yet the allocation uses a pair" if used.any() else None)
        checks.add("bottleneck_threshold", bad, "no hard demand can be served: no pair used")
        checks.add("bottleneck_cut", None if given["cut"] is None else
                   "a cut goes with a threshold only", "no cut needed without a threshold")
        return _within(net, None)
    theta = _grid_value(given["threshold"], net.cost_scale)
    if theta is None:
        checks.add("bottleneck_threshold", f"threshold {given['threshold']} is not a whole "
                   "number, and every cost of the problem is", "")
        return net
    cost = net.arc_cost(arc)
    over = _first(used & (cost > theta))
    if over is not None:
        tail, head = net.endpoints(arc[over: over + 1])
        bad = (f"arc {net.ids[int(tail[0])]} -> {net.ids[int(head[0])]} costs "
               f"{_show(int(cost[over]), net.cost_scale)}, above the threshold "
               f"{given['threshold']}")
    else:
        bad = None
    checks.add("bottleneck_threshold", bad,
               f"every pair used costs at most {_show(theta, net.cost_scale)}")
    checks.add("bottleneck_cut", _cut_below(net, theta, given["cut"], index, shortfall),
               "no plan on strictly cheaper pairs serves as much hard demand")
    return _within(net, theta)


def _cut_below(net: Network, theta: int, cut: dict[str, Any] | None, index: dict[str, int],
               shortfall: int) -> str | None:
    """What is wrong with the cut below the threshold, or None."""
    if cut is None:
        return "a threshold needs the cut that proves no cheaper one serves as much"
    cheaper = _within(net, theta, below=True)
    side = np.zeros(net.n_user, bool)
    for name in cut["sink_side"]:
        if name not in index:
            return f"the cut names unknown id {name!r}"
        side[index[name]] = True
    off = net.sink_offset
    hard = side[off:] & ~net.soft
    demand = int(net.demand[hard].sum())
    capacity = int(net.supply[side[: net.n_sources]].sum())
    if cheaper.dense is not None:
        rows, cols = ~side[: net.n_sources], side[off:]
        if cols.any() and (cheaper.dense[np.ix_(rows, cols)] != FORBIDDEN).any():
            return "a cheaper matrix cell (unbounded) enters the cut's sink side"
    else:
        arcs = cheaper.arcs
        enters = ~side[arcs.tail] & side[arcs.head]
        open_arc = _first(enters & ~arcs.bounded)
        if open_arc is not None:
            return (f"unbounded cheaper arc {net.ids[arcs.tail[open_arc]]} -> "
                    f"{net.ids[arcs.head[open_arc]]} enters the cut's sink side")
        capacity += int(arcs.capacity[enters].sum())
    if demand - capacity <= shortfall:
        return (f"on the cheaper pairs the cut's hard sinks need {demand} and {capacity} "
                f"reaches them: that proves {max(0, demand - capacity)} short, not more "
                f"than {shortfall}")
    named = {net.ids[off + i] for i in np.flatnonzero(hard).tolist()}
    if set(cut["sinks"]) != named or len(cut["sinks"]) != len(named):
        return "the cut's sinks are not the hard sinks on its sink side"
    if (cut["demand"], cut["capacity"]) != (demand, capacity):
        return (f"the cut reports demand {cut['demand']} and capacity {cut['capacity']}, "
                f"recomputed {demand} and {capacity}")
    return None
