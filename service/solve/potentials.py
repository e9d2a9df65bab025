"""Exact integer potentials for a residual graph, from candidate duals.

An engine's duals (floats), or potentials guessed from the flow itself, become exact
int64 potentials ``pi`` with every residual reduced cost ``c - pi(i) + pi(j) >= 0``:

1. Round the candidate to integers ``q``; reduced costs ``r = c - q(i) + q(j)`` in int64.
   When every ``r >= 0``, ``pi = q`` (one linear pass): the case for every engine with
   duals measured here, whose duals are sums and differences of integer costs.
2. Otherwise ``pi = q - delta``, with ``delta <= 0`` the shortest distances under the
   lengths ``r`` from a virtual root joined to every node by 0-length arcs, found in
   *Dijkstra rounds*: a compiled Dijkstra (scipy) closes every arc with ``r >= 0``, then
   one vectorised pass relaxes the few arcs with ``r < 0``; stop when that pass improves
   nothing.

Correctness (Ahuja, Magnanti & Orlin, *Network Flows*, 1993, §5.2-5.4; the alternation is
Lemma 3.3 of Bernstein, Nanongkai & Wulff-Nilsen, "Negative-weight single-source shortest
paths in near-linear time", FOCS 2022). Johnson's reweighting keeps every path's length up
to its end points, so ``pi`` is valid once ``delta(j) <= delta(i) + r`` on every arc.
Labels are lengths of real walks, so never below the true distances; after round ``t``
each label is at most the shortest walk using ``t - 1`` negative arcs. Without a negative
cycle a shortest path uses each negative arc at most once, so at most ``|N| + 1`` rounds
are needed (``N`` the negative arcs), usually a handful. On stopping, the negative arcs
hold (nothing improved) and the others hold (Dijkstra just closed them): the result is
valid whatever the number of rounds was. A final int64 check of every reduced cost
stands guard anyway.

Exactness of float64 Dijkstra: each round shifts the labels ``L <= 0`` so that root arcs
have length ``L(v) - min L >= 0``; every distance is then an integer at most ``-min L``.
While that is below 2**53 and every length used is an integer below 2**53, each distance
is a sum of two exactly represented integers whose exact sum is representable, so float64
computes it exactly, and a losing candidate rounds to at least the winner + 1 (rounding
is monotone): no tie or inversion. Arcs with ``r >= 2**53`` are left out (no label
in ``(-2**53, 0]`` can violate them). Labels reaching ``-2**53`` stop the method.

Each node's most negative incoming arc (or, lacking one, an arc of length 0, unless
those close a cycle) makes a forest; after each Dijkstra the labels
are also relaxed down every path of that forest at once (pointer jumping, log(depth)
vectorised passes), so a long path of negative arcs (a chain whose arcs all sit at a
bound) costs a round or two instead of one round per arc.

Cost: one O(m) pass when the candidate is exact; else O(rounds x (m + n log n)) plus a
linear-time sort, with ``rounds`` capped by the caller (who falls back to Bellman-Ford).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.sparse import csr_array
from scipy.sparse.csgraph import breadth_first_order, connected_components, dijkstra

from service.solve.paths import order_by

__all__ = ["Potentials", "exact_potentials", "forest_candidate"]

#: Integers below this are exact in float64 with room for one addition.
_EXACT = 2**53
#: Candidates beyond this magnitude are replaced by 0, keeping int64 sums far from overflow.
_CANDIDATE_MAX = 2**52
#: Sums along the forests saturate here: two of them still fit in int64.
_FLOOR = -(2**62)


@dataclass(frozen=True)
class Potentials:
    """Integer potentials and how they were found."""

    pi: np.ndarray      # int64 per node; valid only when ``ok``
    ok: bool            # every residual reduced cost >= 0, checked in int64
    negative: int       # arcs with a negative reduced cost under the rounded candidate
    rounds: int         # Dijkstra rounds used (0: the candidate was exact)


def rounded(n: int, candidate: np.ndarray | None) -> np.ndarray:
    """The candidate as int64 (non-finite or huge entries become 0; None is all 0)."""
    if candidate is None:
        return np.zeros(n, np.int64)
    c = np.asarray(candidate)
    if c.dtype.kind in "iu":
        q = c.astype(np.int64)
        return np.where(np.abs(q) <= _CANDIDATE_MAX, q, 0)
    f = np.rint(c.astype(np.float64))
    f[~np.isfinite(f) | (np.abs(f) > _CANDIDATE_MAX)] = 0.0
    return f.astype(np.int64)


def exact_potentials(n: int, tail: np.ndarray, head: np.ndarray, cost: np.ndarray,
                     candidate: np.ndarray | None, *, max_rounds: int) -> Potentials:
    """Exact potentials for the residual graph ``(tail, head, cost)``, repaired from a candidate.

    Parameters
    ----------
    n : number of nodes.
    tail, head, cost : the residual arcs (int64; ``|cost| < 2**60``).
    candidate : approximate potentials per node (float or int, any accuracy), or None.
    max_rounds : Dijkstra rounds allowed; ``ok`` is False when they were not enough.

    Returns
    -------
    Potentials; when ``ok``, every ``cost - pi[tail] + pi[head] >= 0`` in exact int64
    (``|pi| < 2**54``, so nothing can overflow).

    Notes
    -----
    See the module docstring for the method, its proof and its float64 bound. Dijkstra's
    method: E. W. Dijkstra, Numer. Math. 1 (1959), 269-271.
    """
    q = rounded(n, candidate)
    r = cost - q[tail] + q[head]
    negative = r < 0
    k = int(np.count_nonzero(negative))
    if k == 0:
        return Potentials(q, True, 0, 0)
    delta, rounds = _rounds(n, tail, head, r, negative, min(max_rounds, k + 1))
    if delta is None:
        return Potentials(q, False, k, rounds)
    pi = q - delta
    return Potentials(pi, bool(np.all(cost - pi[tail] + pi[head] >= 0)), k, rounds)


def _rounds(n: int, tail: np.ndarray, head: np.ndarray, r: np.ndarray,
            negative: np.ndarray, cap: int) -> tuple[np.ndarray | None, int]:
    """Distances ``<= 0`` from a 0-length virtual root under lengths ``r``, or None."""
    keep = ~negative & (r < _EXACT)
    t, h, w = _shortest_parallel(n, tail[keep], head[keep], r[keep])
    tn, hn, rn = tail[negative], head[negative], r[negative]
    # CSR over n + 1 nodes: rows 0..n-1 the arcs above (sorted by tail), row n the root
    # with an arc to every node; only the root's lengths change from round to round
    counts = np.bincount(t, minlength=n + 1)
    counts[n] = n
    indptr = np.concatenate(([0], np.cumsum(counts)))
    indices = np.concatenate([h, np.arange(n)]).astype(np.int32)
    data = np.concatenate([w.astype(np.float64), np.zeros(n)])
    graph = csr_array((data, indices, indptr), shape=(n + 1, n + 1))
    root = slice(len(w), len(w) + n)
    # zero-length arcs bridge the gaps of a negative path (a chain's 0-cost links); if
    # they close a cycle of parents (free arcs are 0 both ways), negative arcs alone
    zero = r == 0
    parent, step = _negative_forest(n, tn, hn, rn, (tail[zero], head[zero]))
    labels = _down_the_forest(np.zeros(n, np.int64), parent, step)
    if labels is None:
        parent, step = _negative_forest(n, tn, hn, rn, (tail[:0], head[:0]))
        labels = _down_the_forest(np.zeros(n, np.int64), parent, step)
    if labels is None:
        return None, 0              # a cycle of negative arcs: no potentials exist
    for done in range(1, cap + 1):
        low = int(labels.min())
        if -low >= _EXACT:
            return None, done       # float64 distances would no longer be exact
        graph.data[root] = (labels - low).astype(np.float64)
        dist = dijkstra(graph, directed=True, indices=n)[:n]
        closed = np.rint(dist).astype(np.int64) + low
        down = _down_the_forest(closed, parent, step)
        assert down is not None     # the same forest settled before
        labels = down.copy()
        through = labels[tn] + rn
        better = through < labels[hn]
        if not better.any() and np.array_equal(down, closed):
            return (labels, done) if -int(labels.min()) < _EXACT else (None, done)
        np.minimum.at(labels, hn[better], through[better])
    return None, cap


def _negative_forest(n: int, tail: np.ndarray, head: np.ndarray, length: np.ndarray,
                     zero: tuple[np.ndarray, np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
    """Each node's most negative incoming arc, as (parent, length) per node; a node with
    none takes an incoming arc of length 0 if it has one (``zero``: their tails, heads),
    else is its own parent at length 0."""
    parent, step = np.arange(n), np.zeros(n, np.int64)
    parent[zero[1]] = zero[0]               # any one per head will do
    if len(tail):
        order = np.lexsort((length, head))
        first = order[np.diff(head[order], prepend=-1) != 0]
        parent[head[first]] = tail[first]
        step[head[first]] = length[first]
    return parent, step


def _down_the_forest(labels: np.ndarray, parent: np.ndarray,
                     step: np.ndarray) -> np.ndarray | None:
    """Labels relaxed along every path of the forest at once; None if it has a cycle.

    ``best(v) = min over ancestors a of label(a) + length(a -> v)``, by pointer jumping
    (Wyllie's doubling, ``ceil(log2 depth)`` vectorised passes): after pass ``k`` the
    minimum covers the ancestors fewer than ``2**(k+1)`` steps up. A cycle among the
    parents (only a negative cycle makes one) never settles. Sums saturate at
    ``-2**62``: that keeps int64 from wrapping, and a label raised to it is still no
    lower than the true distance, which is all the rounds need (such labels then stop
    them at the 2**53 bound).
    """
    best, up, dist = labels, parent, step
    for _ in range(len(labels).bit_length() + 1):
        best = np.minimum(best, np.maximum(best[up] + dist, _FLOOR))
        if np.array_equal(up, up[up]):
            return best
        dist = np.maximum(dist + dist[up], _FLOOR)
        up = up[up]
    return None


def _shortest_parallel(n: int, tail: np.ndarray, head: np.ndarray,
                       length: np.ndarray) -> tuple[np.ndarray, ...]:
    """One arc per (tail, head), the shortest, sorted by tail (two linear radix passes).

    scipy's sparse constructors add up duplicate entries; a Dijkstra over summed parallel
    arcs would be wrong, so they are merged here first.
    """
    if len(tail) == 0:
        return tail, head, length
    by_head = order_by(head, n)
    order = by_head[order_by(tail[by_head], n)]
    t, h, w = tail[order], head[order], length[order]
    first = np.flatnonzero(np.concatenate(([True], (t[1:] != t[:-1]) | (h[1:] != h[:-1]))))
    return t[first], h[first], np.minimum.reduceat(w, first)


def forest_candidate(n: int, tail: np.ndarray, head: np.ndarray, cost: np.ndarray,
                     free: np.ndarray) -> np.ndarray:
    """Candidate potentials for a flow that came without duals, from its free arcs.

    Parameters
    ----------
    n : number of nodes.
    tail, head, cost : the arcs of the network (not the residual graph).
    free : mask of the arcs strictly between their bounds (``0 < x < u``).

    Returns
    -------
    int64 potentials that make every arc of a spanning forest of the free arcs tight.

    Notes
    -----
    A free arc has both residual arcs, so at any optimal potentials its reduced cost is
    ``>= 0`` and ``<= 0``: zero (complementary slackness, AMO thm 9.4). A spanning forest
    of the free arcs (undirected) therefore fixes the potentials inside each of its trees
    up to a constant; they are summed from each tree's root by pointer jumping
    (``ceil(log2 depth)`` vectorised passes, exact int64). Only the offsets between trees
    are left for :func:`exact_potentials`, so a long path of free arcs (a chain) costs
    nothing like its depth. A heuristic for the number of rounds, not a bound: a long path
    whose arcs all sit at a bound has no free arc to use.
    """
    arcs = np.flatnonzero(free)
    if len(arcs) == 0:
        return np.zeros(n, np.int64)
    a, b = tail[arcs], head[arcs]
    # any spanning forest will do: breadth-first from a virtual root joined to one node of
    # each connected component of the free arcs
    undirected = csr_array((np.ones(2 * len(arcs)), (np.concatenate([a, b]),
                                                     np.concatenate([b, a]))), shape=(n, n))
    _, label = connected_components(undirected, directed=False)
    reps = np.unique(label, return_index=True)[1]
    rows = np.concatenate([a, b, np.full(len(reps), n)])
    cols = np.concatenate([b, a, reps])
    which = np.concatenate([arcs, arcs, np.full(len(reps), -1)])
    # the arc behind each (row, col) entry, found again by position after sorting by row
    order = order_by(rows, n + 1)
    graph = csr_array((np.ones(len(rows)), cols[order].astype(np.int32),
                       np.searchsorted(rows[order], np.arange(n + 2))), shape=(n + 1, n + 1))
    _, parent = breadth_first_order(graph, n, directed=True, return_predecessors=True)
    parent = parent[:n].astype(np.int64)
    child = np.flatnonzero(parent < n)          # roots hang from the virtual root
    p = parent[child]
    # locate the entry (p, child) in the row-sorted arrays: within row p, by column
    key = rows[order] * np.int64(n + 1) + cols[order]
    by_key = np.argsort(key, kind="stable")
    arc = which[order][by_key[np.searchsorted(key[by_key], p * np.int64(n + 1) + child)]]
    step = np.zeros(n, np.int64)
    # arc p->v tight: pi(v) = pi(p) - c;  arc v->p tight: pi(v) = pi(p) + c
    step[child] = np.where(tail[arc] == p, -cost[arc], cost[arc])
    up = np.where(parent < n, parent, np.arange(n))
    total = step
    while True:
        moving = up != up[up]
        if not moving.any():
            return total
        total = total + np.where(moving, total[up], 0)
        up = up[up]
