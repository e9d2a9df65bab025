"""The residual graph as the checker sees it, and distance rows checked exactly.

Everything here is built from the problem and the answer alone (the allocation, the
virtual flows and the potentials already checked): arrays in, verdicts out. The price
checks (:mod:`service.check.prices`) read only these arrays.

A *distance row* claims ``D(v)``, the least reduced cost of a path from each node ``v`` to
a root ``rho`` in the residual graph (null: no path), and ``next(v)``, the node after
``v`` on such a path. It is exact when

* no residual arc ``u -> v`` has ``D(u) > r_uv + D(v)`` (then ``D(u)`` is at most the
  length of every path from ``u`` to ``rho`` -- induction along the path -- and a null
  ``D(u)`` means no path: an arc into the finite part would break the rule), and
* every finite ``D(v)``, ``v != rho``, equals ``r(v -> next(v)) + D(next(v))`` for a
  residual arc, and following ``next`` reaches ``rho`` (then ``D(v)`` is the length of a
  real path).

Each row is checked over every residual arc with numpy, a block of rows at a time; exact
int64 throughout, since every label is below 2**53 and every reduced cost below 2**60.
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import chain
from typing import Any

import numpy as np

from schemas.numbers import MAX_ANSWER_VALUE, check_numbers
from service.check.exact import _grid_values

#: A null label: above any path length, and INF + a reduced cost still fits in int64.
INF = 2**61
#: Reduced costs the price checks take in int64.
REDUCED_LIMIT = 2**60
#: Entries compared at once in a block of rows.
_BLOCK = 1 << 23


@dataclass(frozen=True)
class ResidualArcs:
    """The residual arcs: forward user arcs, backward user arcs, then virtual ones."""

    n: int
    tail: np.ndarray
    head: np.ndarray
    reduced: np.ndarray       # int64, checked >= 0 and < REDUCED_LIMIT
    room: np.ndarray          # int64 (meaningless where unbounded)
    unbounded: np.ndarray     # bool
    name: np.ndarray          # user arc id, -1 for a virtual arc
    fwd_of: np.ndarray        # residual index of each pair's forward arc, -1 if none
    bwd_of: np.ndarray        # residual index of each pair's backward arc, -1 if none
    key: np.ndarray           # sorted tail * n + head of the distinct (tail, head) pairs
    least: np.ndarray         # least reduced cost per key

    def lookup(self, tail: np.ndarray, head: np.ndarray) -> np.ndarray:
        """Least reduced cost from ``tail`` to ``head``, -1 where there is no arc."""
        want = tail * np.int64(self.n) + head
        at = np.searchsorted(self.key, want)
        ok = at < len(self.key)
        ok[ok] = self.key[at[ok]] == want[ok]
        return np.where(ok, self.least[np.where(ok, at, 0)], -1)


def residual_arcs(n: int, pairs: tuple[np.ndarray, ...], virtual: tuple[np.ndarray, ...]
                  ) -> ResidualArcs:
    """Residual arcs of user pairs ``(tail, head, id, reduced, capacity, bounded, flow)``
    and virtual arcs ``(tail, head, reduced, capacity, flow)`` (all bounded)."""
    t, h, ids, r, cap, bounded, x = pairs
    vt, vh, vr, vcap, vx = virtual
    fwd = ~bounded | (x < cap)
    bwd = x > 0
    vf, vb = vx < vcap, vx > 0
    parts = [(t[fwd], h[fwd], r[fwd], np.where(bounded, cap - x, 0)[fwd], ~bounded[fwd],
              ids[fwd]),
             (h[bwd], t[bwd], -r[bwd], x[bwd], np.zeros(int(bwd.sum()), bool), ids[bwd]),
             (vt[vf], vh[vf], vr[vf], (vcap - vx)[vf], np.zeros(int(vf.sum()), bool),
              np.full(int(vf.sum()), -1)),
             (vh[vb], vt[vb], -vr[vb], vx[vb], np.zeros(int(vb.sum()), bool),
              np.full(int(vb.sum()), -1))]
    cols = [np.concatenate([p[k] for p in parts]) for k in range(6)]
    tail, head, reduced = (c.astype(np.int64) for c in cols[:3])
    fwd_of = np.full(len(t), -1, np.int64)
    fwd_of[fwd] = np.arange(int(fwd.sum()))
    bwd_of = np.full(len(t), -1, np.int64)
    bwd_of[bwd] = int(fwd.sum()) + np.arange(int(bwd.sum()))
    keys = tail * np.int64(n) + head
    order = np.lexsort((reduced, keys))
    first = np.concatenate(([True], keys[order][1:] != keys[order][:-1])) if len(order) \
        else np.zeros(0, bool)
    return ResidualArcs(n, tail, head, reduced, cols[3].astype(np.int64), cols[4],
                        cols[5].astype(np.int64), fwd_of, bwd_of, keys[order][first],
                        reduced[order][first])


def read_labels(rows: Any, n: int, scale: int) -> tuple[np.ndarray | None, str | None]:
    """A list of lists of ``n`` numbers or nulls as grid values (INF for null)."""
    if not isinstance(rows, list) or any(not isinstance(r, list) or len(r) != n
                                         for r in rows):
        return None, f"must be a list of lists of {n} entries, one per node"
    flat = list(chain.from_iterable(rows))
    vals, present, bad = check_numbers(flat, "number", nullable=True, bound=MAX_ANSWER_VALUE)
    if bad:
        return None, f"entry {bad[0]} is not a number within 2**53 or null"
    grid, wrong = _grid_values(np.where(present, vals, 0.0), scale)
    if wrong.any() or grid.dtype == object or (len(grid) and int(np.abs(grid).max()) >= INF):
        return None, "a label is not on the problem's cost grid"
    grid = np.where(present, grid, INF)
    return grid.reshape(len(rows), n), None


def read_nodes(rows: Any, shape: tuple[int, int]) -> np.ndarray | None:
    """A list of lists of node numbers (or -1) of the given shape, or None."""
    if not isinstance(rows, list) or len(rows) != shape[0] or any(
            not isinstance(r, list) or len(r) != shape[1] for r in rows):
        return None
    flat = list(chain.from_iterable(rows))
    if not set(map(type, flat)) <= {int}:
        return None
    out = np.array(flat, np.int64).reshape(shape) if flat else np.zeros(shape, np.int64)
    return out if not out.size or (out.min() >= -1 and out.max() < shape[1]) else None


def _shortened(g: ResidualArcs, d: np.ndarray) -> tuple[int, int] | None:
    """(arc, row) of the first residual arc ``u -> v`` with ``d(u) > r + d(v)``, or None.

    Node-major (gathering whole rows of the transpose copies a few bytes per arc instead
    of reading scattered entries), and in int32 when every finite label plus the largest
    reduced cost stays below 2**30: then a null label (2**30 there) still exceeds every
    finite one plus any reduced cost, and no sum reaches 2**31.
    """
    finite = d < INF
    top = int(d[finite].max(initial=0)) + int(g.reduced.max(initial=0))
    if top < 2**30:
        dt = np.ascontiguousarray(np.where(finite, d, 2**30).T.astype(np.int32))
        r = g.reduced.astype(np.int32)
    else:
        dt, r = np.ascontiguousarray(d.T), g.reduced
    bound = dt[g.head]
    bound += r[:, None]
    short = dt[g.tail] > bound
    if not short.any():
        return None
    e, k = np.argwhere(short)[0]
    return int(e), int(k)


def rows_differ(g: ResidualArcs, roots: np.ndarray, dist: np.ndarray,
                nxt: np.ndarray) -> str | None:
    """What is wrong with the distance rows (see module docstring), or None."""
    n = g.n
    if len(roots) and (roots.min() < 0 or roots.max() >= n or len(np.unique(roots)) < len(roots)):
        return "roots must be distinct node numbers"
    step = max(1, _BLOCK // max(1, len(g.tail) + n))
    for start in range(0, len(roots), step):
        d, nx_, rho = dist[start:start + step], nxt[start:start + step], roots[start:start + step]
        at = np.arange(len(rho))
        if (d[at, rho] != 0).any() or (nx_[at, rho] != -1).any():
            return "a root's own distance must be 0 and its next node -1"
        if (d < 0).any():
            return "a distance is negative"
        short = _shortened(g, d)
        if short is not None:
            e, k = short
            return (f"row of root {rho[k]}: arc {g.tail[e]} -> {g.head[e]} gives node "
                    f"{g.tail[e]} a shorter path than its distance")
        finite = (d < INF)
        finite[at, rho] = False
        kk, v = np.nonzero(finite)
        w = nx_[kk, v]
        r = g.lookup(v, np.maximum(w, 0))
        bad = (w < 0) | (r < 0)
        bad[~bad] = d[kk, v][~bad] != r[~bad] + d[kk[~bad], w[~bad]]
        if bad.any():
            return (f"row of root {rho[kk[bad][0]]}: node {v[bad][0]} is not one tight "
                    f"residual arc from its next node")
        up = np.where(nx_ >= 0, nx_, np.arange(n)[None, :])
        up[at, rho] = rho
        for _ in range(max(1, n.bit_length() + 1)):
            up = np.take_along_axis(up, up, axis=1)
        if (up[finite] != np.repeat(rho, finite.sum(axis=1))).any():
            return "a row's next nodes go round a cycle instead of reaching its root"
    return None
