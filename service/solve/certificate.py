"""The optimality certificate: potentials for the residual graph, and the dual objective.

Potentials prove a flow optimal when every arc of its residual graph has a non-negative
reduced cost ``c - pi(i) + pi(j)``, which is complementary slackness, and then the dual
objective equals the flow's cost (Ahuja, Magnanti & Orlin, *Network Flows*, 1993,
§9.3-9.4). They are found, in this order:

1. from the engine's duals, or, for a min-cost-flow engine's flow, from the forest of its
   free arcs, made exact by :func:`service.solve.potentials.exact_potentials` within
   :data:`REPAIR_ROUNDS` Dijkstra rounds (one linear pass when the duals are exact);
2. otherwise from scratch: minus the shortest distances in the residual graph from a
   virtual root joined to every node (:func:`service.solve.paths.bellman_ford`), which
   exist exactly when the flow is optimal.

Every step is numpy or one compiled call of O(m log m) at most, so the request's time
limit, which acts between them, bounds the whole.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from service.errors import CertificateFailure, OutOfRange
from service.network.model import Network
from service.solve.dispatch import Solution
from service.solve.extended import Extended, extend, user_bounds, virtual_flows
from service.solve.paths import DenseBlock, bellman_ford
from service.solve.potentials import exact_potentials, forest_candidate

__all__ = ["Certificate", "certify", "exact_dot"]

_INT64_SAFE = 2.0**62

#: Dijkstra rounds allowed to repair a candidate before computing potentials from
#: scratch. Measured (README "Performance"): engine duals need 0; the free-arc forest of
#: OR-Tools' flows 1-6 on chains, layered and transshipment networks, 18 on grids of 100^2
#: to 300^2. Each round is O(m + n log n), so a candidate that fails costs 32 of them.
REPAIR_ROUNDS = 32
#: Rows of a dense block checked at once: bounds the temporary to this x columns.
_BLOCK_ROWS = 256


def exact_dot(a: np.ndarray, b: np.ndarray) -> int:
    """Exact integer sum of products; OutOfRange when it could leave 64-bit range."""
    if len(a) == 0:
        return 0
    # max|a| x max|b| x n first: two reductions, no copies, enough in the common case;
    # the tight bound sum |a_i b_i| (two float copies) only when that one is too coarse
    coarse = max(-int(a.min()), int(a.max())) * max(-int(b.min()), int(b.max())) * len(a)
    if coarse >= _INT64_SAFE and float(
            np.abs(a).astype(np.float64) @ np.abs(b).astype(np.float64)) >= _INT64_SAFE:
        raise OutOfRange("a sum of cost x flow products could exceed 2**62; "
                         "use smaller costs or capacities")
    return int(np.asarray(a, np.int64) @ np.asarray(b, np.int64))


@dataclass(frozen=True)
class Certificate:
    """Everything the answer needs, in exact scaled integers of the min form."""

    ext: Extended
    virtual_flow: np.ndarray  # per virtual arc of ``ext``
    potential: np.ndarray     # per node of the extended network
    primal: int               # min-form cost of the flow
    dual: int                 # dual objective of the potentials
    method: str = ""          # how the potentials were found (for the benchmark and logs)


def certify(net: Network, solution: Solution) -> Certificate:
    """Potentials proving ``solution`` optimal in the extended network.

    Parameters
    ----------
    net : the network.
    solution : flows on the user arcs and the stage-1 shortfall.

    Returns
    -------
    The certificate; raises CertificateFailure when the flow is not optimal (a negative
    cycle in the residual graph) or when the dual objective differs from the cost.

    Notes
    -----
    The residual graph has, for each arc with flow below capacity, a forward arc of cost
    ``c``, and for each arc with positive flow a backward arc of cost ``-c``. Matrix cells
    are unbounded, so all of them are forward arcs: they stay a dense block.
    Dual objective of min-cost flow with capacities (AMO §9.4):
    ``sum_i b(i) pi(i) - sum_a u_a max(0, -c^pi_a)`` with ``b(S) = D``, ``b(T) = -D``;
    unbounded arcs contribute nothing (their reduced costs are non-negative).
    """
    flow = solution.flow
    ext = extend(net, solution.shortfall.amount)
    xv = virtual_flows(net, ext, flow)
    used_tail, used_head = net.endpoints(flow.arc)
    used_cost = net.arc_cost(flow.arc)
    # the plain part of each used arc: its flow less what its keep arc carries
    plain = _plain_flow(net, ext, xv, flow.arc, flow.amount)
    room, above = xv < ext.capacity, xv > ext.lower
    parts = [(ext.tail[room], ext.head[room], ext.cost[room]),
             (ext.head[above], ext.tail[above], -ext.cost[above])]
    block = None
    if net.replans:
        arcs = net.arcs
        x = np.zeros(len(arcs), np.int64)
        x[np.searchsorted(arcs.id, flow.arc)] = plain
        lower, upper, bounded = user_bounds(net, arcs.id)
        fwd, back = ~bounded | (x < upper), x > lower
        parts.append((arcs.tail[fwd], arcs.head[fwd], arcs.cost[fwd]))
        parts.append((arcs.head[back], arcs.tail[back], -arcs.cost[back]))
    elif net.dense is not None:
        parts.append((used_head, used_tail, -used_cost))
        block = DenseBlock(0, net.sink_offset, net.dense)
    else:
        parts.append((used_head, used_tail, -used_cost))
        arcs = net.arcs
        x = np.zeros(len(arcs), np.int64)
        x[flow.arc] = flow.amount           # arc ids of a list are positions
        room = ~arcs.bounded | (x < arcs.capacity)
        parts.append((arcs.tail[room], arcs.head[room], arcs.cost[room]))
    tail, head, cost = (np.concatenate([p[k] for p in parts]) for k in range(3))
    found = _from_candidate(net, ext, solution, xv, (tail, head, cost), block)
    if found is not None:
        pi, method = found
    else:
        method = "bellman-ford"
        paths = bellman_ford(ext.n_nodes, tail, head, cost, dense=block, smallest_first=True)
        if not paths.converged:
            raise CertificateFailure("the residual graph has a negative cycle: the engine's "
                                     "flow is not optimal")
        pi = -paths.dist
    primal = (exact_dot(used_cost, plain) + exact_dot(ext.cost, xv)) + ext.keep_constant
    reduced = ext.cost - pi[ext.tail] + pi[ext.head]
    penalty = (exact_dot(ext.capacity, np.maximum(0, -reduced))
               - exact_dot(ext.lower, np.maximum(0, reduced)))
    if net.replans:
        arcs = net.arcs
        lower, upper, bounded = user_bounds(net, arcs.id)
        reduced = arcs.cost[bounded] - pi[arcs.tail[bounded]] + pi[arcs.head[bounded]]
        penalty += (exact_dot(upper[bounded], np.maximum(0, -reduced))
                    - exact_dot(lower[bounded], np.maximum(0, reduced)))
    elif net.arc_list is not None:
        arcs = net.arc_list
        b = arcs.bounded
        reduced = arcs.cost[b] - pi[arcs.tail[b]] + pi[arcs.head[b]]
        penalty += exact_dot(arcs.capacity[b], np.maximum(0, -reduced))
    dual = net.total_demand * int(pi[ext.S] - pi[ext.T]) - penalty + ext.keep_constant
    if dual != primal:
        raise CertificateFailure(f"dual objective {dual} differs from the cost {primal}")
    return Certificate(ext=ext, virtual_flow=xv, potential=pi, primal=primal, dual=dual,
                       method=method)


def _plain_flow(net: Network, ext: Extended, xv: np.ndarray, arc: np.ndarray,
                amount: np.ndarray) -> np.ndarray:
    """Flow of the plain part of used arcs ``arc``: ``amount`` less their keep arcs'."""
    if net.keep is None or not len(ext.keep_arc):
        return amount
    kept = np.zeros(len(arc), np.int64)
    at = np.minimum(np.searchsorted(arc, ext.keep_arc), max(len(arc) - 1, 0))
    if len(arc):
        hit = arc[at] == ext.keep_arc
        kept[at[hit]] = xv[ext.blocks["keep"]][hit]
    return amount - kept


