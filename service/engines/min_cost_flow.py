"""Min-cost flow on the extended network: OR-Tools' SimpleMinCostFlow (cost scaling)."""

from __future__ import annotations

import numpy as np
from ortools.graph.python import min_cost_flow

from service.errors import OutOfRange
from service.network import Network, extend

__all__ = ["NAME", "solve"]

NAME = "min_cost_flow"


def solve(net: Network, hard_shortfall: int) -> np.ndarray:
    """Flows on the user arcs of a least-cost flow of the extended network.

    Parameters
    ----------
    net : any network.
    hard_shortfall : the least hard shortfall from stage 1; caps the hard pool.

    Returns
    -------
    Integer flow per user arc.

    Notes
    -----
    The extended network (super-source with supply equal to total demand, super-sink,
    shortfall arcs) always has a feasible flow: every sink can be fed by its shortfall
    arc, and the pool holds exactly the stage-1 shortfall. OR-Tools implements the cost
    scaling push-relabel method (Goldberg 1997; Ahuja, Magnanti & Orlin 1993, §10.3),
    integral for integral data.
    """
    ext = extend(net, hard_shortfall)
    solver = min_cost_flow.SimpleMinCostFlow()
    arcs = solver.add_arcs_with_capacity_and_unit_cost(
        ext.tail.astype(np.int32), ext.head.astype(np.int32), ext.capacity, ext.cost)
    supplies = np.zeros(ext.n_nodes, np.int64)
    supplies[ext.S] = net.total_demand
    supplies[ext.T] = -net.total_demand
    solver.set_nodes_supplies(np.arange(ext.n_nodes, dtype=np.int32), supplies)
    status = solver.solve()
    if status != solver.OPTIMAL:
        raise OutOfRange(f"the min-cost-flow stage could not run ({status.name}); the costs or "
                       "capacities are too large for exact 64-bit arithmetic")
    flows = np.asarray(solver.flows(arcs), dtype=np.int64)
    return flows[ext.blocks["user"]]
