"""The extended network of the certificate: the user network plus its virtual part.

Super-source, super-sink and hard-shortfall pool with their arcs (README, "The
certificate"); the min-cost-flow engine solves on it and the certifier proves on it.

Re-planning adds parallel arcs and bounds, and no nodes: load costs split a supply arc
into tiers (block ``load`` holds every tier after a source's first), a previous plan adds
beside each arc it used a *keep* arc of capacity min(previous units, capacity) at cost
``c - change_penalty`` (block ``keep``; the constant ``change_penalty x previous units`` is
``keep_constant``), and a pin fixes an arc's flow: lower = upper bound, on its keep arc too.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from service.network.model import Flow, Network


@dataclass(frozen=True)
class Extended:
    """The virtual arcs of the extended network, in fixed blocks.

    Nodes: user nodes ``0..n_user-1``, then super-source ``S``, super-sink ``T``, hard
    pool ``P``. Arc blocks (slices into the arrays): ``supply`` (S->source), ``demand``
    (sink->T), ``soft`` (S->soft sink, cost = penalty), ``pool`` (S->P, one arc of capacity
    ``hard_shortfall``) and ``hard`` (P->hard sink). All have finite capacities.
    """

    n_nodes: int
    S: int
    T: int
    P: int
    tail: np.ndarray
    head: np.ndarray
    cost: np.ndarray
    capacity: np.ndarray
    blocks: dict[str, slice]
    soft_sinks: np.ndarray    # sink positions (0..n_sinks-1) of the soft block, in order
    hard_sinks: np.ndarray    # sink positions of the hard block, in order
    lower: np.ndarray         # lower bound per arc (keep arcs of pinned arcs; else 0)
    keep_arc: np.ndarray      # user arc id of each arc of the keep block
    keep_constant: int = 0    # change_penalty x all previous units (min form, scaled)


def extend(net: Network, hard_shortfall: int) -> Extended:
    """The virtual arcs around ``net`` with the hard pool capped at ``hard_shortfall``."""
    n = net.n_user
    S, T, P = n, n + 1, n + 2
    src = np.arange(net.n_sources, dtype=np.int64)
    snk = np.arange(net.n_sinks, dtype=np.int64)
    soft, hard = snk[net.soft], snk[~net.soft]
    off = net.sink_offset
    supply_cost, supply_cap = np.zeros(len(src), np.int64), net.supply
    load_src = load_cost = load_cap = np.zeros(0, np.int64)
    if net.load is not None:
        first = _first_tiers(net)
        supply_cost, supply_cap = net.load.cost[first], net.load.capacity[first]
        rest = np.ones(len(net.load.source), bool)
        rest[first] = False
        load_src, load_cost = net.load.source[rest], net.load.cost[rest]
        load_cap = net.load.capacity[rest]
    keep_arc = keep_cap = keep_lower = np.zeros(0, np.int64)
    keep_tail = keep_head = keep_cost = keep_arc
    if net.keep is not None:
        keep_arc = net.keep.arc
        keep_tail, keep_head = net.endpoints(keep_arc)
        # an arc the network no longer has (a bottleneck's cell above the threshold) keeps
        # nothing: capacity 0, and a harmless cost
        exists = net.arc_exists(keep_arc)
        keep_cost = np.where(exists, net.arc_cost(keep_arc) - net.keep.penalty, 0)
        keep_cap = np.where(exists, keep_capacity(net), 0)
        keep_lower = np.where(pinned_flow(net, keep_arc) >= 0, keep_cap, 0)
    parts = [
        ("supply", np.full(len(src), S), src, supply_cost, supply_cap),
        ("load", np.full(len(load_src), S), load_src, load_cost, load_cap),
        ("demand", snk + off, np.full(len(snk), T), np.zeros(len(snk), np.int64), net.demand),
        ("soft", np.full(len(soft), S), soft + off, net.penalty[soft], net.demand[soft]),
        ("pool", np.array([S]), np.array([P]), np.zeros(1, np.int64),
         np.array([hard_shortfall])),
        ("hard", np.full(len(hard), P), hard + off, np.zeros(len(hard), np.int64),
         net.demand[hard]),
        ("keep", keep_tail, keep_head, keep_cost, keep_cap),
    ]
    blocks, start = {}, 0
    for name, t, *_ in parts:
        blocks[name] = slice(start, start + len(t))
        start += len(t)

    def cat(k: int) -> np.ndarray:
        return np.concatenate([np.asarray(p[k], dtype=np.int64) for p in parts])

    lower = np.zeros(start, np.int64)
    lower[blocks["keep"]] = keep_lower
    constant = 0 if net.keep is None else net.keep.penalty * net.keep.total
    return Extended(n_nodes=n + 3, S=S, T=T, P=P, tail=cat(1), head=cat(2), cost=cat(3),
                    capacity=cat(4), blocks=blocks, soft_sinks=soft, hard_sinks=hard,
                    lower=lower, keep_arc=np.asarray(keep_arc, np.int64),
                    keep_constant=constant)


def _first_tiers(net: Network) -> np.ndarray:
    """Position of each source's first load tier (its supply arc)."""
    assert net.load is not None
    src = net.load.source
    return np.flatnonzero(np.concatenate(([True], src[1:] != src[:-1])))


