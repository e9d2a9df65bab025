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
from scipy.sparse.csgraph import dijkstra

from service.errors import CertificateFailure, OutOfRange
from service.network.model import Flow, Network
from service.solve import residual
from service.solve.branching import (
    INF,
    leftover_cycles,
    natural_caps,
    near,
    two_smallest,
)
from service.solve.certificate import Certificate

__all__ = ["INF", "Frontier", "Plan", "Ranked", "rank"]

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
    upto: int = 0             # the first ``upto`` branch arcs are taken out, no other


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
    cap = np.concatenate([natural_caps(net), ext.capacity])
    x = np.concatenate([residual.user_flow(net, user_flow), cert.virtual_flow])
    out = Ranked([], [], m, tail, head, cost, cap)
    root = Plan(x, cert.potential.astype(np.int64), cert.primal,
                np.zeros(len(tail), np.int64), cap.copy(), None)
    _Search(net, out, k).run(root)
    return out


class _Search:
    """Best-first search over cells; ``best`` holds the k smallest exact values found.

    The queue holds children with their exact value (``exact``) or, until they reach the
    front, a cheap lower bound from the parent's potentials and one node's residual arcs
    (:meth:`cheap`); a child is searched in full only when its bound comes first.
    """

    def __init__(self, net: Network, out: Ranked, k: int) -> None:
        self.net, self.out, self.k = net, out, k
        self.n_nodes = net.n_user + 3
        self.queue: list[tuple[int, int, bool, int, int, str, int, np.ndarray,
                               np.ndarray]] = []
        self.best: list[int] = []
        self.seq = 0

    def threshold(self) -> float:
        return float(self.best[self.k - 1]) if len(self.best) >= self.k else float("inf")

    def push(self, key: int, exact: bool, j: int, i: int, side: str, shift: int,
             nodes: np.ndarray, dist: np.ndarray) -> None:
        self.seq += 1
        heapq.heappush(self.queue, (key, self.seq, exact, j, i, side, shift, nodes, dist))

    def run(self, root: Plan) -> None:
        plans = self.out.plans
        plans.append(root)
        self.expand(0)
        while len(plans) - 1 < self.k and self.queue:
            value, _, exact, q, i, side, *_ = heapq.heappop(self.queue)
            if not exact:
                self.evaluate(q, i, side)
                continue
            plans.append(self.child_plan(q, i, side, value))
            if len(plans) - 1 < self.k:
                self.expand(len(plans) - 1)
        left, self.queue = self.queue, []
        for value, _, _, q, i, side, shift, nodes, dist in left:
            if value >= INF:
                self.evaluate(q, i, side)     # no residual arc at one end: prove it empty
            else:
                self.out.frontier.append(Frontier(q, i, side, "bound", value, shift, nodes,
                                                  dist))
        for value, _, _, q, i, side, shift, nodes, dist in self.queue:
            self.out.frontier.append(Frontier(q, i, side, "bound", value, shift, nodes, dist))

    # -- expanding a plan: its branch list and every child's bound --------------------------

    def expand(self, j: int) -> None:
        plan = self.out.plans[j]
        plan.branch = self.branch_list(plan)
        res = plan.residual = self.residual(plan)
        g = res.graph
        tails = np.repeat(np.arange(self.n_nodes), np.diff(g.indptr))
        outs = two_smallest(tails, res.base, self.n_nodes)
        ins = two_smallest(g.indices.astype(np.int64), res.base, self.n_nodes)
        for i, a in enumerate(plan.branch.tolist()):
            for side in ("below", "above"):
                if (plan.x[a] - 1 >= plan.lo[a]) if side == "below" else \
                        (plan.x[a] + 1 <= plan.hi[a]):
                    self.cheap(j, i, a, side, res, outs, ins)

    def cheap(self, j: int, i: int, a: int, side: str, res: _Residual,
              outs: tuple[np.ndarray, ...], ins: tuple[np.ndarray, ...]) -> None:
        """Queue child (i, side) under a bound from labels that need no search: every
        node at distance 0 but the target at its cheapest way in, or every node at the
        source's cheapest way out (either is a lower bound on the target's distance)."""
        plan, o = self.out.plans[j], self.out
        u, v = int(o.tail[a]), int(o.head[a])
        source, target = (u, v) if side == "below" else (v, u)
        gain = int(-res.reduced[a] if side == "below" else res.reduced[a])
        own = res.slots.get(a, np.zeros(0, np.int64))
        way_out = outs[2][source] if outs[1][source] in own else outs[0][source]
        way_in = ins[2][target] if ins[1][target] in own else ins[0][target]
        if not np.isfinite(max(way_in, way_out)):
            self.push(INF, False, j, i, side, 0, np.zeros(0, np.int64),
                      np.zeros(0, np.int64))
        elif way_in >= way_out:
            self.push(plan.cost + gain + int(way_in), False, j, i, side, 0,
                      np.array([target]), np.array([int(way_in)]))
        else:
            self.push(plan.cost + gain + int(way_out), False, j, i, side, int(way_out),
                      np.array([source]), np.array([0]))

    def evaluate(self, j: int, i: int, side: str) -> None:
        """Search child (i, side) of plan j in full: queue its exact value, or record it in
        the frontier when beyond the threshold or empty."""
        plan = self.out.plans[j]
        res = plan.residual
        assert res is not None and plan.branch is not None
        self.take_out(res, plan.branch, i + 1)
        self.child(j, i, int(plan.branch[i]), side, res)

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
        dist = near(res.graph, source, target, limit)
        reach = dist[target]
        if np.isfinite(reach):
            value, shift = plan.cost + gain + int(reach), int(reach)
            nodes = np.flatnonzero(dist < reach)
            self.push(value, True, j, i, side, shift, nodes, dist[nodes].astype(np.int64))
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
        self.take_out(res, parent.branch, i + 1)
        prefix = parent.branch[: i + 1].tolist()
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
    def take_out(res: _Residual, branch: np.ndarray, count: int) -> None:
        """Leave exactly the first ``count`` branch arcs out of the graph, changing only
        the entries of the arcs between the old count and the new."""
        data, empty = res.graph.data, np.zeros(0, np.int64)
        for a in branch[min(count, res.upto): max(count, res.upto)].tolist():
            at = res.slots.get(a, empty)
            data[at] = np.inf if count > res.upto else res.base[at]
        res.upto = count

    # -- which arcs to branch on ------------------------------------------------------------

    def branch_list(self, plan: Plan) -> np.ndarray:
        """Arcs whose flows, kept, leave only this plan: the user arcs above their lower
        bound, then, while the residual graph keeps a cycle, the user arcs on one."""
        m = self.out.n_user_arcs
        free = (plan.lo[:m] < plan.hi[:m])
        chosen = np.flatnonzero(free & (plan.x[:m] > plan.lo[:m]))
        for _ in range(2):
            on_cycle = leftover_cycles(self.n_nodes, self.out, plan, chosen)
            if not on_cycle.any():
                return chosen
            extra = np.flatnonzero(on_cycle[:m] & free)
            chosen = np.union1d(chosen, extra)
        # every user arc not fixed: the plan is then the only one left
        return np.union1d(chosen, np.flatnonzero(free))
