"""The override prices, checked from their proof without trusting the service.

For a pair ``a = (i, j)`` with flow ``x_a``, forward reduced cost ``r_a`` and the residual
graph of :mod:`service.check.distances` (README, "The certificate", override prices):

* ``force_delta``: 0 when ``x_a > 0``; null when ``a`` has no room; otherwise
  ``r_a + d(j -> i)``, read from the distance row of root ``i`` (null when null). The row
  is exact (checked there), so this is the least extra cost of a plan with a unit on
  ``a``: every such plan is the optimum plus residual cycles of non-negative cost, one of
  them through ``a``; pushing one unit round ``a`` and a shortest path back achieves it.
* ``forbid_delta``: 0 when ``x_a = 0``; otherwise ``x_a (-r_a) + F`` with ``F`` the least
  reduced cost of ``x_a`` units from ``i`` to ``j`` in the residual graph without ``a``:
  - upper bound: the reroute's ``flow`` is such a flow (residual arcs other than ``a``'s,
    within room, ``x_a`` units out of ``i`` into ``j``, balanced elsewhere), and its
    reduced cost is ``F``;
  - lower bound, one unit without labels: ``F >= min over residual arcs b = (u -> j),
    b != a, of d(i -> u) + r_b`` (a path avoiding ``a`` enters ``j`` by such an arc), with
    ``d(i -> u)`` from the distance row of root ``u`` (0 when ``u = i``; infinite when no
    residual arc enters ``u``);
  - lower bound with labels ``l``: ``x_a (l(j) - l(i)) - sum_e room_e max(0, l(head) -
    l(tail) - r_e)`` (weak duality; no unbounded arc may gain), which must equal ``F``;
  - null: no labels and every candidate above infinite (one unit), or the nodes with a
    label form a cut holding ``i`` but not ``j`` whose residual room is below ``x_a``.
"""

from __future__ import annotations

from itertools import chain
from typing import Any

import numpy as np

from service.check.checks import _Checks
from service.check.distances import (
    INF,
    REDUCED_LIMIT,
    ResidualArcs,
    read_labels,
    read_nodes,
    rows_differ,
)
from service.check.exact import _dot, _grid_values, _products, _show
from service.errors import TooLarge

__all__ = ["PRICE_CHECKS", "check_prices"]

PRICE_CHECKS = ["price_rows", "price_distances", "force_delta", "forbid_delta"]


def check_prices(checks: _Checks, g: ResidualArcs, pairs: dict[str, np.ndarray],
                 rows: Any, proof: Any, scale: int, max_work: int | None = None) -> None:
    """Add the four price checks to ``checks``.

    ``pairs``: per allowed pair in the problem's order, ``tail``, ``head``, ``id`` (arc
    id), ``flow``, ``reduced`` (forward reduced cost), ``room`` (bool: may grow), and
    ``from``, ``to`` (lists of the end points' ids). Raises TooLarge when checking the
    proof would take more than ``max_work``: each distance row and each set of labels is
    read against every residual arc.
    """
    if max_work is not None and isinstance(proof, dict):
        rows_given = len(proof["roots"]) if isinstance(proof.get("roots"), list) else 0
        labelled = sum(1 for e in proof.get("reroutes") or [] if isinstance(e, dict)
                       and "labels" in e) if isinstance(proof.get("reroutes"), list) else 0
        unit = pairs["head"][pairs["flow"] == 1]
        work = max((rows_given + labelled) * (g.n + len(g.tail)),
                   int(np.bincount(g.head, minlength=g.n)[unit].sum()))
        if work > max_work:
            raise TooLarge(f"/answer/certificate/prices: checking it takes {work:,} units of "
                           f"work (distance rows and labels x (nodes + residual arcs)), more "
                           f"than the limit of {max_work:,} (setting MAX_PRICES_WORK)",
                           limit=max_work, pointer="/answer/certificate/prices")
    claimed = _rows(g, pairs, rows, scale)
    if isinstance(claimed, str):
        checks.add("price_rows", claimed, "")
        checks.skip(PRICE_CHECKS[1:], "the price rows do not match the pairs")
        return
    checks.add("price_rows", None, "one price row per allowed pair, in order")
    if int(g.reduced.max(initial=0)) >= REDUCED_LIMIT or int(g.reduced.min(initial=0)) < 0:
        checks.add("price_distances", "reduced costs beyond 2**60 or negative", "")
        checks.skip(PRICE_CHECKS[2:], "reduced costs out of range")
        return
    read = _distance_rows(g, proof, scale)
    if isinstance(read, str):
        checks.add("price_distances", read, "")
        checks.skip(PRICE_CHECKS[2:], "the distance rows do not hold")
        return
    roots, dist = read
    checks.add("price_distances", None, f"{len(roots)} rows of exact residual distances")
    row = np.full(g.n, -1, np.int64)
    row[roots] = np.arange(len(roots))
    force, forbid = claimed
    checks.add("force_delta", _force_differs(pairs, force, row, dist, scale),
               "each force_delta is r + the distance back, exact")
    checks.add("forbid_delta", _forbid_differs(g, pairs, forbid, row, dist, proof, scale),
               "each forbid_delta is shown by a rerouting flow and bounded below")


