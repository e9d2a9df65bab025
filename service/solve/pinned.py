"""Stage 1 with pins: the least hard shortfall when some arcs carry fixed flow.

A pin is an arc with lower = upper bound. Stage 1 becomes a maximum flow with lower
bounds (Ahuja, Magnanti & Orlin 1993, §6.7): in the circulation of super-source ``S``,
super-sink ``T``, supply arcs ``S -> source``, user arcs, ``hard sink -> T``, ``soft sink ->
S`` (a soft sink may absorb pinned flow) and the return arc ``T -> S``, maximise the flow
on ``T -> S``. The pins are sent ahead (node imbalances), and OR-Tools' min-cost flow
solves it with cost -M on the return arc and 1 on every user arc (M beyond any simple
path's length): every augmenting path lowers the cost, and no flow circles for nothing.

Its proof is the same kind of cut as without pins: X = the nodes the residual graph reaches
from ``S`` without the return arc. Arcs from X into Y are full and arcs from Y into X at
their lower bound, so the hard demand served is ``supply(Y's sources) + sum u(X -> Y) -
sum l(Y -> X)`` over user arcs, plus the demand of the hard sinks in X (Hoffman's
circulation theorem; max-flow min-cut with bounds).

When the pins alone cannot be routed, Hoffman's theorem gives the witness: a set of nodes
whose pins bring in more than the arcs leaving it can carry (or the mirror image).
"""

from __future__ import annotations

import math

import numpy as np
from ortools.graph.python import max_flow, min_cost_flow
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import breadth_first_order

from service.errors import OutOfRange, PinsInfeasible
from service.network.model import Network
from service.solve import isolation
from service.solve.engines import log2_ceil
from service.solve.extended import pinned_flow
from service.solve.feasibility import Shortfall

__all__ = ["check_pin_capacity", "pinned_shortfall"]

_Status = min_cost_flow.SimpleMinCostFlow.Status


def _circulation(net: Network) -> tuple[np.ndarray, ...]:
    """(tail, head, capacity, cost, imbalance, pinned mask of user arcs) of the stage-1
    circulation with the pins sent ahead; the return arc is last."""
    n = net.n_user
    S, T = n, n + 1
    off = net.sink_offset
    arcs = net.arcs
    pin = pinned_flow(net, arcs.id)
    pinned = pin >= 0
    big = net.unbounded_capacity() + int(net.supply.sum())
    user_cap = np.where(pinned, 0, np.where(arcs.bounded, arcs.capacity, big))
    src = np.arange(net.n_sources)
    snk = np.arange(net.n_sinks)
    hard, soft = snk[~net.soft], snk[net.soft]
    tail = np.concatenate([np.full(len(src), S), arcs.tail, hard + off, soft + off, [T]])
    head = np.concatenate([src, arcs.head, np.full(len(hard), T), np.full(len(soft), S), [S]])
    cap = np.concatenate([net.supply, user_cap, net.demand[hard], net.demand[soft],
                          [net.hard_demand]])
    cost = np.zeros(len(tail), np.int64)
    cost[len(src): len(src) + len(arcs)] = 1
    cost[-1] = -(n + 3)
    imbalance = np.zeros(n + 2, np.int64)
    np.subtract.at(imbalance, arcs.tail[pinned], pin[pinned])
    np.add.at(imbalance, arcs.head[pinned], pin[pinned])
    return (tail.astype(np.int64), head.astype(np.int64), cap.astype(np.int64), cost,
            imbalance, pinned)


def pinned_shortfall(net: Network) -> Shortfall:
    """The least hard shortfall with the pins, and its cut; Infeasible (with a witness
    naming the pins) when the pins themselves exceed a supply, a demand or a capacity."""
    tail, head, cap, cost, imbalance, _ = _circulation(net)
    m = len(imbalance)
    out = isolation.run(_min_cost, tail, head, cap, cost, imbalance,
                        work=m * m * len(tail) * log2_ceil(m * (m + 3)))
    status = _Status(int(out["status"]))
    if status == _Status.INFEASIBLE:
        _raise_witness(net)
    if status != _Status.OPTIMAL:
        raise OutOfRange(f"the maximum-flow stage could not run ({status.name}); "
                         "reduce capacities or supplies")
    x = out["x"]
    amount = net.hard_demand - int(x[-1])
    n = net.n_user
    side = np.zeros(n, bool)
    if amount > 0:
        # the return arc is left out: the residual graph reaches T from S no other way
        t, h, c, f = tail[:-1], head[:-1], cap[:-1], x[:-1]
        fwd, back = f < c, f > 0
        rt = np.concatenate([t[fwd], h[back]])
        rh = np.concatenate([h[fwd], t[back]])
        graph = coo_matrix((np.ones(len(rt)), (rt, rh)), shape=(n + 2, n + 2)).tocsr()
        reach = breadth_first_order(graph, n, directed=True, return_predecessors=False)
        side[:] = True
        side[reach[reach < n]] = False
    return Shortfall(amount, side)


