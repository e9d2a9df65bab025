"""The normalised network every request becomes.

A loaded problem (sources, sinks, nodes, costs or arcs) becomes one :class:`Network`: user
nodes indexed sources first, then transshipment nodes, then sinks (each in request order),
and one arc list (a cost matrix becomes its allowed cells, row-major). Numbers become
exact integers: quantities are whole numbers, and costs and penalties are multiplied by
``cost_scale`` (1 when they are all whole, else 10**COST_DECIMALS, rounded).

The same module builds the *extended* network of the certificate (README, "The
certificate"): super-source, super-sink and hard-shortfall pool joined to the user nodes.
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import repeat
from typing import Any

import numpy as np

from service.errors import InvalidProblem, TooLarge
from service.settings import Settings

#: Fractional costs and penalties are taken to this many decimals (rounded half to even).
COST_DECIMALS = 6

#: Every objective, dual objective and potential must stay within this magnitude, the
#: range in which a JSON number is exact in common clients.
MAX_EXACT = 2**53


@dataclass(frozen=True)
class Network:
    """User nodes and arcs with exact integer data; costs as the caller gave them, scaled."""

    ids: list[str]
    n_sources: int
    n_nodes: int
    n_sinks: int
    supply: np.ndarray        # int64, per source
    demand: np.ndarray        # int64, per sink
    penalty: np.ndarray       # int64 scaled, per sink (0 where hard)
    soft: np.ndarray          # bool, per sink: has a penalty
    tail: np.ndarray          # int64 node index, per arc
    head: np.ndarray          # int64 node index, per arc
    cost: np.ndarray          # int64 scaled, per arc, caller's sign
    capacity: np.ndarray      # int64, per arc (0 where unbounded)
    bounded: np.ndarray       # bool, per arc
    from_matrix: bool
    maximize: bool
    reject_unmet: bool
    cost_scale: int

    @property
    def sink_offset(self) -> int:
        return self.n_sources + self.n_nodes

    @property
    def n_user(self) -> int:
        return len(self.ids)

    @property
    def n_arcs(self) -> int:
        return len(self.tail)

    @property
    def sign(self) -> int:
        """+1 for min, -1 for max: min-form cost = sign x cost."""
        return -1 if self.maximize else 1

    @property
    def min_cost(self) -> np.ndarray:
        return self.cost if not self.maximize else -self.cost

    @property
    def total_demand(self) -> int:
        return int(self.demand.sum())

    @property
    def hard_demand(self) -> int:
        return int(self.demand[~self.soft].sum())

    def unbounded_capacity(self) -> int:
        """A capacity no optimal flow needs to exceed on an unbounded arc.

        Total demand plus all finite capacities: a flow decomposes into paths carrying
        the demand and cycles, and a cycle of only unbounded arcs gains nothing.
        """
        return self.total_demand + int(self.capacity[self.bounded].sum()) + 1

    def kind_of(self, index: int) -> str:
        if index < self.n_sources:
            return "source"
        return "node" if index < self.sink_offset else "sink"


def _limit(count: int, limit: int, what: str, setting: str) -> None:
    if count > limit:
        raise TooLarge(f"{what} has {count} entries, more than the limit of {limit} "
                       f"(setting {setting})", limit=limit)


def build_network(data: dict[str, Any], settings: Settings) -> Network:
    """Turn a loaded problem (``ProblemSchema().load``) into a :class:`Network`.

    Raises InvalidProblem listing every cross-field error (unknown or duplicate ids,
    matrix shape, self-loops) and TooLarge when a size limit of ``settings`` is exceeded.
    """
    sources, sinks = data["sources"], data["sinks"]
    nodes = data.get("nodes")
    n_src, n_snk, n_mid = len(sources), len(sinks), len(nodes) if nodes else 0
    _limit(n_src + n_snk + n_mid, settings.max_nodes, "sources + sinks + nodes", "MAX_NODES")
    errors: list[dict[str, str]] = []
    if n_src == 0:
        errors.append({"pointer": "/sources", "detail": "must hold at least one source"})
    if n_snk == 0:
        errors.append({"pointer": "/sinks", "detail": "must hold at least one sink"})
    groups = [("sources", sources), ("nodes", nodes), ("sinks", sinks)]
    ids: list[str] = []
    for _, table in groups:
        if table is not None:
            ids.extend(table.columns["id"])
    errors.extend(_check_ids(ids, groups, settings.max_id_length))
    index = dict(zip(ids, range(len(ids)), strict=True)) if not errors else {}

    penalty_present = sinks.present["penalty"]
    penalty = sinks.columns["penalty"]
    if "costs" in data:
        matrix = data["costs"]
        tail, head, cost, capacity, bounded = _arcs_from_matrix(
            matrix, n_src, n_snk, settings, errors)
        from_matrix = True
    else:
        tail, head, cost, capacity, bounded = _arcs_from_list(
            data["arcs"], index, settings, errors)
        from_matrix = False
    if errors:
        raise InvalidProblem(errors)

    fractional = not (_whole(cost) and _whole(penalty[penalty_present]))
    scale = 10**COST_DECIMALS if fractional else 1
    return Network(
        ids=ids, n_sources=n_src, n_nodes=n_mid, n_sinks=n_snk,
        supply=sources.columns["supply"], demand=sinks.columns["demand"],
        penalty=np.where(penalty_present, _scaled(penalty, scale), 0),
        soft=penalty_present.copy(),
        tail=tail, head=head, cost=_scaled(cost, scale),
        capacity=capacity, bounded=bounded, from_matrix=from_matrix,
        maximize=data["objective"] == "max",
        reject_unmet=data["unmet_demand"] == "reject",
        cost_scale=scale,
    )


def _whole(values: np.ndarray) -> bool:
    return bool(np.all(values == np.floor(values)))


def _scaled(values: np.ndarray, scale: int) -> np.ndarray:
    return np.rint(values * scale).astype(np.int64)


def _check_ids(ids: list[str], groups: list, max_len: int) -> list[dict[str, str]]:
    errors: list[dict[str, str]] = []
    too_long = max(map(len, ids), default=0) > max_len
    unique = len(set(ids)) == len(ids)
    if unique and not too_long:
        return errors
    first: dict[str, str] = {}
    for name, table in groups:
        if table is None:
            continue
        for i, id_ in enumerate(table.columns["id"]):
            pointer = f"/{name}/{i}/id"
            if len(id_) > max_len:
                errors.append({"pointer": pointer,
                               "detail": f"must be at most {max_len} characters long"})
            if id_ in first:
                errors.append({"pointer": pointer,
                               "detail": f"duplicate id {id_!r} (first at {first[id_]})"})
            else:
                first[id_] = pointer
    return errors


def _arcs_from_matrix(matrix: np.ndarray, n_src: int, n_snk: int, settings: Settings,
                      errors: list[dict[str, str]]) -> tuple[np.ndarray, ...]:
    rows, cols = matrix.shape
    _limit(rows * cols, settings.max_cells, "costs", "MAX_CELLS")
    if rows != n_src:
        errors.append({"pointer": "/costs",
                       "detail": f"has {rows} rows, expected {n_src} (one per source)"})
    elif cols != n_snk and rows > 0:
        errors.append({"pointer": "/costs/0",
                       "detail": f"has {cols} entries, expected {n_snk} (one per sink)"})
    if errors:
        empty = np.zeros(0, np.int64)
        return empty, empty, np.zeros(0), empty, np.zeros(0, bool)
    r, c = np.nonzero(~np.isnan(matrix))
    tail = r.astype(np.int64)
    head = c.astype(np.int64) + n_src
    cost = matrix[r, c]
    return tail, head, cost, np.zeros(len(tail), np.int64), np.zeros(len(tail), bool)


def _arcs_from_list(arcs: Any, index: dict[str, int], settings: Settings,
                    errors: list[dict[str, str]]) -> tuple[np.ndarray, ...]:
    n = len(arcs)
    _limit(n, settings.max_arcs, "arcs", "MAX_ARCS")
    ends = {}
    for key in ("from", "to"):
        names = arcs.columns[key]
        idx = np.fromiter(map(index.get, names, repeat(-1)), dtype=np.int64, count=n)
        if index and (idx < 0).any():
            for i in np.flatnonzero(idx < 0)[:50].tolist():
                errors.append({"pointer": f"/arcs/{i}/{key}",
                               "detail": f"unknown id {names[i]!r}"})
        ends[key] = idx
    tail, head = ends["from"], ends["to"]
    loops = np.flatnonzero((tail == head) & (tail >= 0))
    for i in loops[:50].tolist():
        errors.append({"pointer": f"/arcs/{i}",
                       "detail": f"arc from {arcs.columns['from'][i]!r} to itself"})
    bounded = arcs.present["capacity"]
    capacity = np.where(bounded, arcs.columns["capacity"], 0).astype(np.int64)
    return tail, head, arcs.columns["cost"], capacity, bounded.copy()


@dataclass(frozen=True)
class Extended:
    """The extended network: user arcs first, then the virtual arcs, in fixed blocks.

    Nodes: user nodes ``0..n_user-1``, then super-source ``S``, super-sink ``T``, hard
    pool ``P``. Arc blocks (slices into the arrays): ``user``, ``supply`` (S->source),
    ``demand`` (sink->T), ``soft`` (S->soft sink), ``pool`` (S->P, one arc) and ``hard``
    (P->hard sink). ``cost`` is the min-form cost; ``capacity`` of unbounded user arcs is
    :meth:`Network.unbounded_capacity`.
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