def pinned_flow(net: Network, arc: np.ndarray) -> np.ndarray:
    """The pinned flow of each arc id, -1 where the arc is not pinned."""
    out = np.full(len(arc), -1, np.int64)
    if net.pins is None or not len(net.pins.arc):
        return out
    at = np.searchsorted(net.pins.arc, arc)
    at = np.minimum(at, len(net.pins.arc) - 1)
    hit = net.pins.arc[at] == arc
    out[hit] = net.pins.flow[at[hit]]
    return out


def keep_capacity(net: Network) -> np.ndarray:
    """Capacity of each keep arc: the previous units on its arc, at most the arc's capacity
    and, on a pinned arc, at most the pin."""
    assert net.keep is not None
    cap = net.keep.amount
    bound, bounded = net.arc_bound(net.keep.arc)
    cap = np.where(bounded, np.minimum(cap, bound), cap)
    pin = pinned_flow(net, net.keep.arc)
    return np.where(pin >= 0, np.minimum(cap, pin), cap)


def user_bounds(net: Network, arc: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(lower, upper, bounded) of the *plain part* of user arcs ``arc``: the arc less its
    keep arc. A pinned plain part has lower = upper; an unbounded one has upper 0."""
    upper, bounded = net.arc_bound(arc)
    upper = upper.copy()
    if net.keep is not None and len(net.keep.arc):
        at = np.minimum(np.searchsorted(net.keep.arc, arc), len(net.keep.arc) - 1)
        has = net.keep.arc[at] == arc
        kept = np.zeros(len(arc), np.int64)
        kept[has] = keep_capacity(net)[at[has]]
    else:
        kept = np.zeros(len(arc), np.int64)
    pin = pinned_flow(net, arc)
    pinned = pin >= 0
    upper = np.where(pinned, pin - kept, np.where(bounded, upper - kept, 0))
    lower = np.where(pinned, upper, 0)
    return lower, upper, bounded | pinned


def virtual_flows(net: Network, ext: Extended, flow: Flow) -> np.ndarray:
    """Flows on the virtual arcs implied by a user flow (unique by conservation)."""
    tail, head = net.endpoints(flow.arc)
    net_out = np.zeros(net.n_user, np.int64)
    np.add.at(net_out, tail, flow.amount)
    np.subtract.at(net_out, head, flow.amount)
    short = net.demand + net_out[net.sink_offset:]
    x = np.zeros(len(ext.tail), np.int64)
    b = ext.blocks
    sent = net_out[: net.n_sources]
    if net.load is None:
        x[b["supply"]] = sent
    else:
        # convex tiers fill in order: the cheapest split of what each source sends
        load = net.load
        ends = np.cumsum(load.capacity)
        first = _first_tiers(net)
        starts = np.repeat(ends[first] - load.capacity[first],
                           np.diff(np.append(first, len(load.source))))
        before = ends - load.capacity - starts
        tiers = np.clip(sent[load.source] - before, 0, load.capacity)
        rest = np.ones(len(load.source), bool)
        rest[first] = False
        x[b["supply"]] = tiers[first]
        x[b["load"]] = tiers[rest]
    if net.keep is not None and len(ext.keep_arc):
        amount = np.zeros(len(ext.keep_arc), np.int64)
        at = np.searchsorted(flow.arc, ext.keep_arc)
        at = np.minimum(at, max(len(flow.arc) - 1, 0))
        if len(flow.arc):
            hit = flow.arc[at] == ext.keep_arc
            amount[hit] = flow.amount[at[hit]]
        x[b["keep"]] = np.minimum(amount, ext.capacity[b["keep"]])
    x[b["demand"]] = net.demand
    x[b["soft"]] = short[ext.soft_sinks]
    x[b["hard"]] = short[ext.hard_sinks]
    x[b["pool"]] = short[ext.hard_sinks].sum()
    return x
