"""Min-cost flow on the extended network: OR-Tools' SimpleMinCostFlow (cost scaling)."""

from __future__ import annotations

import numpy as np
from ortools.graph.python import min_cost_flow

from service.errors import OutOfRange
from service.network.model import Flow, Network
from service.solve import isolation
from service.solve.engines import Run, log2_ceil
from service.solve.extended import extend, user_bounds

__all__ = ["NAME", "solve"]

NAME = "min_cost_flow"

_Status = min_cost_flow.SimpleMinCostFlow.Status


def solve(net: Network, hard_shortfall: int) -> Run | None:
    """A least-cost flow of the extended network, on the user arcs; None when there is none.

    Parameters
    ----------
    net : any network.
    hard_shortfall : caps the hard pool: the least hard shortfall from stage 1, or 0 to
        try meeting every hard demand (None comes back when that cannot be done).

    Returns
    -------
    The flow, without duals: OR-Tools computes potentials but does not return them; the
    certificate finds its own (:func:`service.solve.potentials.forest_candidate`).

    Notes
    -----
    The extended network (super-source with supply equal to total demand, super-sink,
    shortfall arcs) has a feasible flow when the pool holds at least the least hard
    shortfall: every soft sink can be fed by its shortfall arc, the hard ones by the pool.
    OR-Tools implements the cost scaling push-relabel method (Goldberg 1997; Ahuja,
    Magnanti & Orlin 1993, §10.3), integral for integral data, in
    O(n^2 m log(nC)) steps; the call runs where the time limit can stop it
    (:mod:`service.solve.isolation`). Unbounded arcs get ``net.unbounded_capacity()``.
    """
    arcs = net.arcs
    ext = extend(net, hard_shortfall)
    big = net.unbounded_capacity()
    supplies = np.zeros(ext.n_nodes, np.int64)
    supplies[ext.S] = net.total_demand
    supplies[ext.T] = -net.total_demand
    if net.replans:
        # bounds l <= x <= u become 0 <= x - l <= u - l, with l sent ahead of the solve
        lower, upper, bounded = user_bounds(net, arcs.id)
        capacity = np.where(bounded, upper - lower, big)
        ext_capacity = ext.capacity - ext.lower
        for tails, heads, sent in ((arcs.tail, arcs.head, lower),
                                   (ext.tail, ext.head, ext.lower)):
            np.subtract.at(supplies, tails, sent)
            np.add.at(supplies, heads, sent)
    else:
        lower = np.zeros(len(arcs), np.int64)
        capacity = np.where(arcs.bounded, arcs.capacity, big)
        ext_capacity = ext.capacity
    tail = np.concatenate([arcs.tail, ext.tail])
    cost = np.concatenate([arcs.cost, ext.cost])
    spread = int(np.abs(cost).max(initial=0)) + 1
    work = ext.n_nodes ** 2 * len(tail) * log2_ceil(ext.n_nodes * spread)
    keep = ext.blocks["keep"]
    out = isolation.run(_call, tail, np.concatenate([arcs.head, ext.head]),
                        np.concatenate([capacity, ext_capacity]), cost, supplies, len(arcs),
                        len(arcs) + keep.start, len(arcs) + keep.stop, work=work)
    status = _Status(int(out["status"]))
    if status == _Status.INFEASIBLE:
        return None
    if status != _Status.OPTIMAL:
        raise OutOfRange(f"the min-cost-flow stage could not run ({status.name}); the costs or "
                         "capacities are too large for exact 64-bit arithmetic")
    if not net.replans:
        used = out["used"]
        return Run(Flow(arc=arcs.id[used], amount=out["amount"]))
    # user arc flow = its plain part + its keep arc, with the lower bounds put back
    total = lower.copy()
    total[out["used"]] += out["amount"]
    keep_flow = out["keep"] + ext.lower[keep]
    carried = keep_flow > 0                 # only on arcs the network has
    if carried.any():
        position = np.searchsorted(arcs.id, ext.keep_arc[carried])
        np.add.at(total, position, keep_flow[carried])
    used = np.flatnonzero(total)
    return Run(Flow(arc=arcs.id[used], amount=total[used]))


def _call(tail: np.ndarray, head: np.ndarray, capacity: np.ndarray, cost: np.ndarray,
          supplies: np.ndarray, n_user: int, keep_start: int, keep_stop: int
          ) -> isolation.Arrays:
    """The bare library call: status, the user arcs with flow and their amounts, and the
    flows of the keep arcs (positions ``keep_start:keep_stop``)."""
    solver = min_cost_flow.SimpleMinCostFlow()
    handles = solver.add_arcs_with_capacity_and_unit_cost(
        tail.astype(np.int32), head.astype(np.int32), capacity, cost)
    solver.set_nodes_supplies(np.arange(len(supplies), dtype=np.int32), supplies)
    status = solver.solve()
    if status != _Status.OPTIMAL:
        return {"status": np.array(int(status))}
    flows = np.asarray(solver.flows(handles[:n_user]), dtype=np.int64)
    used = np.flatnonzero(flows)
    keep = np.asarray(solver.flows(handles[keep_start:keep_stop]), dtype=np.int64)
    return {"status": np.array(int(status)), "used": used, "amount": flows[used],
            "keep": keep}
