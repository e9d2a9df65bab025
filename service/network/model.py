"""The normalised network every request becomes: exact integer arrays, one node numbering.

A loaded problem (sources, sinks, nodes, costs or arcs) becomes one :class:`Network`: user
nodes indexed sources first, then transshipment nodes, then sinks (each in request order).
A cost matrix stays a matrix (``dense``); an arc list becomes parallel arrays (``arcs``).
Numbers become exact integers: quantities are whole numbers, and costs and penalties are
multiplied by ``cost_scale`` (1 when they are all whole, else 10**COST_DECIMALS, rounded).
Every cost inside the service is in the *min form*: the caller's cost for ``min``, negated
for ``max``.

Arcs are named by an *arc id*: the position in the request's ``arcs``, or the cell index
``row * n_sinks + column`` of a matrix. A flow is a sparse list of arc ids and amounts.

This is the problem only; the solving rooms extend it (super-source, super-sink, pools) and
the independent checker reads it. :mod:`service.network.build` makes it from a request.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property
from typing import Any

import numpy as np

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
class Pins:
    """``fixed``: arcs whose flow is exactly ``flow`` (lower = upper bound), by arc id
    ascending; ``entry`` is each pin's position in the request's ``fixed``."""

    arc: np.ndarray
    flow: np.ndarray
    entry: np.ndarray


@dataclass(frozen=True)
class Keep:
    """``previous``: units of the previous plan on arcs that still exist (arc ids
    ascending), all previous units (those on vanished pairs too), and the scaled penalty
    of each unit not kept on its arc."""

    arc: np.ndarray
    amount: np.ndarray
    total: int
    penalty: int


@dataclass(frozen=True)
class Load:
    """``load_costs`` as tiers of the supply arcs: tier ``k`` lets ``source[k]`` send
    ``capacity[k]`` more units at ``cost[k]`` each (scaled; a cost under max too). A
    source's tiers are consecutive, in order: the first is its supply arc, the others
    follow; sources without load costs have one tier of cost 0 and their supply."""

    source: np.ndarray
    cost: np.ndarray
    capacity: np.ndarray


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
    #: ``"objective": "bottleneck"`` (costs as given, like ``min``)
    bottleneck: bool = False
    #: the ``data`` objects of the request by id, in numbering order; never read by a solver
    data: dict[str, Any] = field(default_factory=dict)
    pins: Pins | None = None
    keep: Keep | None = None
    load: Load | None = None

    @property
    def replans(self) -> bool:
        """Pins, a previous plan or load costs: the extended network has bounds and
        parallel arcs (README, "The certificate")."""
        return self.pins is not None or self.keep is not None or self.load is not None

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
        # pinned flow may go round a cycle it closes
        pinned = 0 if self.pins is None else int(self.pins.flow.sum())
        return self.total_demand + finite + pinned + 1

    def arc_exists(self, arc: np.ndarray) -> np.ndarray:
        """Mask of the ids that name a user arc."""
        if self.dense is not None:
            inside = (arc >= 0) & (arc < self.dense.size)
            if not self.dense.size:
                return inside                 # all False: an empty matrix has no cell
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
