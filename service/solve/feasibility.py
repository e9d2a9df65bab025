"""What can be routed at all: unbounded cycles, and the least possible hard shortfall.

Stage 1 of the solve (README, "How a problem is solved"): a maximum flow from the sources
into the hard sinks. Its value fixes ``H``, the least total hard demand any flow must leave
unmet, and its minimum cut is the proof of ``H`` (Gale's feasibility theorem / max-flow
min-cut): the hard sinks on the sink side need more than the arcs into that side carry.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from ortools.graph.python import max_flow
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from service.errors import Infeasible, OutOfRange, Unbounded
from service.network.model import Network
from service.solve.paths import bellman_ford, cycle_through_pred

__all__ = ["Shortfall", "check_bounded", "cut_capacity", "least_shortfall",
           "shortfall_of_matching", "witness"]


@dataclass(frozen=True)
class Shortfall:
    """Least total unmet hard demand ``amount`` and its proof, a mask of the sink side."""

    amount: int
    sink_side: np.ndarray    # bool per user node

    @classmethod
    def none(cls, net: Network) -> Shortfall:
        """Every hard demand met: nothing short, an empty sink side."""
        return cls(0, np.zeros(net.n_user, bool))


def check_bounded(net: Network) -> None:
    """Raise Unbounded naming a negative-cost cycle made only of unbounded arcs."""
    arcs = net.arc_list
    if arcs is None:
        return                      # a matrix joins sources to sinks only: no cycles
    free = ~arcs.bounded
    if net.pins is not None:
        free[net.pins.arc] = False          # a pinned arc's flow is fixed
    if not (free & (arcs.cost < 0)).any():
        return
    tail, head, cost = arcs.tail[free], arcs.head[free], arcs.cost[free]
    graph = coo_matrix((np.ones(len(tail)), (tail, head)), shape=(net.n_user, net.n_user))
    _, label = connected_components(graph, directed=True, connection="strong")
    inside = label[tail] == label[head]          # arcs that can lie on a cycle
    if not (inside & (cost < 0)).any():
        return
    on = np.flatnonzero(inside)
    paths = bellman_ford(net.n_user, tail[on], head[on], cost[on], want_pred=True)
    if paths.converged:
        return
    cycle = cycle_through_pred(paths, tail[on])
    names = [net.ids[int(tail[on[a]])] for a in cycle]
    total = int(cost[on[cycle]].sum()) * net.sign
    raise Unbounded(
        f"the cycle {' -> '.join(names + names[:1])} has unbounded capacity and "
        f"{'total score' if net.maximize else 'total cost'} {total / net.cost_scale:g} "
        f"per unit, so the {'score grows' if net.maximize else 'cost falls'} without limit",
        cycle=names)


def shortfall_of_matching(net: Network, matched: int) -> Shortfall:
    """The proof for an assignment whose matching covers the smaller side.

    With ``n`` unit sources and ``m`` unit hard sinks, at most ``n`` sinks can be served:
    put every user node on the sink side; the cut is the ``n`` supply arcs.
    """
    short = net.n_sinks - matched
    side = np.ones(net.n_user, bool) if short > 0 else np.zeros(net.n_user, bool)
    return Shortfall(short, side)


def least_shortfall(net: Network) -> Shortfall:
    """Maximum flow into the hard sinks; its value gives the least hard shortfall."""
    hard = np.flatnonzero(~net.soft)
    hard_demand = net.hard_demand
    if hard_demand == 0:
        return Shortfall.none(net)
    n = net.n_user
    S, T = n, n + 1
    off = net.sink_offset
    src = np.arange(net.n_sources)
    arcs = net.arcs
    tails = np.concatenate([np.full(len(src), S), arcs.tail, hard + off])
    heads = np.concatenate([src, arcs.head, np.full(len(hard), T)])
    caps = np.concatenate([net.supply,
                           np.where(arcs.bounded, arcs.capacity, net.unbounded_capacity()),
                           net.demand[hard]])
    solver = max_flow.SimpleMaxFlow()
    solver.add_arcs_with_capacity(tails.astype(np.int32), heads.astype(np.int32),
                                  caps.astype(np.int64))
    status = solver.solve(S, T)
    if status != solver.OPTIMAL:
        raise OutOfRange(f"the maximum-flow stage could not run ({status.name}); "
                       "reduce capacities or supplies")
    amount = hard_demand - int(solver.optimal_flow())
    side = np.zeros(n, bool)
    if amount > 0:
        side[:] = True
        reach = np.asarray(solver.get_source_side_min_cut(), dtype=np.int64)
        side[reach[reach < n]] = False
    return Shortfall(amount, side)


def witness(net: Network, shortfall: Shortfall) -> dict:
    """What a dispatcher can act on: the short sinks, what limits them, by how much."""
    side = shortfall.sink_side
    off = net.sink_offset
    sinks = np.flatnonzero(side[off:] & ~net.soft)
    sources = np.flatnonzero(side[: net.n_sources])
    arcs = net.arcs
    crossing = ~side[arcs.tail] & side[arcs.head]
    if net.pins is not None:
        crossing[np.searchsorted(arcs.id, net.pins.arc)] = False
    crossing = np.flatnonzero(crossing)
    return {
        "sinks": [net.ids[off + int(i)] for i in sinks],
        "sources": [net.ids[int(i)] for i in sources],
        "arcs": [{"from": net.ids[int(arcs.tail[a])], "to": net.ids[int(arcs.head[a])],
                  "capacity": int(arcs.capacity[a])} for a in crossing],
        "demand": int(net.demand[sinks].sum()),
        "capacity": cut_capacity(net, side),
        "shortfall": shortfall.amount,
    }


def reject_if_short(net: Network, shortfall: Shortfall) -> None:
    """With ``unmet_demand: "reject"``, any hard shortfall is an error carrying the witness."""
    if net.reject_unmet and shortfall.amount > 0:
        w = witness(net, shortfall)
        raise Infeasible(
            f"hard sinks {', '.join(w['sinks'][:5])}{' ...' if len(w['sinks']) > 5 else ''} "
            f"need {_units(w['demand'])} but the sources and arcs that can reach them carry "
            f"at most {w['capacity']}: {w['shortfall']} short (see witness)",
            witness=w)


def _units(n: int) -> str:
    return f"{n} unit" if n == 1 else f"{n} units"


def cut_capacity(net: Network, side: np.ndarray) -> int:
    """What arcs into the sink side can carry: its sources' supply, the capacity of arcs
    into it, pinned flow into it, less pinned flow out of it (README, "The certificate")."""
    if not side.any():
        return 0
    total = int(net.supply[side[: net.n_sources]].sum())
    if net.arc_list is not None:
        arcs = net.arc_list
        crossing = ~side[arcs.tail] & side[arcs.head]
        if net.pins is not None:
            crossing[net.pins.arc] = False      # arc ids of a list are positions
        total += int(arcs.capacity[crossing].sum())
    if net.pins is not None:
        tail, head = net.endpoints(net.pins.arc)
        total += int(net.pins.flow[~side[tail] & side[head]].sum())
        total -= int(net.pins.flow[side[tail] & ~side[head]].sum())
    return total