def extend(net: Network, hard_shortfall: int) -> Extended:
    """Build the extended network with the hard pool capped at ``hard_shortfall``."""
    n = net.n_user
    S, T, P = n, n + 1, n + 2
    src = np.arange(net.n_sources, dtype=np.int64)
    snk = np.arange(net.n_sinks, dtype=np.int64)
    soft, hard = snk[net.soft], snk[~net.soft]
    off = net.sink_offset
    user_cap = np.where(net.bounded, net.capacity, net.unbounded_capacity())
    parts = [
        ("user", net.tail, net.head, net.min_cost, user_cap),
        ("supply", np.full(len(src), S), src, np.zeros(len(src), np.int64), net.supply),
        ("demand", snk + off, np.full(len(snk), T), np.zeros(len(snk), np.int64), net.demand),
        ("soft", np.full(len(soft), S), soft + off, net.penalty[soft], net.demand[soft]),
        ("pool", np.array([S]), np.array([P]), np.zeros(1, np.int64),
         np.array([hard_shortfall])),
        ("hard", np.full(len(hard), P), hard + off, np.zeros(len(hard), np.int64),
         net.demand[hard]),
    ]
    blocks, start = {}, 0
    for name, t, *_ in parts:
        blocks[name] = slice(start, start + len(t))
        start += len(t)

    def cat(k: int) -> np.ndarray:
        return np.concatenate([np.asarray(p[k], dtype=np.int64) for p in parts])

    return Extended(n_nodes=n + 3, S=S, T=T, P=P, tail=cat(1), head=cat(2), cost=cat(3),
                    capacity=cat(4), blocks=blocks, soft_sinks=soft, hard_sinks=hard)


def complete_flows(net: Network, ext: Extended, user_flow: np.ndarray) -> np.ndarray:
    """Extend a flow on the user arcs to the whole extended network (unique by conservation)."""
    out = np.bincount(net.tail, weights=user_flow, minlength=net.n_user)
    inn = np.bincount(net.head, weights=user_flow, minlength=net.n_user)
    # bincount works in float64; flows stay far below 2**53, so this is exact.
    net_out = np.rint(out - inn).astype(np.int64)
    received = -net_out[net.sink_offset:]
    short = net.demand - received
    x = np.zeros(len(ext.tail), np.int64)
    b = ext.blocks
    x[b["user"]] = user_flow
    x[b["supply"]] = net_out[: net.n_sources]
    x[b["demand"]] = net.demand
    x[b["soft"]] = short[ext.soft_sinks]
    x[b["hard"]] = short[ext.hard_sinks]
    x[b["pool"]] = short[ext.hard_sinks].sum()
    return x
