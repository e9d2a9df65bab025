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
from service.check.duals import cut_bound, cut_reported
from service.check.exact import _first, _grid_value, _show
from service.network.model import FORBIDDEN, Arcs, Network


def _within(net: Network, limit: int | None, *, below: bool = False) -> Network:
    """The network of the pairs costing at most ``limit`` (less than it when ``below``);
    the others forbidden (a matrix) or given capacity 0 (a list); None: no pair at all.
    A previous plan's units on the others cannot be kept, and pins on them are left out."""
    def allowed(cost: np.ndarray) -> np.ndarray:
        if limit is None:
            return np.zeros(cost.shape, bool)
        return (cost < limit) if below else (cost <= limit)

    keep, pins = net.keep, net.pins
    if keep is not None:
        on = allowed(net.arc_cost(keep.arc))
        keep = replace(keep, arc=keep.arc[on], amount=keep.amount[on])
    if pins is not None:
        on = allowed(net.arc_cost(pins.arc))
        pins = replace(pins, arc=pins.arc[on], flow=pins.flow[on], entry=pins.entry[on])
    if net.dense is not None:
        return replace(net, keep=keep, pins=pins,
                       dense=np.where(allowed(net.dense), net.dense, FORBIDDEN))
    arcs = net.arcs
    on = allowed(arcs.cost)
    return replace(net, keep=keep, pins=pins,
                   arc_list=Arcs(id=arcs.id, tail=arcs.tail, head=arcs.head, cost=arcs.cost,
                                 capacity=np.where(on, arcs.capacity, 0),
                                 bounded=arcs.bounded | ~on))


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
        return net if used.any() else _within(net, None)
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
    if _pinned_at(net, theta):
        checks.add("bottleneck_cut", None, "a pair pinned with flow costs the threshold: "
                   "no plan uses only cheaper pairs")
    else:
        checks.add("bottleneck_cut", _cut_below(net, theta, given["cut"], index, shortfall),
                   "no plan on strictly cheaper pairs serves as much hard demand")
    # an arc used above the threshold has failed already; the duals are then read on the
    # whole network, where every used arc is
    return net if over is not None else _within(net, theta)


def _pinned_at(net: Network, theta: int) -> bool:
    """Some pair pinned with flow costs ``theta`` or more: every plan uses it."""
    if net.pins is None:
        return False
    pinned = net.pins.flow > 0
    return bool(pinned.any() and (net.arc_cost(net.pins.arc[pinned]) >= theta).any())


def _cut_below(net: Network, theta: int, cut: dict[str, Any] | None, index: dict[str, int],
               shortfall: int) -> str | None:
    """What is wrong with the cut below the threshold, or None: on the network of the pairs
    strictly cheaper than the threshold it must prove more than ``shortfall`` short."""
    if cut is None:
        return "a threshold needs the cut that proves no cheaper one serves as much"
    cheaper = _within(net, theta, below=True)
    fault, demand, capacity, hard_in = cut_bound(cheaper, cut, index)
    if fault is not None:
        return f"on the cheaper pairs: {fault}"
    if demand - capacity <= shortfall:
        return (f"on the cheaper pairs the cut's hard sinks need {demand} and {capacity} "
                f"reaches them: that proves {max(0, demand - capacity)} short, not more "
                f"than {shortfall}")
    return cut_reported(cheaper, cut, demand, capacity, hard_in)
