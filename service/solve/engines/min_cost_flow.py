"""Min-cost flow on the extended network: OR-Tools' SimpleMinCostFlow (cost scaling)."""

from __future__ import annotations

import numpy as np
from ortools.graph.python import min_cost_flow

from service.errors import OutOfRange
from service.network.model import Flow, Network
from service.solve.extended import extend

__all__ = ["NAME", "solve"]

NAME = "min_cost_flow"


def solve(net: Network, hard_shortfall: int) -> Flow | None:
    """A least-cost flow of the extended network, on the user arcs; None when there is none.

    Parameters
    ----------
    net : any network.
    hard_shortfall : caps the hard pool: the least hard shortfall from stage 1, or 0 to
        try meeting every hard demand (None comes back when that cannot be done).

    Notes
    -----
    The extended network (super-source with supply equal to total demand, super-sink,
    shortfall arcs) has a feasible flow when the pool holds at least the least hard
    shortfall: every soft sink can be fed by its shortfall arc, the hard ones by the pool.
    OR-Tools implements the cost scaling push-relabel method (Goldberg 1997; Ahuja,
    Magnanti & Orlin 1993, §10.3), integral for integral data. Unbounded arcs get
    ``net.unbounded_capacity()``.
    """
    arcs = net.arcs
    ext = extend(net, hard_shortfall)
    solver = min_cost_flow.SimpleMinCostFlow()
    capacity = np.where(arcs.bounded, arcs.capacity, net.unbounded_capacity())
    handles = solver.add_arcs_with_capacity_and_unit_cost(
        np.concatenate([arcs.tail, ext.tail]).astype(np.int32),
        np.concatenate([arcs.head, ext.head]).astype(np.int32),
        np.concatenate([capacity, ext.capacity]),
        np.concatenate([arcs.cost, ext.cost]))
    supplies = np.zeros(ext.n_nodes, np.int64)
    supplies[ext.S] = net.total_demand
    supplies[ext.T] = -net.total_demand
    solver.set_nodes_supplies(np.arange(ext.n_nodes, dtype=np.int32), supplies)
    status = solver.solve()
    if status == solver.INFEASIBLE:
        return None
    if status != solver.OPTIMAL:
        raise OutOfRange(f"the min-cost-flow stage could not run ({status.name}); the costs or "
                         "capacities are too large for exact 64-bit arithmetic")
    flows = np.asarray(solver.flows(handles[: len(arcs)]), dtype=np.int64)
    used = np.flatnonzero(flows)
    return Flow(arc=arcs.id[used], amount=flows[used])
