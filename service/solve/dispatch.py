"""Pick an engine by the shape of the problem, run the two stages, return the flows.

* assignment (every supply and demand 1, no nodes, source->sink arcs, at most one arc per
  pair, no capacity but 1, no penalty): linear_sum_assignment on a dense matrix, or
  min_weight_full_bipartite_matching when sparse (arcs, or a matrix more than half null);
  when no matching covers the smaller side, min-cost flow instead.
* transportation (source->sink arcs only) and transshipment (anything else): stage 2
  (min-cost flow) with every hard demand to be met; when that has no flow, stage 1
  (maximum flow into the hard sinks) for the least hard shortfall, then stage 2 again.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from service.network.model import Arcs, Flow, Network
from service.solve.engines import dense_assignment, min_cost_flow, sparse_assignment
from service.solve.feasibility import (
    Shortfall,
    check_bounded,
    least_shortfall,
    reject_if_short,
    shortfall_of_matching,
)
from service.solve.paths import order_by

#: A cost matrix with at least this share of allowed cells goes to the dense engine.
DENSE_SHARE = 0.5


@dataclass(frozen=True)
class Solution:
    """Flows on the user arcs, with the stage-1 shortfall and who produced them."""

    shape: str
    solver: str
    flow: Flow
    shortfall: Shortfall


def shape_of(net: Network) -> str:
    """'assignment', 'transportation' or 'transshipment' (see module docstring)."""
    unit = (bool(np.all(net.supply == 1)) and bool(np.all(net.demand == 1))
            and not net.soft.any())
    if net.arc_list is None:
        return "assignment" if unit else "transportation"
    arcs = net.arc_list
    bipartite = (net.n_nodes == 0 and bool(np.all(arcs.tail < net.n_sources))
                 and bool(np.all(arcs.head >= net.sink_offset)))
    if not bipartite:
        return "transshipment"
    if unit and bool(np.all(arcs.capacity[arcs.bounded] == 1)) and _pairs_unique(net, arcs):
        return "assignment"
    return "transportation"


def _pairs_unique(net: Network, arcs: Arcs) -> bool:
    keys = arcs.tail * net.n_sinks + (arcs.head - net.sink_offset)
    ordered = keys[order_by(keys, net.n_sources * net.n_sinks)]
    return not bool(np.any(ordered[1:] == ordered[:-1]))


def solve(net: Network) -> Solution:
    """Solve ``net``: raises Unbounded, or Infeasible when unmet hard demand is rejected."""
    check_bounded(net)
    shape = shape_of(net)
    if shape == "assignment":
        cells = net.n_sources * net.n_sinks
        dense = net.from_matrix and net.n_arcs >= DENSE_SHARE * cells
        engine = dense_assignment if dense else sparse_assignment
        flow = engine.solve(net)
        if flow is not None:
            shortfall = shortfall_of_matching(net, len(flow.arc))
            reject_if_short(net, shortfall)
            return Solution(shape, engine.NAME, flow, shortfall)
    # Stage 2 with no hard shortfall allowed first: when it finds a flow, every hard demand
    # is met and stage 1 has nothing to prove (saves a maximum flow in the common case).
    met = min_cost_flow.solve(net, 0)
    if met is not None:
        return Solution(shape, min_cost_flow.NAME, met, Shortfall.none(net))
    shortfall = least_shortfall(net)
    reject_if_short(net, shortfall)
    flow = min_cost_flow.solve(net, shortfall.amount)
    if flow is None:
        raise RuntimeError("no flow within the least hard shortfall stage 1 found")
    return Solution(shape, min_cost_flow.NAME, flow, shortfall)
