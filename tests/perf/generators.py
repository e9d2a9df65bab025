"""Seeded problem generators for the benchmark families A-E (issue 3).

Each function returns a request dict for POST /v1/solve, built only from a seeded numpy
Generator, so the same arguments give the same bytes on every machine. Lists are built
with ``tolist()`` and comprehensions over whole columns: a million arcs must not take
longer to generate than to solve.

Every family is feasible by construction (a full matching or a full routing of the hard
demand exists), so that the bare floors, which have no shortfall stage, solve the same
problem the service does and their objectives can be compared with the service's.
"""

from __future__ import annotations

from typing import Any

import numpy as np

#: Integer costs of the dense families A and B lie in 0..DENSE_COST_MAX (issue 3).
DENSE_COST_MAX = 10**4
#: Eligible agents per ticket in family D, allowed pairs per row in family C.
PER_TICKET = 30
PER_ROW = 30
#: Family D's agent supplies (issue 3: capacity 20-40).
AGENT_SUPPLY = (20, 40)
#: Family D's scaled series keeps total supply at about this multiple of the demand.
SUPPLY_COVER = 1.2

Request = dict[str, Any]


def _ids(prefix: str, n: int) -> list[str]:
    return [f"{prefix}{i}" for i in range(n)]


def _distinct_per_row(rng: np.random.Generator, rows: int, pool: int, k: int,
                      first: np.ndarray) -> np.ndarray:
    """``rows x k`` distinct picks from ``range(pool)``, column 0 forced to ``first``.

    Random keys argsorted per row give a uniform sample without replacement; the forced
    pick is moved to column 0 by giving it the smallest key. Memory is ``rows x pool``
    floats, so callers keep ``pool`` modest (agents, not tickets) or go by blocks.
    """
    out = np.empty((rows, k), np.int64)
    block = max(1, 4_000_000 // pool)   # keeps the key matrix near 32 MB
    for start in range(0, rows, block):
        stop = min(rows, start + block)
        keys = rng.random((stop - start, pool))
        keys[np.arange(stop - start), first[start:stop]] = -1.0
        out[start:stop] = np.argpartition(keys, k - 1, axis=1)[:, :k]
        # argpartition leaves the k smallest unordered: put the forced pick first again
        forced = out[start:stop] == first[start:stop, None]
        order = np.argsort(~forced, axis=1, kind="stable")
        out[start:stop] = np.take_along_axis(out[start:stop], order, axis=1)
    return out


def dense_assignment(n: int, m: int | None = None, seed: int = 1) -> Request:
    """Families A (n x n) and B (n x m): a full dense matrix of integer costs 0..10^4."""
    m = n if m is None else m
    rng = np.random.default_rng(seed)
    costs = rng.integers(0, DENSE_COST_MAX, size=(n, m), endpoint=True)
    return {"sources": [{"id": i} for i in _ids("w", n)],
            "sinks": [{"id": j} for j in _ids("j", m)],
            "costs": costs.tolist()}


def sparse_assignment(n: int, per_row: int = PER_ROW, seed: int = 3) -> Request:
    """Family C: n x n, ``per_row`` allowed pairs per row as arcs, costs 1..1000.

    A hidden permutation is always allowed, so a perfect matching exists and the sparse
    engine (not the min-cost-flow fallback) answers. Costs start at 1 because scipy's
    sparse matching drops explicit zeros; the floor then needs no shift.
    """
    rng = np.random.default_rng(seed)
    cols = np.empty((n, per_row), np.int64)
    perm = rng.permutation(n)
    # n x n keys would be 3.2 GB at n = 20,000: draw with replacement and redraw clashes,
    # a bounded number of times (clashes are rare when per_row << n).
    cols[:, 0] = perm
    cols[:, 1:] = rng.integers(0, n, size=(n, per_row - 1))
    for _ in range(100):
        s = np.sort(cols, axis=1)
        dup_rows = np.flatnonzero((s[:, 1:] == s[:, :-1]).any(axis=1))
        if len(dup_rows) == 0:
            break
        cols[dup_rows, 1:] = rng.integers(0, n, size=(len(dup_rows), per_row - 1))
    else:
        raise RuntimeError("could not draw distinct pairs per row")
    rows = np.repeat(np.arange(n), per_row)
    cols = cols.ravel()
    cost = rng.integers(1, 1000, size=len(rows), endpoint=True)
    src, snk = _ids("r", n), _ids("c", n)
    arcs = [{"from": src[r], "to": snk[c], "cost": k}
            for r, c, k in zip(rows.tolist(), cols.tolist(), cost.tolist(), strict=True)]
    return {"sources": [{"id": i} for i in src], "sinks": [{"id": j} for j in snk],
            "arcs": arcs}


def ticket_routing(tickets: int = 5000, agents: int = 300, per_ticket: int = PER_TICKET,
                   seed: int = 4) -> Request:
    """Family D: agents with supply 20-40, tickets of demand 1, ``per_ticket`` eligible
    agents per ticket, costs 1..1000; arcs carry no capacity (an agent's supply bounds it).

    Each ticket's first eligible agent is its "home" agent, filled in order up to each
    agent's supply, so every ticket can be served and the min-cost flow is feasible.
    """
    rng = np.random.default_rng(seed)
    supply = rng.integers(AGENT_SUPPLY[0], AGENT_SUPPLY[1], size=agents, endpoint=True)
    if int(supply.sum()) < tickets:
        raise ValueError(f"{agents} agents cannot cover {tickets} tickets")
    home = np.searchsorted(np.cumsum(supply), np.arange(tickets), side="right")
    eligible = _distinct_per_row(rng, tickets, agents, per_ticket, home)
    heads = np.repeat(np.arange(tickets), per_ticket)
    tails = eligible.ravel()
    cost = rng.integers(1, 1000, size=len(heads), endpoint=True)
    a_ids, t_ids = _ids("a", agents), _ids("t", tickets)
    arcs = [{"from": a_ids[a], "to": t_ids[t], "cost": k}
            for a, t, k in zip(tails.tolist(), heads.tolist(), cost.tolist(), strict=True)]
    return {"sources": [{"id": a, "supply": s}
                        for a, s in zip(a_ids, supply.tolist(), strict=True)],
            "sinks": [{"id": t} for t in t_ids],
            "arcs": arcs}


def ticket_routing_scaled(arcs: int, seed: int = 5) -> Request:
    """Family D's scaled series: ``arcs / 30`` tickets, agents so supply covers ~1.2x demand.

    At least ``2 * per_ticket`` agents, so that 30 distinct eligible agents per ticket
    leave some choice even on the smallest sizes.
    """
    tickets = max(1, arcs // PER_TICKET)
    mean_supply = sum(AGENT_SUPPLY) / 2
    agents = max(2 * PER_TICKET, int(np.ceil(SUPPLY_COVER * tickets / mean_supply)))
    return ticket_routing(tickets, agents, PER_TICKET, seed)


def transshipment(stores: int = 4500, warehouses: int = 40, depots: int = 400,
                  wh_per_depot: int = 12, depots_per_store: int = 10,
                  seed: int = 6) -> Request:
    """Family E: warehouses -> depots -> stores, every arc with a capacity.

    Defaults give 400*12 + 4500*10 = 49,800 arcs. Stores demand 1..20 (hard); warehouses
    hold ~1.2x the total demand. Feasible by construction: each store has a home depot
    and each depot a home warehouse whose arcs and supplies carry the home demand; the
    other arcs get random capacities and costs, so cheaper routes compete with them.
    """
    rng = np.random.default_rng(seed)
    demand = rng.integers(1, 20, size=stores, endpoint=True)
    home_depot = rng.integers(0, depots, size=stores)
    home_wh = rng.integers(0, warehouses, size=depots)
    depot_load = np.bincount(home_depot, weights=demand, minlength=depots).astype(np.int64)
    wh_load = np.bincount(home_wh, weights=depot_load, minlength=warehouses).astype(np.int64)
    supply = np.ceil(SUPPLY_COVER * wh_load).astype(np.int64) + 1

    # warehouse -> depot: column 0 is the home warehouse (capacity >= the depot's load)
    wd = _distinct_per_row(rng, depots, warehouses, wh_per_depot, home_wh)
    wd_cap = rng.integers(10, 200, size=wd.shape, endpoint=True)
    wd_cap[:, 0] = np.maximum(wd_cap[:, 0], depot_load)
    wd_cost = rng.integers(10, 500, size=wd.shape, endpoint=True)
    # depot -> store: column 0 is the home depot (capacity >= the store's demand)
    ds = _distinct_per_row(rng, stores, depots, depots_per_store, home_depot)
    ds_cap = rng.integers(1, 20, size=ds.shape, endpoint=True)
    ds_cap[:, 0] = np.maximum(ds_cap[:, 0], demand)
    ds_cost = rng.integers(1, 1000, size=ds.shape, endpoint=True)

    w_ids, d_ids, s_ids = _ids("wh", warehouses), _ids("dp", depots), _ids("st", stores)
    arcs = [{"from": w_ids[w], "to": d_ids[d], "cost": c, "capacity": u}
            for w, d, c, u in zip(wd.ravel().tolist(),
                                  np.repeat(np.arange(depots), wh_per_depot).tolist(),
                                  wd_cost.ravel().tolist(), wd_cap.ravel().tolist(),
                                  strict=True)]
    arcs += [{"from": d_ids[d], "to": s_ids[s], "cost": c, "capacity": u}
             for d, s, c, u in zip(ds.ravel().tolist(),
                                   np.repeat(np.arange(stores), depots_per_store).tolist(),
                                   ds_cost.ravel().tolist(), ds_cap.ravel().tolist(),
                                   strict=True)]
    return {"sources": [{"id": w, "supply": s}
                        for w, s in zip(w_ids, supply.tolist(), strict=True)],
            "nodes": [{"id": d} for d in d_ids],
            "sinks": [{"id": s, "demand": q}
                      for s, q in zip(s_ids, demand.tolist(), strict=True)],
            "arcs": arcs}


# --------------------------------------------------------------------- worst-case family W
# Shapes chosen to be hard for the engines and for the potentials (issue "exact
# verification", item 6): a long path (depth = size), deep layers, a grid, many parallel
# arcs. Nodes are numbered sources, then transshipment nodes, then sinks, as in a request.


def _network_request(n_src: int, n_mid: int, n_snk: int, supply: np.ndarray,
                     demand: np.ndarray, tail: np.ndarray, head: np.ndarray,
                     cost: np.ndarray, capacity: np.ndarray | None,
                     penalty: np.ndarray | None = None) -> Request:
    """A request from node-index arrays; capacity 0 means an unbounded arc."""
    ids = _ids("s", n_src) + _ids("n", n_mid) + _ids("t", n_snk)
    cap = [None] * len(tail) if capacity is None else capacity.tolist()
    arcs = [{"from": ids[a], "to": ids[b], "cost": c} if not u else
            {"from": ids[a], "to": ids[b], "cost": c, "capacity": u}
            for a, b, c, u in zip(tail.tolist(), head.tolist(), cost.tolist(), cap,
                                  strict=True)]
    sinks = [{"id": ids[n_src + n_mid + j], "demand": q} for j, q in enumerate(demand.tolist())]
    if penalty is not None:
        for s, p in zip(sinks, penalty.tolist(), strict=True):
            s["penalty"] = p
    return {"sources": [{"id": ids[i], "supply": q} for i, q in enumerate(supply.tolist())],
            "nodes": [{"id": i} for i in ids[n_src:n_src + n_mid]],
            "sinks": sinks, "arcs": arcs}


def chain(n: int, variant: str = "forward", seed: int = 11) -> Request:
    """One source -> ``n - 2`` nodes in a path -> one sink, 7 units, costs 0..1000.

    Every 10th link has a parallel bypass of capacity 3 and cost + 5000. ``forward``: nodes
    numbered and arcs listed along the path, links unbounded; ``reversed``: the path runs
    through the nodes in reverse order and the arcs are listed from the sink end;
    ``saturated``: forward, but every link has capacity 7 = the flow, so no arc is strictly
    between its bounds (the free-arc forest of the potentials finds nothing).
    """
    rng = np.random.default_rng(seed)
    mids = n - 2
    order = np.arange(mids)[::-1] if variant == "reversed" else np.arange(mids)
    path = np.concatenate([[0], 1 + order, [n - 1]])
    tail, head = path[:-1], path[1:]
    cost = rng.integers(0, 1000, size=n - 1, endpoint=True)
    cap = np.full(n - 1, 7 if variant == "saturated" else 0, np.int64)
    by = np.arange(0, n - 1, 10)
    tail, head = np.concatenate([tail, tail[by]]), np.concatenate([head, head[by]])
    cost = np.concatenate([cost, cost[by] + 5000])
    cap = np.concatenate([cap, np.full(len(by), 3)])
    if variant == "reversed":
        tail, head, cost, cap = tail[::-1], head[::-1], cost[::-1], cap[::-1]
    return _network_request(1, mids, 1, np.array([7]), np.array([7]), tail, head, cost, cap)


def layered(layers: int, width: int = 100, degree: int = 5, seed: int = 12) -> Request:
    """``layers`` layers of ``width`` nodes: the first sources, the last soft sinks
    (penalty 200,000, above any path); each node has ``degree`` random arcs into the next
    layer, capacity 1..50, cost 0..1000."""
    rng = np.random.default_rng(seed)
    n = layers * width
    u = np.repeat(np.arange(n - width), degree)
    v = (u // width + 1) * width + rng.integers(0, width, size=len(u))
    keys = np.unique(u * n + v)
    tail, head = keys // n, keys % n
    cost = rng.integers(0, 1000, size=len(tail), endpoint=True)
    cap = rng.integers(1, 50, size=len(tail), endpoint=True)
    supply = rng.integers(50, 150, size=width, endpoint=True)
    demand = rng.integers(20, 100, size=width, endpoint=True)
    return _network_request(width, n - 2 * width, width, supply, demand, tail, head, cost,
                            cap, np.full(width, 200_000))


def grid(rows: int, cols: int, seed: int = 13) -> Request:
    """A ``rows x cols`` grid with arcs to the 4 neighbours (capacity 5..40, cost 1..100);
    the first row sources, the last row soft sinks (penalty 10^6)."""
    rng = np.random.default_rng(seed)
    idx = np.arange(rows * cols).reshape(rows, cols)
    pairs = [(idx[:, :-1], idx[:, 1:]), (idx[:, 1:], idx[:, :-1]),
             (idx[:-1, :], idx[1:, :]), (idx[1:, :], idx[:-1, :])]
    tail = np.concatenate([a.ravel() for a, _ in pairs])
    head = np.concatenate([b.ravel() for _, b in pairs])
    cost = rng.integers(1, 100, size=len(tail), endpoint=True)
    cap = rng.integers(5, 40, size=len(tail), endpoint=True)
    supply = rng.integers(20, 60, size=cols, endpoint=True)
    demand = rng.integers(10, 50, size=cols, endpoint=True)
    return _network_request(cols, (rows - 2) * cols, cols, supply, demand, tail, head, cost,
                            cap, np.full(cols, 1_000_000))


def parallel(sources: int, sinks: int, tiers: int = 20, seed: int = 14) -> Request:
    """Every source-sink pair joined by ``tiers`` parallel arcs of capacity 1..10 and rising
    cost (convex tiers), listed in random order; hard sinks, supply 1.3x the demand."""
    rng = np.random.default_rng(seed)
    s = np.repeat(np.arange(sources), sinks * tiers)
    t = np.tile(np.repeat(np.arange(sinks), tiers), sources) + sources
    base = rng.integers(0, 500, size=(sources * sinks, 1))
    cost = (base + np.cumsum(rng.integers(1, 50, size=(sources * sinks, tiers)), axis=1)).ravel()
    cap = rng.integers(1, 10, size=len(s), endpoint=True)
    demand = rng.integers(50, 300, size=sinks, endpoint=True)
    supply = np.full(sources, int(np.ceil(1.3 * demand.sum() / sources)))
    perm = rng.permutation(len(s))
    return _network_request(sources, 0, sinks, supply, demand, s[perm], t[perm], cost[perm],
                            cap[perm])