def _rows(g: ResidualArcs, pairs: dict[str, np.ndarray], rows: Any, scale: int
          ) -> tuple[np.ndarray, np.ndarray] | str:
    """(force, forbid) grid values per pair (INF for null), or what is wrong."""
    n = len(pairs["tail"])
    if len(rows) != n:
        return f"{len(rows)} price rows for {n} allowed pairs"
    c = rows.columns
    if c["from"] != pairs["from"] or c["to"] != pairs["to"]:
        at = next(k for k in range(n) if (c["from"][k], c["to"][k])
                  != (pairs["from"][k], pairs["to"][k]))
        return (f"row {at} names {c['from'][at]} -> {c['to'][at]}, the pair there is "
                f"{pairs['from'][at]} -> {pairs['to'][at]}")
    flow = c["flow"]
    if (np.asarray(flow) != pairs["flow"]).any():
        return f"row {int(np.argmax(np.asarray(flow) != pairs['flow']))}: flow differs"
    if "arc" in rows.present and rows.present["arc"].any():
        if (c["arc"] != pairs["id"]).any() or not rows.present["arc"].all():
            return "the rows' arc ids are not the pairs' in order"
    out = []
    for key in ("force_delta", "forbid_delta"):
        present = rows.present.get(key, np.ones(n, bool))
        grid, wrong = _grid_values(np.where(present, c[key], 0.0), scale)
        if wrong.any() or grid.dtype == object:
            return f"a {key} is not on the problem's cost grid"
        out.append(np.where(present, grid, INF))
    return out[0], out[1]


def _distance_rows(g: ResidualArcs, proof: Any, scale: int
                   ) -> tuple[np.ndarray, np.ndarray] | str:
    if not isinstance(proof, dict) or not isinstance(proof.get("roots"), list):
        return "certificate.prices must hold roots, distances, next and reroutes"
    roots = proof["roots"]
    if any(type(v) is not int for v in roots):
        return "roots must be node numbers"
    root_arr = np.array(roots, np.int64)
    dist, wrong = read_labels(proof.get("distances"), g.n, scale)
    if dist is None or len(dist) != len(roots):
        return f"distances: {wrong or 'one row per root'}"
    nxt = read_nodes(proof.get("next"), dist.shape)
    if nxt is None:
        return "next: one row per root of node numbers or -1"
    bad = rows_differ(g, root_arr, dist, nxt)
    return bad if bad else (root_arr, dist)


def _force_differs(pairs: dict[str, np.ndarray], claimed: np.ndarray, row: np.ndarray,
                   dist: np.ndarray, scale: int) -> str | None:
    x, r, room = pairs["flow"], pairs["reduced"], pairs["room"]
    want = np.where(x > 0, 0, INF)
    ask = np.flatnonzero((x == 0) & room)
    k = row[pairs["tail"][ask]]
    if (k < 0).any():
        return f"no distance row for node {pairs['tail'][ask][k < 0][0]}"
    d = dist[k, pairs["head"][ask]]
    want[ask] = np.where(d < INF, r[ask] + d, INF)
    return _first_mismatch(claimed, want, "force_delta", scale)


def _first_mismatch(claimed: np.ndarray, want: np.ndarray, what: str, scale: int
                    ) -> str | None:
    bad = np.flatnonzero(claimed != want)
    if not len(bad):
        return None
    p = int(bad[0])
    return (f"pair {p}: {what} is {_shown(claimed[p], scale)}, proven "
            f"{_shown(want[p], scale)}")


def _shown(value: int, scale: int) -> str:
    return "null" if value >= INF else _show(int(value), scale)


