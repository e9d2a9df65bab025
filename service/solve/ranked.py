"""The k best plans after the optimum, by partitioning the plans into cells (certified k-best).

A *plan* is an integer flow of the stage-2 network (every plan serves the hard demand the
optimum serves); plans are ranked by total cost. A *cell* is a set of plans given by bounds
``lo <= x_a <= hi`` on user arcs. Starting from the cell of all plans and its optimum,
each step takes the best plan found so far and splits its cell minus that plan into
children along an ordered list of *branch* arcs ``a_0, a_1, ...``: child ``(i, below)``
keeps ``x_{a_t}`` at the plan's flow for ``t < i`` and asks ``x_{a_i} <= flow - 1``; child
``(i, above)`` asks ``x_{a_i} >= flow + 1`` instead. The branch list is chosen so that the
plan is the only one left when every branch arc keeps its flow (checked on the residual
graph, see :func:`_leftover_cycles`). The children are disjoint and, with the plan, cover
the cell (Murty 1968, generalised from assignments to integer flows).

Each child costs one shortest path, not a solve (Miller, Stone & Cox 1997; Pedersen,
Nielsen & Andersen 2008): the best plan of child ``(i, below)`` is the parent's plan plus
one unit around the cheapest residual cycle through the reverse of ``a_i`` that avoids the
arcs ``a_0..a_i`` (convexity of min-cost flow in one arc's flow; Ahuja, Magnanti & Orlin,
*Network Flows*, 1993, §9.3 and the conformal decomposition of §3.5). With the parent's
potentials every residual arc costs ``c^pi >= 0``, so that cycle is ``|c^pi_a|`` plus one
Dijkstra distance, and ``pi - min(d, D)`` proves the child's optimum (or, cut at a limit
``L``, a lower bound of ``cost + |c^pi_a| + L``): the certificate of every cell.

The residual graph here is that of a plan *in its cell* (lower bounds as well as upper
ones, the plan's own potentials), one CSR entry per arc and direction so that a child can
take single arcs out by setting their entries to infinity; :mod:`service.solve.residual`
is the optimum's graph with parallel arcs merged, which the override prices search.
"""

from __future__ import annotations

import bisect
import heapq
from dataclasses import dataclass, field

import numpy as np
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import connected_components, dijkstra

from service.errors import CertificateFailure, OutOfRange
from service.network.model import Flow, Network
from service.solve import residual
from service.solve.certificate import Certificate

__all__ = ["INF", "Frontier", "Plan", "Ranked", "rank"]

#: Upper bound of an unbounded arc (a matrix cell, an arc without capacity).
INF = 2**62
#: Float64 distances are exact integers below this.
_EXACT = 2.0**53


@dataclass
class Plan:
    """One plan in its cell: flows on every extended arc (user arcs first), potentials,
    min-form cost, the cell's bounds, where the cell comes from, and its branch list."""

    x: np.ndarray
    pi: np.ndarray
    cost: int
    lo: np.ndarray
    hi: np.ndarray
    parent: tuple[int, int, str] | None
    branch: np.ndarray | None = None
    residual: _Residual | None = None


@dataclass(frozen=True)
class Frontier:
    """A cell left unexpanded: child ``(branch, side)`` of plan ``plan``, with its proof.

    ``kind`` is "bound" (potentials ``pi_plan - min(d, shift)``: ``nodes`` with their
    distances ``dist``, every other node ``shift``) or "empty" (``nodes`` is a set whose
    balance the cell's bounds cannot carry: Hoffman's condition).
    """

    plan: int
    branch: int
    side: str
    kind: str
    bound: int
    shift: int
    nodes: np.ndarray
    dist: np.ndarray


@dataclass
class Ranked:
    """The optimum (plan 0), the alternatives, the frontier, and the extended arc table."""

    plans: list[Plan]
    frontier: list[Frontier]
    n_user_arcs: int
    tail: np.ndarray
    head: np.ndarray
    cost: np.ndarray
    cap: np.ndarray


@dataclass
class _Residual:
    """The residual graph of a plan in its cell as CSR, each entry's arc and direction."""

    graph: csr_matrix
    base: np.ndarray          # the CSR weights before any arc is taken out
    arc: np.ndarray           # per CSR entry: extended arc
    forward: np.ndarray       # per CSR entry: True for the arc itself, False for its reverse
    reduced: np.ndarray       # per extended arc: c^pi
    slots: dict[int, np.ndarray] = field(default_factory=dict)