def _min_cost(tail: np.ndarray, head: np.ndarray, cap: np.ndarray, cost: np.ndarray,
              imbalance: np.ndarray) -> isolation.Arrays:
    """The bare library call: status and every arc's flow."""
    solver = min_cost_flow.SimpleMinCostFlow()
    solver.add_arcs_with_capacity_and_unit_cost(tail.astype(np.int32), head.astype(np.int32),
                                                cap, cost)
    solver.set_nodes_supplies(np.arange(len(imbalance), dtype=np.int32), imbalance)
    status = solver.solve()
    if status != _Status.OPTIMAL:
        return {"status": np.array(int(status))}
    return {"status": np.array(int(status)),
            "x": np.asarray(solver.flows(np.arange(len(tail), dtype=np.int32)), np.int64)}


def _max_flow_side(tail: np.ndarray, head: np.ndarray, cap: np.ndarray, src: int,
                   dst: int) -> isolation.Arrays:
    """The bare library call: the source side of a minimum cut."""
    solver = max_flow.SimpleMaxFlow()
    solver.add_arcs_with_capacity(tail.astype(np.int32), head.astype(np.int32),
                                  cap.astype(np.int64))
    solver.solve(src, dst)
    return {"side": np.asarray(solver.get_source_side_min_cut(), dtype=np.int64)}


def _pointers(net: Network, mask: np.ndarray) -> list[str]:
    """``/fixed/i`` of the pins in ``mask`` (over the sorted pins), in request order."""
    assert net.pins is not None
    return [f"/fixed/{i}" for i in sorted(net.pins.entry[mask].tolist())]


def check_pin_capacity(net: Network) -> None:
    """Infeasible when a pin is above its arc's capacity (the engines take a pin as both
    bounds of its arc, whatever the capacity)."""
    if net.pins is None:
        return
    cap, bounded = net.arc_bound(net.pins.arc)
    over = np.flatnonzero(bounded & (net.pins.flow > cap))
    if not len(over):
        return
    k = int(over[0])
    tail, head = net.endpoints(net.pins.arc[k: k + 1])
    ids = [net.ids[int(tail[0])], net.ids[int(head[0])]]
    mask = np.zeros(len(net.pins.arc), bool)
    mask[k] = True
    pins = _pointers(net, mask)
    raise PinsInfeasible(
        f"pin {pins[0]} fixes {int(net.pins.flow[k])} units on {ids[0]} -> {ids[1]}, whose "
        f"capacity is {int(cap[k])}",
        witness={"pins": pins, "ids": ids, "limit": "capacity",
                 "pinned": int(net.pins.flow[k]), "available": int(cap[k])})


def _raise_witness(net: Network) -> None:
    """Hoffman's cut for pins that cannot be routed: the nodes Z reachable from the
    excess in the residual graph of a maximum flow from the nodes the pins leave with
    too much to those they leave short; the pins bring ``need`` into Z, the arcs leaving
    Z carry ``available`` < ``need``. Named by its smaller side."""
    assert net.pins is not None
    tail, head, cap, _, imbalance, _ = _circulation(net)
    m = len(imbalance)
    src, dst = m, m + 1
    plus, minus = np.flatnonzero(imbalance > 0), np.flatnonzero(imbalance < 0)
    t = np.concatenate([tail, np.full(len(plus), src), minus])
    h = np.concatenate([head, plus, np.full(len(minus), dst)])
    c = np.concatenate([cap, imbalance[plus], -imbalance[minus]])
    k = m + 2
    reach = isolation.run(_max_flow_side, t, h, c, src, dst,
                          work=k * k * max(1, math.isqrt(len(t) + k)))["side"]
    z = np.zeros(m, bool)
    z[reach[reach < m]] = True
    need = int(imbalance[z].sum())
    available = int(cap[z[tail] & ~z[head]].sum())
    n = net.n_user
    entering = not z[n] and not z[n + 1]
    inside = z if entering else ~z       # the side without S and T, named by its ids
    ptail, phead = net.endpoints(net.pins.arc)
    touching = inside[ptail] ^ inside[phead]
    pins = _pointers(net, touching)
    ids = [net.ids[i] for i in np.flatnonzero(inside[:n]).tolist()]
    names = ", ".join(ids[:5]) + (" ..." if len(ids) > 5 else "")
    where = f"into {names}" if entering else f"out of {names}"
    limit = ("the arcs, demand and capacity that leave them" if entering else
             "the supply and arcs that reach them")
    raise PinsInfeasible(
        f"the pins {', '.join(pins[:5])}{' ...' if len(pins) > 5 else ''} fix {need} units "
        f"{where} but {limit} carry at most {available}",
        witness={"pins": pins, "ids": ids, "limit": "in" if entering else "out",
                 "pinned": need, "available": available})
