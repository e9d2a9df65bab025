"""Why each unmet sink waits: ``no-eligible-source``, ``capacity`` or ``penalty``.

The rule (README, "Why a sink waits"), for a sink ``t`` left short:

1. ``no-eligible-source``: no path of the request's network leads to ``t`` from a source
   with supply, over arcs that can carry flow (unbounded, or a capacity above 0);
2. ``capacity``: otherwise, when no source with spare supply reaches ``t`` in the residual
   graph of the allocation (an arc forward while its flow is below its capacity, backward
   while it carries flow): whoever could serve ``t``, directly or by handing work on along
   a chain of reassignments, is full. For a hard sink this always holds (else the hard
   shortfall would not be least), and the sink lies on the sink side of the cut;
3. ``penalty``: otherwise (a soft sink only): serving it is possible and costs at least
   ``reduced_cost = pi(super-source) - pi(t) - penalty(t) >= 0`` more than its penalty, the
   reduced cost of the reverse of its waiting arc (any cycle through that arc in the
   residual graph costs at least that much, since every other residual arc has a reduced
   cost >= 0).

A pinned arc counts as able to carry flow when its pin is above 0, and has no residual arc
(it sits at both of its bounds). Keep arcs and load tiers do not change what is reached:
parallel parts of an arc have room exactly when the arc has, and tiers of a supply arc
exactly when the source has spare supply.

Two breadth-first searches in all, each linear in the arcs (a matrix is read a block of
rows at a time, each row once).
"""

from __future__ import annotations

import numpy as np
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import breadth_first_order

from service.network.model import FORBIDDEN, Flow, Network

__all__ = ["NO_SOURCE", "CAPACITY", "PENALTY", "waiting_reasons"]

NO_SOURCE, CAPACITY, PENALTY = "no-eligible-source", "capacity", "penalty"
_ROWS = 256


def waiting_reasons(net: Network, flow: Flow, short: np.ndarray, spare: np.ndarray,
                    pi: np.ndarray, *, within: Network | None = None
                    ) -> tuple[list[str], np.ndarray]:
    """(reason per short sink, min-form reduced cost per short sink) in sink order of
    ``np.flatnonzero(short)``; the reduced cost means something for ``penalty`` only.

    ``short`` is the unmet demand per sink, ``spare`` the unused supply per source, ``pi``
    the certificate's potentials (user nodes, then super-source, super-sink, pool);
    ``within`` the network whose residual graph counts, when not ``net`` (a bottleneck's
    pairs at or below the threshold).
    """
    waiting = np.flatnonzero(short)
    if not len(waiting):
        return [], np.zeros(0, np.int64)
    off = net.sink_offset
    eligible = _reached(net, net.supply > 0, None)[off + waiting]
    servable = _reached(within or net, spare > 0, flow)[off + waiting]
    reasons = [NO_SOURCE if not e else CAPACITY if not s else PENALTY
               for e, s in zip(eligible.tolist(), servable.tolist(), strict=True)]
    reduced = pi[net.n_user] - pi[off + waiting] - net.penalty[waiting]
    return reasons, reduced


def _reached(net: Network, seeds: np.ndarray, flow: Flow | None) -> np.ndarray:
    """Mask of user nodes reachable from the sources in ``seeds``: over every arc that can
    carry flow when ``flow`` is None, else over the residual graph of ``flow``."""
    if net.dense is not None and net.pins is None:
        return _reached_dense(net, seeds, flow)
    arcs = net.arcs
    n = net.n_user
    # a pinned arc carries its pin and nothing else: no residual arc either way
    pinned = np.zeros(len(arcs), bool)
    if net.pins is not None:
        pinned[np.searchsorted(arcs.id, net.pins.arc)] = True
    if flow is None:
        keep = ~arcs.bounded | (arcs.capacity > 0)
        if net.pins is not None:
            keep[pinned] = net.pins.flow > 0
        tail, head = arcs.tail[keep], arcs.head[keep]
    else:
        x = np.zeros(len(arcs), np.int64)
        x[np.searchsorted(arcs.id, flow.arc)] = flow.amount
        room = (~arcs.bounded | (x < arcs.capacity)) & ~pinned
        used = (x > 0) & ~pinned
        tail = np.concatenate([arcs.tail[room], arcs.head[used]])
        head = np.concatenate([arcs.head[room], arcs.tail[used]])
    roots = np.flatnonzero(seeds)
    tail = np.concatenate([tail, np.full(len(roots), n)])
    head = np.concatenate([head, roots])
    graph = csr_matrix((np.ones(len(tail), np.int8), (tail, head)), shape=(n + 1, n + 1))
    order = breadth_first_order(graph, n, directed=True, return_predecessors=False)
    mask = np.zeros(n + 1, bool)
    mask[order] = True
    return mask[:n]


def _reached_dense(net: Network, seeds: np.ndarray, flow: Flow | None) -> np.ndarray:
    """:func:`_reached` for a cost matrix: every allowed cell is unbounded, so forward
    arcs are the allowed cells, and backward ones the used cells (sink -> its sources)."""
    assert net.dense is not None
    n_src, n_snk = net.n_sources, net.n_sinks
    src = seeds.copy()
    snk = np.zeros(n_snk, bool)
    if flow is not None:
        rows, cols = np.divmod(flow.arc, n_snk)
    frontier = np.flatnonzero(src)
    while len(frontier):
        new = np.zeros(n_snk, bool)
        for start in range(0, len(frontier), _ROWS):
            block = net.dense[frontier[start:start + _ROWS]]
            new |= (block != FORBIDDEN).any(axis=0)
        new &= ~snk
        snk |= new
        if flow is None:
            break                      # sources are only ever left, never entered
        back = np.zeros(n_src, bool)
        back[rows[new[cols]]] = True
        frontier = np.flatnonzero(back & ~src)
        src |= back
    return np.concatenate([src, snk])