def rank(net: Network, cert: Certificate, user_flow: Flow, k: int) -> Ranked:
    """The ``k`` best plans after the optimum (fewer when fewer exist), with the partition.

    Raises OutOfRange when reduced costs are too large for exact float64 shortest paths.
    """
    arcs = net.arcs
    ext = cert.ext
    m = len(arcs)
    tail = np.concatenate([arcs.tail, ext.tail])
    head = np.concatenate([arcs.head, ext.head])
    cost = np.concatenate([arcs.cost, ext.cost])
    cap = np.concatenate([_natural_caps(net), ext.capacity])
    x = np.concatenate([residual.user_flow(net, user_flow), cert.virtual_flow])
    out = Ranked([], [], m, tail, head, cost, cap)
    root = Plan(x, cert.potential.astype(np.int64), cert.primal,
                np.zeros(len(tail), np.int64), cap.copy(), None)
    _Search(net, out, k).run(root)
    return out


def _natural_caps(net: Network) -> np.ndarray:
    """The most any plan can put on each user arc: its capacity, and no more than its
    source's supply when nothing enters that source, nor its sink's demand when nothing
    leaves that sink (INF when none of these binds)."""
    arcs = net.arcs
    top = np.where(arcs.bounded, arcs.capacity, INF)
    entered = np.zeros(net.n_user, bool)
    entered[arcs.head] = True
    left = np.zeros(net.n_user, bool)
    left[arcs.tail] = True
    supply = np.full(net.n_user, INF, np.int64)
    supply[: net.n_sources] = np.where(entered[: net.n_sources], INF, net.supply)
    demand = np.full(net.n_user, INF, np.int64)
    demand[net.sink_offset:] = np.where(left[net.sink_offset:], INF, net.demand)
    return np.minimum(top, np.minimum(supply[arcs.tail], demand[arcs.head]))