def _from_candidate(net: Network, ext: Extended, solution: Solution, xv: np.ndarray,
                    residual: tuple[np.ndarray, np.ndarray, np.ndarray],
                    block: DenseBlock | None) -> tuple[np.ndarray, str] | None:
    """Exact potentials from the engine's duals or the free-arc forest, and which; None
    when there is no candidate or it could not be repaired within the rounds allowed."""
    candidate, source = solution.duals, "duals"
    if candidate is None and solution.free_arcs and block is None:
        candidate, source = _forest(net, ext, solution, xv), "free-arc forest"
    if candidate is None:
        return None
    found = exact_potentials(ext.n_nodes, *residual, candidate, max_rounds=REPAIR_ROUNDS)
    if not found.ok or (block is not None and not _block_holds(block, found.pi)):
        return None
    return found.pi, f"{source} + {found.rounds} rounds"


def _forest(net: Network, ext: Extended, solution: Solution, xv: np.ndarray) -> np.ndarray:
    """The free-arc forest candidate over user and virtual arcs (arc lists only)."""
    arcs = net.arcs
    flow = solution.flow
    x = np.zeros(len(arcs), np.int64)
    x[np.searchsorted(arcs.id, flow.arc)] = _plain_flow(net, ext, xv, flow.arc, flow.amount)
    if net.replans:
        lower, upper, bounded = user_bounds(net, arcs.id)
        user_free = (x > lower) & (~bounded | (x < upper))
    else:
        user_free = (x > 0) & (~arcs.bounded | (x < arcs.capacity))
    return forest_candidate(ext.n_nodes, np.concatenate([arcs.tail, ext.tail]),
                            np.concatenate([arcs.head, ext.head]),
                            np.concatenate([arcs.cost, ext.cost]),
                            np.concatenate([user_free, (xv > ext.lower) & (xv < ext.capacity)]))


def _block_holds(block: DenseBlock, pi: np.ndarray) -> bool:
    """Every cell of the block has a non-negative reduced cost under ``pi`` (exact int64).

    Cells cost at most FORBIDDEN = 2**62 and ``|pi| < 2**54``, so no sum leaves int64; a
    forbidden cell's reduced cost is then always positive, as a missing arc needs.
    """
    n_rows, n_cols = block.cost.shape
    cols = pi[block.col_start:block.col_start + n_cols]
    for start in range(0, n_rows, _BLOCK_ROWS):
        stop = min(n_rows, start + _BLOCK_ROWS)
        rows = pi[block.row_start + start:block.row_start + stop]
        if ((block.cost[start:stop] - rows[:, None]) + cols[None, :] < 0).any():
            return False
    return True
