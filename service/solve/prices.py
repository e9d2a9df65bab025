"""Override prices: what forcing or forbidding each allowed pair costs, exactly.

For a pair ``a = (i, j)`` (a user arc: a matrix cell or a listed arc) of flow ``x_a`` in
the optimum, with potentials ``pi`` and the residual graph ``G`` of
:mod:`service.solve.residual` (reduced costs ``r >= 0``):

* ``force_delta``: 0 when ``x_a > 0``; otherwise the least extra cost of a plan with at
  least one unit on ``a``, which is ``r_a + d(j -> i)``, ``d`` the shortest distance in
  ``G``. Any such plan is the optimum plus a circulation in ``G`` whose cycles cost
  ``>= 0`` and one of which uses ``a``, so costs at least that much; pushing one unit
  around ``a`` and a shortest path back costs exactly that (AMO §9.3). None when ``a`` has
  no room or ``j`` cannot reach ``i``.
* ``forbid_delta``: 0 when ``x_a = 0``; otherwise ``x_a (-r_a)`` plus the least reduced
  cost of sending ``x_a`` units from ``i`` to ``j`` in ``G`` without ``a``. For one unit
  that is ``min over arcs b = (u -> j) of G, b != a, of d(i -> u) + r_b``: a path from
  ``i`` to ``j`` avoiding ``a`` ends with such an arc, and its part up to ``u`` is no
  shorter than ``d(i -> u)`` in the whole of ``G``. The bound is met by the shortest path
  to ``u`` when that path does not visit ``j`` (so cannot use ``a``, which enters ``j``);
  otherwise, and for more than one unit, :func:`service.solve.reroute.reroute` solves
  that pair alone.

Every distance needed is *to* a node (``d(j -> i)``, ``d(i -> u)``): one batched Dijkstra
(``scipy.sparse.csgraph.dijkstra`` over many sources) on the reversed residual graph from
each tail ``i`` of an unused pair and each tail ``u`` of an arc into the head of a pair
of one unit. Their distance labels and shortest-path trees are the certificate: the
checker validates each label vector (no residual arc can shorten it) and each tree (tight
arcs, no cycle), so the distances are exact; see README, "The certificate".
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.sparse.csgraph import dijkstra

from service.errors import OutOfRange, TooLarge
from service.network.model import Network
from service.solve.certificate import Certificate
from service.solve.paths import _ranges, order_by
from service.solve.reroute import Reroute, reroute
from service.solve.residual import EXACT, Residual, residual_graph, user_flow

__all__ = ["NONE", "Prices", "override_prices", "work_of"]

#: Stands for null (no such plan) in the int64 arrays; every real value is >= 0.
NONE = -1
#: Distance rows computed at once: bounds scipy's dense output to this many entries.
_BATCH_ENTRIES = 1 << 22


@dataclass(frozen=True)
class Prices:
    """Both prices of every pair (positions of ``net.arcs``), in scaled min-form units.

    ``roots``: nodes whose distance rows prove the prices; ``dist[k, v]`` the distance from
    ``v`` to ``roots[k]`` (NONE: unreachable); ``succ[k, v]`` the next node on a shortest
    path from ``v`` to it (-1 at the root and where unreachable). ``unit``: per pair of one
    unit priced from the rows, its path ``(tail, head, residual arc index)`` rows;
    ``reroutes``: the pairs solved alone.
    """

    residual: Residual
    flow: np.ndarray
    force: np.ndarray
    forbid: np.ndarray
    roots: np.ndarray
    dist: np.ndarray
    succ: np.ndarray
    unit: dict[int, np.ndarray]
    reroutes: dict[int, Reroute]


def work_of(n_roots: int, n_alone: int, res: Residual) -> int:
    """The work the prices take, as capped by MAX_PRICES_WORK: one Dijkstra per root and
    per pair solved alone, each over every node and residual arc."""
    return (n_roots + n_alone) * (res.n_nodes + len(res))


def override_prices(net: Network, flow_of_plan, cert: Certificate, max_work: int) -> Prices:
    """Both override prices of every allowed pair (see module docstring).

    Raises TooLarge naming ``/prices`` when the work would pass ``max_work``, and
    OutOfRange when a distance would leave exact float64 range.
    """
    res = residual_graph(net, flow_of_plan, cert)
    if len(res) and int(res.reduced.max()) >= EXACT:
        raise OutOfRange("override prices need reduced costs below 2**53; use smaller costs")
    arcs, pi, n = net.arcs, cert.potential, res.n_nodes
    x = user_flow(net, flow_of_plan)
    r_fwd = arcs.cost - pi[arcs.tail] + pi[arcs.head]
    room = ~arcs.bounded | (x < arcs.capacity)
    forcing = np.flatnonzero((x == 0) & room)
    used = np.flatnonzero(x > 0)
    unit, multi = used[x[used] == 1], used[x[used] > 1]
    # the arcs into the heads of one-unit pairs are read once per pair
    _within(int(np.bincount(res.head, minlength=n)[arcs.head[unit]].sum()), max_work)
    cand_pair, cand_arc = _into_heads(res, arcs.id[unit], arcs.head[unit])
    cand_tail = res.tail[cand_arc]
    reachable = np.bincount(res.head, minlength=n) > 0
    needs = reachable[cand_tail] & (cand_tail != arcs.tail[unit][cand_pair])
    roots = np.unique(np.concatenate([arcs.tail[forcing], cand_tail[needs]]))
    _within(work_of(len(roots), len(multi), res), max_work)
    dist, succ = _to_roots(res, roots)
    row = np.full(n, -1, np.int64)
    row[roots] = np.arange(len(roots))

    force = np.full(len(arcs), NONE, np.int64)
    forbid = np.full(len(arcs), NONE, np.int64)
    force[used] = 0
    forbid[x == 0] = 0
    d = dist[row[arcs.tail[forcing]], arcs.head[forcing]] if len(roots) else \
        np.full(len(forcing), NONE, np.int64)
    force[forcing] = np.where(d != NONE, r_fwd[forcing] + d, NONE)

    paths, alone = _unit_paths(res, dist, succ, row, unit, arcs.tail[unit],
                               arcs.head[unit], cand_pair, cand_arc)
    for p, (extra, _) in paths.items():
        forbid[p] = NONE if extra is None else -r_fwd[p] + extra
    _within(work_of(len(roots), len(multi) + len(alone), res), max_work)
    budget = [max_work - work_of(len(roots), 0, res), max_work]
    reroutes = {}
    for p in np.concatenate([multi, alone]).tolist():
        k = int(x[p])
        found = reroute(res, int(arcs.id[p]), int(arcs.tail[p]), int(arcs.head[p]), k,
                        budget)
        reroutes[p] = found
        forbid[p] = NONE if found.extra is None else k * -int(r_fwd[p]) + found.extra
    unit_steps = {p: s for p, (_, s) in paths.items()}
    return Prices(res, x, force, forbid, roots, dist, succ, unit_steps, reroutes)


def _within(work: int, max_work: int) -> None:
    if work > max_work:
        raise TooLarge(f"/prices: pricing every pair takes {work:,} units of work "
                       f"(Dijkstra runs x (nodes + residual arcs)), more than the limit of "
                       f"{max_work:,} (setting MAX_PRICES_WORK); ask for prices on a "
                       "smaller problem", limit=max_work, pointer="/prices")


def _into_heads(res: Residual, arc_id: np.ndarray, head: np.ndarray
                ) -> tuple[np.ndarray, np.ndarray]:
    """(pair position in the given arrays, residual arc) for every residual arc into each
    pair's head except the pair's own forward arc."""
    n = res.n_nodes
    by_head = order_by(res.head, n)
    starts = np.searchsorted(res.head[by_head], np.arange(n + 1))
    counts = starts[head + 1] - starts[head]
    pair = np.repeat(np.arange(len(head)), counts)
    arc = by_head[_ranges(starts[head], starts[head + 1])]
    own = (res.arc[arc] == arc_id[pair]) & res.forward[arc]
    return pair[~own], arc[~own]


def _to_roots(res: Residual, roots: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Distances to each root and the next node on a shortest path, by batches of roots."""
    n = res.n_nodes
    dist = np.empty((len(roots), n), np.int64)
    succ = np.empty((len(roots), n), np.int64)
    if not len(roots):
        return dist, succ
    graph = res.graph(reverse=True).csr
    step = max(1, _BATCH_ENTRIES // n)
    for start in range(0, len(roots), step):
        chunk = roots[start:start + step]
        d, p = dijkstra(graph, directed=True, indices=chunk, return_predecessors=True)
        finite = np.isfinite(d)
        if finite.any() and float(d[finite].max()) >= EXACT:
            raise OutOfRange("an override price needs distances beyond 2**53; use smaller "
                             "costs")
        dist[start:start + len(chunk)] = np.where(finite, np.rint(np.where(finite, d, 0)),
                                                  NONE).astype(np.int64)
        succ[start:start + len(chunk)] = np.where(p >= 0, p, -1)
    return dist, succ


def _unit_paths(res: Residual, dist: np.ndarray, succ: np.ndarray, row: np.ndarray,
                unit: np.ndarray, tail: np.ndarray, head: np.ndarray, cand_pair: np.ndarray,
                cand_arc: np.ndarray) -> tuple[dict[int, tuple[int | None, np.ndarray]],
                                               np.ndarray]:
    """For each pair of one unit: (least reduced cost around it or None, its path rows),
    and the pairs whose bound the rows' paths do not meet (they visit the head)."""
    u = res.tail[cand_arc]
    i = tail[cand_pair]
    r_u = row[u]
    d = np.where(u == i, 0, dist[np.maximum(r_u, 0), i] if len(dist) else NONE)
    d = np.where((u == i) | (r_u >= 0), d, NONE)
    value = np.where(d != NONE, d + res.reduced[cand_arc], np.iinfo(np.int64).max)
    order = np.lexsort((value, cand_pair))
    first = order[np.concatenate(([True], cand_pair[order][1:] != cand_pair[order][:-1]))] \
        if len(order) else order
    best = np.full(len(unit), -1, np.int64)
    best[cand_pair[first]] = first
    out: dict[int, tuple[int | None, np.ndarray]] = {}
    finite = (best >= 0)
    finite[finite] = value[best[finite]] != np.iinfo(np.int64).max
    for q in np.flatnonzero(~finite).tolist():
        out[int(unit[q])] = (None, np.zeros((0, 3), np.int64))
    found = np.flatnonzero(finite)
    b = best[found]
    start, goal, rows = i[b], u[b], r_u[b]
    # walk every path at once, one step per round, toward its root u
    graph = res.graph()
    steps: list[np.ndarray] = []
    cur, visits_head = start.copy(), np.zeros(len(found), dtype=np.bool_)
    live = cur != goal
    while live.any():
        at = np.flatnonzero(live)
        nxt = succ[rows[at], cur[at]]
        e = graph.best[graph.entry(cur[at], nxt)]
        steps.append(np.stack([at, cur[at], nxt, e], axis=1))
        visits_head[at] = visits_head[at] | (nxt == head[found][at])
        cur[at] = nxt
        live = cur != goal
    last = cand_arc[b]
    steps.append(np.stack([np.arange(len(found)), res.tail[last], res.head[last], last],
                          axis=1))
    every = np.concatenate(steps) if steps else np.zeros((0, 4), np.int64)
    every = every[np.argsort(every[:, 0], kind="stable")]
    bounds = np.searchsorted(every[:, 0], np.arange(len(found) + 1))
    alone = []
    for k, p in enumerate(unit[found].tolist()):
        if visits_head[k]:
            alone.append(p)
        else:
            out[p] = (int(value[b[k]]), every[bounds[k]:bounds[k + 1], 1:])
    return out, np.array(alone, np.int64)