class _Search:
    """Best-first search over cells; ``best`` holds the k smallest candidate values."""

    def __init__(self, net: Network, out: Ranked, k: int) -> None:
        self.net, self.out, self.k = net, out, k
        self.n_nodes = net.n_user + 3
        self.queue: list[tuple[int, int, int, int, str, int, np.ndarray, np.ndarray]] = []
        self.best: list[int] = []
        self.seq = 0

    def threshold(self) -> float:
        return float(self.best[self.k - 1]) if len(self.best) >= self.k else float("inf")

    def run(self, root: Plan) -> None:
        plans = self.out.plans
        plans.append(root)
        self.expand(0)
        while len(plans) - 1 < self.k and self.queue:
            value, _, q, i, side, *_ = heapq.heappop(self.queue)
            plans.append(self.child_plan(q, i, side, value))
            if len(plans) - 1 < self.k:
                self.expand(len(plans) - 1)
        for value, _, q, i, side, shift, nodes, dist in self.queue:
            self.out.frontier.append(Frontier(q, i, side, "bound", value, shift, nodes, dist))

    # -- expanding a plan: its branch list and every child's value or bound -----------------

    def expand(self, j: int) -> None:
        plan = self.out.plans[j]
        plan.branch = self.branch_list(plan)
        res = plan.residual = self.residual(plan)
        for i, a in enumerate(plan.branch.tolist()):
            self.mask(res, a)
            if plan.x[a] - 1 >= plan.lo[a]:
                self.child(j, i, a, "below", res)
            if plan.x[a] + 1 <= plan.hi[a]:
                self.child(j, i, a, "above", res)

    def child(self, j: int, i: int, a: int, side: str, res: _Residual) -> None:
        plan, o = self.out.plans[j], self.out
        u, v = int(o.tail[a]), int(o.head[a])
        source, target = (u, v) if side == "below" else (v, u)
        gain = int(-res.reduced[a] if side == "below" else res.reduced[a])
        limit = self.threshold() - plan.cost - gain
        if limit < 0:
            # the parent's own potentials already bound the cell beyond the threshold
            o.frontier.append(Frontier(j, i, side, "bound", plan.cost + gain, 0,
                                       np.zeros(0, np.int64), np.zeros(0, np.int64)))
            return
        dist = _near(res.graph, source, target, limit)
        reach = dist[target]
        if np.isfinite(reach):
            value, shift = plan.cost + gain + int(reach), int(reach)
            nodes = np.flatnonzero(dist < reach)
            self.seq += 1
            heapq.heappush(self.queue, (value, self.seq, j, i, side, shift, nodes,
                                        dist[nodes].astype(np.int64)))
            bisect.insort(self.best, value)
            del self.best[self.k:]
        elif np.isfinite(limit):
            shift = int(limit)
            nodes = np.flatnonzero(dist < limit)
            o.frontier.append(Frontier(j, i, side, "bound", plan.cost + gain + shift, shift,
                                       nodes, dist[nodes].astype(np.int64)))
        else:
            o.frontier.append(Frontier(j, i, side, "empty", 0, 0,
                                       np.flatnonzero(np.isfinite(dist)),
                                       np.zeros(0, np.int64)))

    # -- the best plan of a child cell ------------------------------------------------------

    def child_plan(self, q: int, i: int, side: str, value: int) -> Plan:
        """Plan ``q`` plus one unit around the cheapest cycle of child ``(i, side)``."""
        parent, o = self.out.plans[q], self.out
        assert parent.branch is not None
        res = parent.residual
        assert res is not None
        res.graph.data[:] = res.base
        prefix = parent.branch[: i + 1].tolist()
        for a in prefix:
            self.mask(res, a)
        a = prefix[-1]
        u, v = int(o.tail[a]), int(o.head[a])
        source, target = (u, v) if side == "below" else (v, u)
        dist, pred = dijkstra(res.graph, indices=source, return_predecessors=True)
        reach = dist[target]
        x = parent.x.copy()
        x[a] += -1 if side == "below" else 1
        node = target
        while node != source:
            p = int(pred[node])
            x = self.step(res, p, node, dist, x)
            node = p
        lo, hi = parent.lo.copy(), parent.hi.copy()
        fixed = np.asarray(prefix[:-1], np.int64)
        lo[fixed] = hi[fixed] = parent.x[fixed]
        if side == "below":
            hi[a] = parent.x[a] - 1
        else:
            lo[a] = parent.x[a] + 1
        pi = parent.pi - np.minimum(np.where(np.isfinite(dist), dist, reach), reach
                                    ).astype(np.int64)
        plan = Plan(x, pi, value, lo, hi, (q, i, side))
        self.prove(plan)
        return plan

    def step(self, res: _Residual, p: int, node: int, dist: np.ndarray,
             x: np.ndarray) -> np.ndarray:
        """Push one unit over the cheapest residual entry p -> node on the shortest path."""
        g = res.graph
        lo_, hi_ = g.indptr[p], g.indptr[p + 1]
        entries = np.flatnonzero(g.indices[lo_:hi_] == node) + lo_
        weights = g.data[entries]
        e = int(entries[np.argmin(weights)])
        if dist[p] + g.data[e] != dist[node]:
            raise CertificateFailure("shortest path of an alternative does not close")
        x[res.arc[e]] += 1 if res.forward[e] else -1
        return x

    def prove(self, plan: Plan) -> None:
        """The plan's potentials must be dual feasible in its cell with a dual objective
        equal to its cost; anything else is a bug, refused before the answer is built."""
        o, pi = self.out, plan.pi
        reduced = o.cost - pi[o.tail] + pi[o.head]
        bad = ((reduced < 0) & (plan.x < plan.hi)) | ((reduced > 0) & (plan.x > plan.lo))
        primal = int(o.cost.astype(object) @ plan.x.astype(object))
        if bad.any() or primal != plan.cost:
            raise CertificateFailure("an alternative's potentials do not prove it")

    # -- the residual graph -----------------------------------------------------------------

    def residual(self, plan: Plan) -> _Residual:
        o = self.out
        reduced = o.cost - plan.pi[o.tail] + plan.pi[o.head]
        fwd = np.flatnonzero(plan.x < plan.hi)
        bwd = np.flatnonzero(plan.x > plan.lo)
        r_tail = np.concatenate([o.tail[fwd], o.head[bwd]])
        r_head = np.concatenate([o.head[fwd], o.tail[bwd]])
        weight = np.concatenate([reduced[fwd], -reduced[bwd]])
        arc = np.concatenate([fwd, bwd])
        forward = np.concatenate([np.ones(len(fwd), bool), np.zeros(len(bwd), bool)])
        if len(weight) and weight.min() < 0:
            raise CertificateFailure("a residual arc has a negative reduced cost")
        if len(weight) and float(weight.max()) * self.n_nodes >= _EXACT:
            raise OutOfRange("/alternatives: reduced costs of this problem are too large "
                             "for exact shortest paths (|reduced cost| x nodes must stay "
                             "below 2**53)")
        order = np.argsort(r_tail, kind="stable")
        indptr = np.concatenate([[0], np.cumsum(np.bincount(r_tail, minlength=self.n_nodes))])
        graph = csr_matrix((weight[order].astype(np.float64), r_head[order], indptr),
                           shape=(self.n_nodes, self.n_nodes))
        res = _Residual(graph, graph.data.copy(), arc[order], forward[order], reduced)
        by_arc = np.argsort(res.arc, kind="stable")
        keys = res.arc[by_arc]
        starts = np.searchsorted(keys, plan.branch if plan.branch is not None else [])
        stops = np.searchsorted(keys, plan.branch if plan.branch is not None else [],
                                side="right")
        for a, s, t in zip((plan.branch if plan.branch is not None else []), starts, stops,
                           strict=True):
            res.slots[int(a)] = by_arc[s:t]
        return res

    @staticmethod
    def mask(res: _Residual, a: int) -> None:
        """Take arc ``a`` out of the residual graph (both directions)."""
        res.graph.data[res.slots.get(a, np.zeros(0, np.int64))] = np.inf

    # -- which arcs to branch on ------------------------------------------------------------

    def branch_list(self, plan: Plan) -> np.ndarray:
        """Arcs whose flows, kept, leave only this plan: the user arcs above their lower
        bound, then, while the residual graph keeps a cycle, the user arcs on one."""
        m = self.out.n_user_arcs
        free = (plan.lo[:m] < plan.hi[:m])
        chosen = np.flatnonzero(free & (plan.x[:m] > plan.lo[:m]))
        for _ in range(2):
            on_cycle = _leftover_cycles(self.n_nodes, self.out, plan, chosen)
            if not on_cycle.any():
                return chosen
            extra = np.flatnonzero(on_cycle[:m] & free)
            chosen = np.union1d(chosen, extra)
        # every user arc not fixed: the plan is then the only one left
        return np.union1d(chosen, np.flatnonzero(free))


