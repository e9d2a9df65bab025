"""The normalised network every request becomes.

A loaded problem (sources, sinks, nodes, costs or arcs) becomes one :class:`Network`: user
nodes indexed sources first, then transshipment nodes, then sinks (each in request order).
A cost matrix stays a matrix (``dense``); an arc list becomes parallel arrays (``arcs``).
Numbers become exact integers: quantities are whole numbers, and costs and penalties are
multiplied by ``cost_scale`` (1 when they are all whole, else 10**COST_DECIMALS, rounded).
Every cost inside the service is in the *min form*: the caller's cost for ``min``, negated
for ``max``.

Arcs are named by an *arc id*: the position in the request's ``arcs``, or the cell index
``row * n_sinks + column`` of a matrix. A flow is a sparse list of arc ids and amounts.

The same module builds the virtual part of the *extended* network of the certificate
(README, "The certificate"): super-source, super-sink and hard-shortfall pool.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
from typing import Any

import numpy as np

from schemas.problem import ARC_ENDS, ID_TABLES, declared_ids
from service.errors import InvalidProblem, TooLarge
from service.settings import Settings

#: Fractional costs and penalties are taken to this many decimals (rounded half to even).
COST_DECIMALS = 6

#: Min-form cost of a forbidden cell of a dense matrix: far above any real cost (at most
#: 10**15 after scaling) and any distance, yet with room to add potentials in int64.
FORBIDDEN = 2**62


@dataclass(frozen=True)
class Arcs:
    """User arcs as parallel arrays."""

    id: np.ndarray            # int64 arc id
    tail: np.ndarray          # int64 node index
    head: np.ndarray          # int64 node index
    cost: np.ndarray          # int64, scaled, min form
    capacity: np.ndarray      # int64 (0 where unbounded)
    bounded: np.ndarray       # bool

    def __len__(self) -> int:
        return len(self.id)


@dataclass(frozen=True)
class Flow:
    """Positive flows on user arcs: arc ids in ascending order and their amounts."""

    arc: np.ndarray
    amount: np.ndarray


@dataclass(frozen=True)
class Network:
    """User nodes and arcs with exact integer data (see module docstring)."""

    ids: list[str]
    n_sources: int
    n_nodes: int
    n_sinks: int
    supply: np.ndarray        # int64, per source
    demand: np.ndarray        # int64, per sink
    penalty: np.ndarray       # int64 scaled, per sink (0 where hard)
    soft: np.ndarray          # bool, per sink: has a penalty
    dense: np.ndarray | None  # n_sources x n_sinks min-form costs, FORBIDDEN where not allowed
    arc_list: Arcs | None     # the request's arcs, when it gave arcs
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
    def from_matrix(self) -> bool:
        return self.dense is not None

    @cached_property
    def arcs(self) -> Arcs:
        """All user arcs; for a matrix, its allowed cells (built on first use)."""
        if self.arc_list is not None:
            return self.arc_list
        assert self.dense is not None
        rows, cols = np.nonzero(self.dense != FORBIDDEN)
        n = len(rows)
        return Arcs(id=rows.astype(np.int64) * self.n_sinks + cols, tail=rows.astype(np.int64),
                    head=cols.astype(np.int64) + self.n_sources, cost=self.dense[rows, cols],
                    capacity=np.zeros(n, np.int64), bounded=np.zeros(n, bool))

    @cached_property
    def n_arcs(self) -> int:
        if self.dense is not None:
            return int(np.count_nonzero(self.dense != FORBIDDEN))
        return len(self.arcs)

    @property
    def sign(self) -> int:
        """+1 for min, -1 for max: caller's cost = sign x min-form cost."""
        return -1 if self.maximize else 1

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
        finite = 0 if self.arc_list is None else int(
            self.arc_list.capacity[self.arc_list.bounded].sum())
        return self.total_demand + finite + 1

    def arc_exists(self, arc: np.ndarray) -> np.ndarray:
        """Mask of the ids that name a user arc."""
        if self.dense is not None:
            inside = (arc >= 0) & (arc < self.dense.size)
            flat = self.dense.reshape(-1)
            return inside & (flat[np.where(inside, arc, 0)] != FORBIDDEN)
        return (arc >= 0) & (arc < len(self.arcs))

    def endpoints(self, arc: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(tail, head) node indices of existing arc ids."""
        if self.dense is not None:
            rows, cols = np.divmod(arc, self.n_sinks)
            return rows, cols + self.n_sources
        return self.arcs.tail[arc], self.arcs.head[arc]

    def arc_cost(self, arc: np.ndarray) -> np.ndarray:
        """Min-form cost of existing arc ids."""
        if self.dense is not None:
            return self.dense.reshape(-1)[arc]
        return self.arcs.cost[arc]

    def arc_bound(self, arc: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(capacity, bounded) of existing arc ids; matrix cells are unbounded."""
        if self.dense is not None:
            return np.zeros(len(arc), np.int64), np.zeros(len(arc), bool)
        return self.arcs.capacity[arc], self.arcs.bounded[arc]

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
    groups = [(name, data.get(name)) for name in ID_TABLES]
    ids = declared_ids(data)
    errors.extend(_check_ids(ids, groups, settings.max_id_length))
    if errors:
        raise InvalidProblem(errors)

    penalty_present = sinks.present["penalty"]
    penalty = sinks.columns["penalty"]
    sign = -1 if data["objective"] == "max" else 1
    dense = arc_list = None
    if "costs" in data:
        matrix = data["costs"]
        _check_matrix(matrix, n_src, n_snk, settings, errors)
        if errors:
            raise InvalidProblem(errors)
        whole_penalties = _whole(penalty[penalty_present])
        if matrix.dtype == np.int64 and whole_penalties:
            scale = 1                       # whole costs, every cell allowed: no copy
            dense = _min_form(matrix, scale, sign)
        else:
            allowed = ~np.isnan(matrix)
            values = np.where(allowed, matrix, 0.0)
            scale = _scale_for(values, penalty[penalty_present])
            dense = _scaled(values, scale) * sign
            dense[~allowed] = FORBIDDEN
    else:
        table = data["arcs"]
        tail, head = _arc_ends(table, settings, errors)
        if errors:
            raise InvalidProblem(errors)
        scale = _scale_for(table.columns["cost"], penalty[penalty_present])
        bounded = table.present["capacity"].copy()
        arc_list = Arcs(id=np.arange(len(tail), dtype=np.int64), tail=tail, head=head,
                        cost=_min_form(table.columns["cost"], scale, sign),
                        capacity=np.where(bounded, table.columns["capacity"], 0).astype(np.int64),
                        bounded=bounded)
    return Network(
        ids=ids, n_sources=n_src, n_nodes=n_mid, n_sinks=n_snk,
        supply=sources.columns["supply"], demand=sinks.columns["demand"],
        penalty=np.where(penalty_present, _scaled(penalty, scale), 0),
        soft=penalty_present.copy(), dense=dense, arc_list=arc_list,
        maximize=sign < 0, reject_unmet=data["unmet_demand"] == "reject", cost_scale=scale,
    )


def _scale_for(costs: np.ndarray, penalties: np.ndarray) -> int:
    return 1 if _whole(costs) and _whole(penalties) else 10**COST_DECIMALS


def _whole(values: np.ndarray) -> bool:
    return values.dtype.kind == "i" or bool(np.all(values == np.floor(values)))


def _scaled(values: np.ndarray, scale: int) -> np.ndarray:
    """Values on the integer grid of ``scale``; integers are exact as they are."""
    if values.dtype.kind == "i":
        return values * scale if scale != 1 else values
    return np.rint(values * scale).astype(np.int64)


def _min_form(values: np.ndarray, scale: int, sign: int) -> np.ndarray:
    """Costs as the engines take them; whole costs of a min problem are used as loaded."""
    scaled = _scaled(values, scale)
    return scaled if sign > 0 else -scaled


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


def _check_matrix(matrix: np.ndarray, n_src: int, n_snk: int, settings: Settings,
                  errors: list[dict[str, str]]) -> None:
    rows, cols = matrix.shape
    _limit(rows * cols, settings.max_cells, "costs", "MAX_CELLS")
    if rows != n_src:
        errors.append({"pointer": "/costs",
                       "detail": f"has {rows} rows, expected {n_src} (one per source)"})
    elif cols != n_snk and rows > 0:
        errors.append({"pointer": "/costs/0",
                       "detail": f"has {cols} entries, expected {n_snk} (one per sink)"})


def _arc_ends(arcs: Any, settings: Settings,
              errors: list[dict[str, str]]) -> tuple[np.ndarray, np.ndarray]:
    """(tail, head) node indices as the schema resolved them (RecordList ``references``);
    -1 marks a name that is no declared id."""
    n = len(arcs)
    _limit(n, settings.max_arcs, "arcs", "MAX_ARCS")
    for key in ARC_ENDS:
        names, idx = arcs.columns[key], arcs.resolved[key]
        for i in np.flatnonzero(idx < 0)[:50].tolist():
            errors.append({"pointer": f"/arcs/{i}/{key}", "detail": f"unknown id {names[i]!r}"})
    tail, head = (arcs.resolved[key] for key in ARC_ENDS)
    loops = np.flatnonzero((tail == head) & (tail >= 0))
    for i in loops[:50].tolist():
        errors.append({"pointer": f"/arcs/{i}",
                       "detail": f"arc from {arcs.columns['from'][i]!r} to itself"})
    return tail, head


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


def extend(net: Network, hard_shortfall: int) -> Extended:
    """The virtual arcs around ``net`` with the hard pool capped at ``hard_shortfall``."""
    n = net.n_user
    S, T, P = n, n + 1, n + 2
    src = np.arange(net.n_sources, dtype=np.int64)
    snk = np.arange(net.n_sinks, dtype=np.int64)
    soft, hard = snk[net.soft], snk[~net.soft]
    off = net.sink_offset
    parts = [
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


def virtual_flows(net: Network, ext: Extended, flow: Flow) -> np.ndarray:
    """Flows on the virtual arcs implied by a user flow (unique by conservation)."""
    tail, head = net.endpoints(flow.arc)
    net_out = np.zeros(net.n_user, np.int64)
    np.add.at(net_out, tail, flow.amount)
    np.subtract.at(net_out, head, flow.amount)
    short = net.demand + net_out[net.sink_offset:]
    x = np.zeros(len(ext.tail), np.int64)
    b = ext.blocks
    x[b["supply"]] = net_out[: net.n_sources]
    x[b["demand"]] = net.demand
    x[b["soft"]] = short[ext.soft_sinks]
    x[b["hard"]] = short[ext.hard_sinks]
    x[b["pool"]] = short[ext.hard_sinks].sum()
    return x