def _forbid_differs(g: ResidualArcs, pairs: dict[str, np.ndarray], claimed: np.ndarray,
                    row: np.ndarray, dist: np.ndarray, proof: dict, scale: int) -> str | None:
    x, r = pairs["flow"], pairs["reduced"]
    used = np.flatnonzero(x > 0)
    entries = proof.get("reroutes")
    if not isinstance(entries, list) or any(
            not isinstance(e, dict) or type(e.get("pair")) is not int
            or not isinstance(e.get("flow"), list) for e in entries):
        return "reroutes must be a list of {pair, flow, labels?}"
    by_pair = {e["pair"]: e for e in entries}
    if len(by_pair) != len(entries) or set(by_pair) != set(used.tolist()):
        return "reroutes must name each used pair once"
    low = np.full(len(x), INF, np.int64)
    plain = np.array([p for p in used.tolist() if "labels" not in by_pair[p]], np.int64)
    if (x[plain] > 1).any():
        return f"pair {plain[x[plain] > 1][0]}: several units need labels for a lower bound"
    bound = _unit_bounds(g, row, dist, plain, pairs)
    if isinstance(bound, str):
        return bound
    low[plain] = bound
    for p in used.tolist():
        if "labels" in by_pair[p]:
            found = _labels_bound(g, by_pair[p]["labels"], int(pairs["id"][p]),
                                  int(pairs["tail"][p]), int(pairs["head"][p]), int(x[p]),
                                  scale)
            if isinstance(found, str):
                return f"pair {p}: {found}"
            low[p] = min(found, INF)
    shown = used[low[used] < INF]
    high = _flow_costs(g, pairs, shown, [by_pair[p]["flow"] for p in shown.tolist()])
    if isinstance(high, str):
        return high
    differ = np.flatnonzero(high != low[shown])
    if len(differ):
        p = int(shown[differ[0]])
        return (f"pair {p}: the rerouting flow costs {_show(int(high[differ[0]]), scale)}, "
                f"the lower bound is {_show(int(low[p]), scale)}")
    want = np.where(x > 0, INF, 0)
    lost = _products(x[shown], -r[shown])
    if lost.dtype == object or (len(lost) and int(lost.max()) >= INF):
        return "taking a pair's units off costs beyond 2**61: out of range"
    want[shown] = lost + high
    return _first_mismatch(claimed, want, "forbid_delta", scale)


def _unit_bounds(g: ResidualArcs, row: np.ndarray, dist: np.ndarray, ps: np.ndarray,
                 pairs: dict[str, np.ndarray]) -> np.ndarray | str:
    """Per pair of one unit, ``min over residual arcs b = (u -> j), b != a, of
    d(i -> u) + r_b`` from the distance rows (INF: none); all pairs at once."""
    n = g.n
    by_head = np.argsort(g.head, kind="stable")
    starts = np.searchsorted(g.head[by_head], np.arange(n + 1))
    i, j = pairs["tail"][ps], pairs["head"][ps]
    count = starts[j + 1] - starts[j]
    owner = np.repeat(np.arange(len(ps)), count)
    offset = np.repeat(starts[j] - np.concatenate(([0], np.cumsum(count)[:-1])), count)
    into = by_head[offset + np.arange(int(count.sum()))]
    mine = into != g.fwd_of[ps][owner]
    owner, into = owner[mine], into[mine]
    u, start = g.tail[into], i[owner]
    entered = np.zeros(n, bool)
    entered[g.head] = True
    k = row[u]
    missing = (u != start) & (k < 0) & entered[u]
    if missing.any():
        return f"no distance row for node {u[missing][0]}"
    d = np.where(u == start, 0,
                 np.where(k >= 0, dist[np.maximum(k, 0), start] if len(dist) else INF, INF))
    value = np.where(d < INF, d + g.reduced[into], INF)
    out = np.full(len(ps), INF, np.int64)
    np.minimum.at(out, owner, value)
    return out


def _labels_bound(g: ResidualArcs, labels: Any, arc_id: int, i: int, j: int, k: int,
                  scale: int) -> int | str:
    """The dual bound of the labels (INF when they show a cut of room below ``k``)."""
    read, wrong = read_labels([labels], g.n, scale)
    if read is None:
        return f"labels: {wrong}"
    lab = read[0]
    keep = g.name != arc_id
    t, h, r = g.tail[keep], g.head[keep], g.reduced[keep]
    room, free = g.room[keep], g.unbounded[keep]
    if (lab >= INF).any():
        side = lab < INF
        if not side[i] or side[j]:
            return "a cut must hold the pair's tail and not its head"
        across = side[t] & ~side[h]
        if (across & free).any():
            return "an unbounded arc crosses the cut"
        if int(room[across].sum()) >= k:
            return f"the cut's room {int(room[across].sum())} is not below {k}"
        return INF
    gain = lab[h] - lab[t] - r
    if (free & (gain > 0)).any():
        return "an unbounded arc gains under the labels"
    return k * int(lab[j] - lab[i]) - _dot(room, np.maximum(gain, 0))