#: Nodes a shortest-path search settles itself before it hands over to scipy's Dijkstra.
_BUDGET = 48


def _near(graph: csr_matrix, source: int, target: int, limit: float) -> np.ndarray:
    """Dijkstra's distances from ``source`` until ``target`` is settled or every distance
    left exceeds ``limit``: exact for the nodes settled, inf for the others.

    Most children of a cell are decided within a few nodes, so the first ``_BUDGET`` are
    settled here, one array pass each, and only a larger search goes to scipy (whose every
    call validates the whole graph first).
    """
    n = graph.shape[0]
    indptr, indices, data = graph.indptr, graph.indices, graph.data
    tent = np.full(n, np.inf)
    dist = np.full(n, np.inf)
    tent[source] = 0.0
    for _ in range(_BUDGET):
        node = int(np.argmin(tent))
        d = tent[node]
        if d == np.inf or d > limit:
            return dist
        dist[node] = d
        tent[node] = np.inf
        if node == target:
            return dist
        lo, hi = indptr[node], indptr[node + 1]
        heads = indices[lo:hi]
        cand = d + data[lo:hi]
        open_ = np.isinf(dist[heads])
        np.minimum.at(tent, heads[open_], cand[open_])
    full = dijkstra(graph, indices=source, limit=limit)
    settled = full <= min(limit, full[target])
    return np.where(settled, full, np.inf)


def _leftover_cycles(n: int, o: Ranked, plan: Plan, fixed_more: np.ndarray) -> np.ndarray:
    """Mask of extended arcs that may lie on a cycle of the residual graph once the arcs
    ``fixed_more`` are fixed at the plan's flow (none: the plan is the only one left).

    Arcs with room both ways are undirected edges; each component they join is contracted
    and the rest is a directed graph, whose strong components hold every cycle.
    """
    lo, hi = plan.lo.copy(), plan.hi.copy()
    lo[fixed_more] = hi[fixed_more] = plan.x[fixed_more]
    up, down = plan.x < hi, plan.x > lo
    both = up & down
    edges = csr_matrix((np.ones(int(both.sum())), (o.tail[both], o.head[both])), shape=(n, n))
    n_comp, comp = connected_components(edges, directed=False)
    on_cycle = np.zeros(len(o.tail), bool)
    if both.sum() > n - n_comp:
        on_cycle |= both                  # the undirected edges hold a cycle
    one = up ^ down
    t = np.where(up, o.tail, o.head)[one]
    h = np.where(up, o.head, o.tail)[one]
    ct, ch = comp[t], comp[h]
    graph = csr_matrix((np.ones(len(ct)), (ct, ch)), shape=(n_comp, n_comp))
    _, strong = connected_components(graph, directed=True, connection="strong")
    on_cycle[np.flatnonzero(one)] = strong[ct] == strong[ch]
    return on_cycle