def _flow_costs(g: ResidualArcs, pairs: dict[str, np.ndarray], ps: np.ndarray,
                flows: list[Any]) -> np.ndarray | str:
    """Per pair, the reduced cost of its rerouting flow: ``k`` units from ``i`` to ``j``
    on residual arcs other than the pair's own, within their room; or what is wrong."""
    if any(not f for f in flows):
        return f"pair {ps[[not f for f in flows].index(True)]}: no rerouting flow"
    steps = list(chain.from_iterable(flows))
    if any(type(s) is not list or len(s) != 4 for s in steps):
        return "flow rows must be [from, to, amount, arc]"
    flat = list(chain.from_iterable(steps))
    if any(type(v) is not int or not -2**62 < v < 2**62 for v in flat):
        return "flow rows must hold whole numbers"
    f = np.array(flat, np.int64).reshape(-1, 4)
    owner = np.repeat(np.arange(len(ps)), [len(fl) for fl in flows])
    u, v, amount, arc = f[:, 0], f[:, 1], f[:, 2], f[:, 3]
    k = pairs["flow"][ps]
    if ((amount < 1) | (amount > k[owner]) | (u < 0) | (v < 0) | (u >= g.n)
            | (v >= g.n)).any():
        return "flow rows must name nodes and carry 1 up to the pair's units"
    e = _residual_of(g, pairs, u, v, arc)
    if (e < 0).any():
        return f"pair {ps[owner[e < 0][0]]}: a flow row names no residual arc"
    if (g.name[e] == pairs["id"][ps][owner]).any():
        return f"pair {ps[owner[g.name[e] == pairs['id'][ps][owner]][0]]}: the flow uses the pair"
    if float(amount.astype(np.float64).sum()) >= 2.0**62:
        return "flow amounts out of range"
    keys, back = np.unique(owner * np.int64(len(g.tail)) + e, return_inverse=True)
    total = np.zeros(len(keys), np.int64)
    np.add.at(total, back, amount)
    arc_of = keys % len(g.tail)
    over = (total > g.room[arc_of]) & ~g.unbounded[arc_of]
    if over.any():
        return f"pair {ps[keys[over][0] // len(g.tail)]}: the flow overfills a residual arc"
    n = np.int64(g.n)
    o = np.arange(len(ps))
    node = np.concatenate([owner * n + u, owner * n + v, o * n + pairs["tail"][ps],
                           o * n + pairs["head"][ps]])
    amt = np.concatenate([amount, -amount, -k, k])
    keys, back = np.unique(node, return_inverse=True)
    balance = np.zeros(len(keys), np.int64)
    np.add.at(balance, back, amt)
    if balance.any():
        return (f"pair {ps[keys[balance != 0][0] // n]}: the flow does not send the "
                f"pair's units from its tail to its head alone")
    cost = _products(amount, g.reduced[e])
    out = np.zeros(len(ps), cost.dtype)
    np.add.at(out, owner, cost)
    if out.dtype == object and len(out) and max(abs(int(c)) for c in out) >= INF:
        return "a rerouting flow's cost is out of range"
    return out.astype(np.int64)


def _residual_of(g: ResidualArcs, pairs: dict[str, np.ndarray], u: np.ndarray,
                 v: np.ndarray, arc: np.ndarray) -> np.ndarray:
    """The residual arc each row names: a pair's forward or backward arc, or (arc -1) the
    virtual arc from ``u`` to ``v``; -1 where none."""
    ids = pairs["id"]
    at = np.searchsorted(ids, arc)
    ok = (arc >= 0) & (at < len(ids))
    ok[ok] = ids[at[ok]] == arc[ok]
    pos = np.where(ok, at, 0)
    fwd = ok & (pairs["tail"][pos] == u) & (pairs["head"][pos] == v)
    bwd = ok & (pairs["head"][pos] == u) & (pairs["tail"][pos] == v)
    out = np.where(fwd, g.fwd_of[pos], np.where(bwd, g.bwd_of[pos], -1))
    virtual = np.flatnonzero(arc == -1)
    if len(virtual):
        mine = np.flatnonzero(g.name < 0)
        keys = g.tail[mine] * np.int64(g.n) + g.head[mine]
        order = np.argsort(keys)
        want = u[virtual] * np.int64(g.n) + v[virtual]
        found = np.searchsorted(keys[order], want)
        hit = found < len(keys)
        hit[hit] = keys[order][found[hit]] == want[hit]
        out[virtual] = np.where(hit, mine[order][np.where(hit, found, 0)], -1)
    return out
