"""Certified k-best: are the alternatives the next-best plans, proved by their partition?

From the problem and the answer only (README, "Ranked alternatives"):

* each alternative is a plan (the checks of the optimum's allocation, unmet and unused),
  lies in its cell, and its potentials prove it the best plan of that cell;
* every cell is derived from its parent plan's branch pairs: the cells are disjoint by
  construction (two children of one plan differ on a branch pair), so the plans are
  distinct; the costs never decrease down the list;
* the cells cover every plan: each split plan is the only plan left when its branch pairs
  keep their flows (:func:`~service.check.cells.only_plan_left`), and every non-empty child
  is either an alternative's cell or in the frontier;
* every frontier cell is proved to hold nothing cheaper than the last alternative (a
  lower bound from potentials, recomputed) or nothing at all (Hoffman's condition), and
  every plan left unsplit costs as much as the last alternative. With fewer alternatives
  than requested, every plan is split and every frontier cell is empty: no plan is left.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from service.check import cells, frontier
from service.check.checks import _Checks
from service.check.exact import _first, _grid_value, _grid_values, _ids_to_index, _show
from service.check.flows import _allocation
from service.network.model import Network

__all__ = ["check_partition"]

_VIRTUAL = ("super_source", "super_sink", "hard_pool")
#: The checks of the optimum an alternative's plan must pass as well.
_PLAN_CHECKS = ("sense", "allocation_arcs", "allocation_costs", "capacity", "conservation",
                "supply", "demand", "unused", "unmet", "objective", "hard_shortfall",
                "unmet_demand_policy", "shortfall_cut", "potentials")
NAMES = ("alternatives_requested", "alternatives_plans", "alternatives_cells",
         "alternatives_optimal_in_cells", "alternatives_order", "partition_cover",
         "partition_bounds")


class _Refused(Exception):
    """One check failed: its name and what is wrong."""

    def __init__(self, name: str, detail: str) -> None:
        super().__init__(detail)
        self.name, self.detail = name, detail


def check_partition(net: Network, answer: dict[str, Any], checks: _Checks,
                    requested: int | None, verify: Any) -> None:
    """Add the checks of ``answer``'s alternatives and partition to ``checks``.

    ``requested``: how many alternatives the problem asked for (None when it does not
    say); ``verify``: the checker of one answer (verify_answer), run on each alternative.
    """
    try:
        _check(net, answer, requested, verify, checks)
    except _Refused as e:
        checks.add(e.name, e.detail, "")
        done = {c["name"] for c in checks.items}
        checks.skip([n for n in NAMES if n not in done], f"{e.name} failed")


def _check(net: Network, answer: dict[str, Any], requested: int | None, verify: Any,
           checks: _Checks) -> None:
    alts, part = answer.get("alternatives"), answer.get("partition")
    if alts is None or part is None:
        raise _Refused("alternatives_requested", "the answer needs both alternatives and "
                       "partition" if alts is not None or part is not None else
                       f"the problem asks for {requested} alternatives; the answer has none")
    k = part["requested"]
    if requested is not None and k != requested:
        raise _Refused("alternatives_requested", f"partition.requested is {k}, the problem "
                       f"asks for {requested}")
    if len(alts) > k or k < 1:
        raise _Refused("alternatives_requested", f"{len(alts)} alternatives for "
                       f"{k} requested")
    if not all(c["passed"] for c in checks.items):
        raise _Refused("alternatives_requested", "the optimum is not proved, so nothing "
                       "ranked after it is")
    checks.add("alternatives_requested", None, f"{len(alts)} of {k} requested")

    cert = answer["certificate"]
    shortfall = cert["hard_shortfall"]
    tab = cells.table(net, shortfall)
    index = dict(zip(net.ids, range(net.n_user), strict=True))
    flows, pis = [], []
    for j, doc in enumerate([answer, *alts]):
        flow, pi = _plan(net, tab, doc, cert, verify, j)
        flows.append(flow)
        pis.append(pi)
    checks.add("alternatives_plans", None,
               "every alternative is a plan serving the same hard demand")

    costs = [cells.cost_of(tab, f) for f in flows]
    branches = [None if b is None else _branch(net, b, index, f"partition/branches/{j}")
                for j, b in enumerate(part["branches"])]
    if len(branches) != len(flows):
        raise _Refused("alternatives_cells", f"partition.branches has {len(branches)} "
                       f"entries for {len(flows)} plans (the optimum first)")
    lo = [np.zeros(len(tab.cap), np.int64)]
    hi = [tab.cap.copy()]
    claimed: dict[tuple[int, int, str], str] = {}
    for j, alt in enumerate(alts, start=1):
        c = alt["cell"]
        key = (c["parent"], c["branch"], c["side"])
        if not c["parent"] < j or branches[c["parent"]] is None:
            raise _Refused("alternatives_cells", f"alternative {j}: its parent plan "
                           f"{c['parent']} is not an earlier plan that was split")
        if key in claimed:
            raise _Refused("alternatives_cells", f"alternative {j}: the cell {key} is "
                           f"already {claimed[key]}")
        claimed[key] = f"the cell of alternative {j}"
        l_j, h_j = _child(lo, hi, flows, branches, key, f"alternative {j}")
        _same_bounds(net, tab, alt["cell"]["bounds"], l_j, h_j, index, j)
        if bool(np.any((flows[j] < l_j) | (flows[j] > h_j))):
            raise _Refused("alternatives_cells", f"alternative {j} lies outside its cell")
        lo.append(l_j)
        hi.append(h_j)
    checks.add("alternatives_cells", None, "every cell derived from its parent; cells disjoint; "
           "every alternative inside its cell")

    scale, sign = net.cost_scale, net.sign
    for j in range(1, len(flows)):
        d = cells.dual(tab, pis[j], lo[j], hi[j])
        reported = _grid_value(alts[j - 1]["certificate"]["dual_objective"], scale)
        if d is None or d != costs[j]:
            raise _Refused("alternatives_optimal_in_cells", f"alternative {j}: the dual "
                           "objective of its potentials in its cell is " +
                           ("unbounded below" if d is None else _show(sign * d, scale)) +
                           f", its cost {_show(sign * costs[j], scale)}")
        if reported != sign * d:
            raise _Refused("alternatives_optimal_in_cells", f"alternative {j}: "
                           "dual_objective differs from the recomputed one")
    checks.add("alternatives_optimal_in_cells", None, "each alternative's potentials prove it the "
           "best plan of its cell")

    worse = next((j for j in range(1, len(costs)) if costs[j] < costs[j - 1]), None)
    if worse is not None:
        raise _Refused("alternatives_order", f"alternative {worse} is better than the plan "
                       "before it")
    checks.add("alternatives_order", None, "best first, as the optimum is ranked")

    last = costs[-1] if len(alts) == k else None
    for j, branch in enumerate(branches):
        if branch is None:
            if last is None or costs[j] < last:
                raise _Refused("partition_cover", f"plan {j} is not split, yet plans of "
                               "its cell may rank before the last alternative")
            continue
        l_f, h_f = lo[j].copy(), hi[j].copy()
        l_f[branch] = h_f[branch] = flows[j][branch]
        if not cells.only_plan_left(tab, flows[j], l_f, h_f):
            raise _Refused("partition_cover", f"plan {j}: other plans keep every branch "
                           "pair's flow, and no cell holds them")
    frontier = part["frontier"]
    for f in frontier:
        key = (f["parent"], f["branch"], f["side"])
        if key in claimed:
            raise _Refused("partition_cover", f"the frontier cell {key} is already "
                           f"{claimed[key]}")
        if not f["parent"] < len(flows) or branches[f["parent"]] is None:
            raise _Refused("partition_cover", f"frontier cell {key}: no such split plan")
        claimed[key] = "in the frontier"
    for j, branch in enumerate(branches):
        if branch is None:
            continue
        x = flows[j][branch]
        for side, room in (("below", x - 1 >= lo[j][branch]), ("above", x + 1 <= hi[j][branch])):
            missing = np.flatnonzero(room)
            gone = [i for i in missing.tolist() if (j, i, side) not in claimed]
            if gone:
                raise _Refused("partition_cover", f"cell {(j, gone[0], side)} of plan {j} "
                               "is neither an alternative's cell nor in the frontier")
    checks.add("partition_cover", None, "the cells, with the frontier, cover every plan")

    ranks: list[np.ndarray | None] = []
    for branch in branches:
        rank = None
        if branch is not None:
            rank = np.full(len(tab.cap), -1, np.int64)
            rank[branch] = np.arange(len(branch))
        ranks.append(rank)
    pending: dict[int, list[tuple]] = {}
    for f in frontier:
        item = _frontier_holds(net, tab, f, flows, lo, hi, branches, ranks, last, index)
        if item is not None:
            pending.setdefault(f["parent"], []).append(item)
    for q, items in pending.items():
        _bounds_hold(net, tab, q, items, flows, pis, lo, hi, branches, ranks, costs, last)
    checks.add("partition_bounds", None, "no frontier cell holds a plan ranking before the last "
           "alternative" if last is not None else "every frontier cell is empty: no plan "
           "is left")


def _plan(net: Network, tab: cells.Table, doc: dict[str, Any], cert: dict[str, Any],
          verify: Any, j: int) -> tuple[np.ndarray, np.ndarray]:
    """Flow on every arc of the table, and potentials, of plan ``j`` (0: the optimum)."""
    from service.check.verify import _potentials  # verify imports this module

    index = dict(zip(net.ids, range(net.n_user), strict=True))
    own = doc["certificate"]
    if j:
        whole = {**cert, "potentials": own["potentials"],
                 "virtual_potentials": own["virtual_potentials"],
                 "dual_objective": own["dual_objective"]}
        pseudo = {"objective": doc["objective"], "allocation": doc["allocation"],
                  "unmet": doc["unmet"], "unused": doc["unused"], "certificate": whole}
        result = verify(pseudo)
        bad = [c for c in result["checks"] if c["name"] in _PLAN_CHECKS and not c["passed"]]
        if bad:
            raise _Refused("alternatives_plans", f"alternative {j}: {bad[0]['name']}: "
                           f"{bad[0]['detail']}")
    quiet = _Checks()
    arc, x = _allocation(net, doc["allocation"], index, quiet)  # type: ignore[misc]
    pi, _ = _potentials(net, own, index)
    assert pi is not None
    return cells.plan_flow(net, tab, arc, x, cert["hard_shortfall"]), pi


def _positions(net: Network, pairs: list[dict[str, Any]], index: dict[str, int],
               where: str) -> np.ndarray:
    """Positions in ``net.arcs`` of the pairs named (each at most once)."""
    arcs = net.arcs
    out = np.zeros(len(pairs), np.int64)
    for i, p in enumerate(pairs):
        t, h = index.get(p["from_"], -1), index.get(p["to"], -1)
        if net.arc_list is None:
            col = h - net.sink_offset
            ok = 0 <= t < net.n_sources and 0 <= col < net.n_sinks and "arc" not in p
            ident = t * net.n_sinks + col
            pos = int(np.searchsorted(arcs.id, ident)) if ok else 0
            ok = ok and pos < len(arcs) and int(arcs.id[pos]) == ident
        else:
            pos = p.get("arc", -1)
            ok = 0 <= pos < len(arcs) and (arcs.tail[pos], arcs.head[pos]) == (t, h)
        if not ok:
            raise _Refused("alternatives_cells", f"{where}/{i}: no allowed pair "
                           f"{p['from_']} -> {p['to']}" + ("" if net.arc_list is None else
                                                           " with that arc index"))
        out[i] = pos
    if len(np.unique(out)) != len(out):
        raise _Refused("alternatives_cells", f"{where}: a pair is named twice")
    return out


def _branch(net: Network, rows: Any, index: dict[str, int], where: str) -> np.ndarray:
    """Positions in ``net.arcs`` of a branch list read in bulk (a Table of pairs)."""
    arcs = net.arcs
    tails = _ids_to_index(rows.columns["from"], index)
    heads = _ids_to_index(rows.columns["to"], index)
    given = rows.present["arc"] if "arc" in rows.present else np.zeros(len(rows), bool)
    if net.arc_list is None:
        col = heads - net.sink_offset
        ok = (tails >= 0) & (tails < net.n_sources) & (col >= 0) & (col < net.n_sinks) & ~given
        ident = np.where(ok, tails * net.n_sinks + col, -1)
        pos = np.minimum(np.searchsorted(arcs.id, ident), max(len(arcs) - 1, 0))
        ok &= (arcs.id[pos] == ident) if len(arcs) else False
    else:
        pos = np.where(given, rows.columns["arc"], -1) if len(rows) else np.zeros(0, np.int64)
        inside = (pos >= 0) & (pos < len(arcs))
        safe = np.where(inside, pos, 0)
        ok = given & inside & (arcs.tail[safe] == tails) & (arcs.head[safe] == heads) \
            if len(arcs) else np.zeros(len(rows), bool)
    bad = _first(~ok)
    if bad is not None:
        raise _Refused("alternatives_cells", f"{where}/{bad}: no allowed pair "
                       f"{rows.columns['from'][bad]} -> {rows.columns['to'][bad]}"
                       + ("" if net.arc_list is None else " with that arc index"))
    pos = np.asarray(pos, np.int64)
    if len(np.unique(pos)) != len(pos):
        raise _Refused("alternatives_cells", f"{where}: a pair is named twice")
    return pos


def _child(lo: list[np.ndarray], hi: list[np.ndarray], flows: list[np.ndarray],
           branches: list[np.ndarray | None], key: tuple[int, int, str], who: str
           ) -> tuple[np.ndarray, np.ndarray]:
    """The bounds of child ``key`` = (plan, branch index, side) of a split plan."""
    q, i, side = key
    branch = branches[q]
    assert branch is not None
    if not 0 <= i < len(branch):
        raise _Refused("alternatives_cells", f"{who}: plan {q} has no branch pair {i}")
    l_c, h_c = lo[q].copy(), hi[q].copy()
    prefix, a = branch[:i], int(branch[i])
    l_c[prefix] = h_c[prefix] = flows[q][prefix]
    if side == "below":
        h_c[a] = flows[q][a] - 1
    else:
        l_c[a] = flows[q][a] + 1
    if l_c[a] > h_c[a]:
        raise _Refused("alternatives_cells", f"{who}: the cell {key} allows no flow on "
                       "its branch pair")
    return l_c, h_c


def _same_bounds(net: Network, tab: cells.Table, rows: list[dict[str, Any]],
                 lo: np.ndarray, hi: np.ndarray, index: dict[str, int], j: int) -> None:
    """The bounds an alternative lists are exactly those its cell derives to."""
    m = tab.n_user
    pos = _positions(net, rows, index, f"alternatives/{j - 1}/cell/bounds")
    differ = np.flatnonzero((lo[:m] != 0) | (hi[:m] != tab.cap[:m]))
    listed = {int(p): (r["min"], cells.INF if r["max"] is None else r["max"])
              for p, r in zip(pos.tolist(), rows, strict=True)}
    derived = {int(p): (int(lo[p]), int(hi[p])) for p in differ.tolist()}
    if listed != derived:
        raise _Refused("alternatives_cells", f"alternative {j}: the bounds listed are not "
                       "those of its cell")


def _bounds_at(lo: list[np.ndarray], hi: list[np.ndarray], flows: list[np.ndarray],
               ranks: list[np.ndarray | None], key: tuple[int, int, str], where: np.ndarray
               ) -> tuple[np.ndarray, np.ndarray]:
    """The bounds of child ``key`` on the arcs ``where`` only (see :func:`_child`)."""
    q, i, side = key
    rank = ranks[q]
    assert rank is not None
    l_c, h_c = lo[q][where].copy(), hi[q][where].copy()
    r = rank[where]
    fixed = (r >= 0) & (r < i)
    l_c[fixed] = h_c[fixed] = flows[q][where][fixed]
    here = r == i
    if side == "below":
        h_c[here] = flows[q][where][here] - 1
    else:
        l_c[here] = flows[q][where][here] + 1
    return l_c, h_c


def _frontier_holds(net: Network, tab: cells.Table, f: dict[str, Any],
                    flows: list[np.ndarray], lo: list[np.ndarray], hi: list[np.ndarray],
                    branches: list[np.ndarray | None], ranks: list[np.ndarray | None],
                    last: int | None, index: dict[str, int]) -> tuple | None:
    """Check an empty cell's proof here; read a bound's proof, for :func:`_bounds_hold`:
    (key, nodes, distances, shift, reported bound), all on the grid."""
    key = (f["parent"], f["branch"], f["side"])
    q = f["parent"]
    branch = branches[q]
    assert branch is not None
    if not 0 <= f["branch"] < len(branch):
        raise _Refused("partition_bounds", f"frontier cell {key}: plan {q} has no branch "
                       f"pair {f['branch']}")
    if "empty" in f:
        nodes = _nodes(net, f["empty"]["nodes"], f["empty"]["virtual_nodes"], index, key)
        where = tab.touching(nodes, _mask(tab, nodes))
        l_c, h_c = _bounds_at(lo, hi, flows, ranks, key, where)
        if not cells.holds_no_plan(tab, nodes, where, l_c, h_c):
            raise _Refused("partition_bounds", f"frontier cell {key}: the node set given "
                           "does not prove the cell empty")
        return None
    if last is None:
        raise _Refused("partition_bounds", f"frontier cell {key}: fewer alternatives than "
                       "requested, yet this cell is not proved empty")
    if "shift" not in f or "bound" not in f:
        raise _Refused("partition_bounds", f"frontier cell {key}: neither a bound nor empty")
    scale = net.cost_scale
    keys, values = f.get("distances") or ([], np.zeros(0))
    virtual = f.get("virtual_distances") or {}
    nodes = _nodes(net, list(keys), list(virtual), index, key)
    dist, not_whole = _grid_values(np.append(values, list(virtual.values())), scale)
    shift = _grid_value(f["shift"], scale)
    reported = _grid_value(f["bound"], scale)
    if shift is None or reported is None or bool(not_whole.any()):
        raise _Refused("partition_bounds", f"frontier cell {key}: numbers off the grid")
    return key, nodes, dist, shift, reported


def _bounds_hold(net: Network, tab: cells.Table, q: int, items: list[tuple],
                 flows: list[np.ndarray], pis: list[np.ndarray], lo: list[np.ndarray],
                 hi: list[np.ndarray], branches: list[np.ndarray | None],
                 ranks: list[np.ndarray | None], costs: list[int], last: int | None
                 ) -> None:
    """Every bound of plan q's frontier cells, recomputed (all at once when int64 holds
    the sums, else cell by cell) and compared with the reported one and the last cost."""
    branch, rank = branches[q], ranks[q]
    assert branch is not None and rank is not None and last is not None
    found = None
    dists = [item[2] for item in items]
    if all(d.dtype != object for d in dists):
        sizes = [len(item[1]) for item in items]
        found = frontier.bounds(
            tab, flows[q], pis[q], lo[q], hi[q], rank, branch, costs[q],
            np.array([item[0][1] for item in items], np.int64),
            np.array([item[0][2] == "below" for item in items]),
            np.array([item[3] for item in items], np.int64),
            np.repeat(np.arange(len(items)), sizes),
            np.concatenate([item[1] for item in items]).astype(np.int64),
            np.concatenate(dists).astype(np.int64))
    for c, (key, nodes, dist, shift, reported) in enumerate(items):
        if found is not None:
            bound: int | None = None if found[1][c] else int(found[0][c])
        else:
            bound = _slow_bound(tab, key, nodes, dist, shift, flows, pis, lo, hi, branches,
                                ranks, costs)
        if bound is None:
            raise _Refused("partition_bounds", f"frontier cell {key}: an unbounded arc gets "
                           "a negative reduced cost")
        scale = net.cost_scale
        if reported != net.sign * bound:
            raise _Refused("partition_bounds", f"frontier cell {key}: bound is "
                           f"{_show(reported, scale)}, recomputed "
                           f"{_show(net.sign * bound, scale)}")
        if bound < last:
            raise _Refused("partition_bounds", f"frontier cell {key}: its bound "
                           f"{_show(net.sign * bound, scale)} ranks before the last "
                           "alternative")


def _slow_bound(tab: cells.Table, key: tuple[int, int, str], nodes: np.ndarray,
                dist: np.ndarray, shift: int, flows: list[np.ndarray], pis: list[np.ndarray],
                lo: list[np.ndarray], hi: list[np.ndarray], branches: list[np.ndarray | None],
                ranks: list[np.ndarray | None], costs: list[int]) -> int | None:
    """One cell's bound in exact arithmetic, whatever the size of its numbers."""
    q = key[0]
    branch = branches[q]
    assert branch is not None
    base = pis[q]
    kind = object if base.dtype == object or dist.dtype == object else np.int64
    pi = base.astype(kind) - shift       # answer numbers stay below 2**53: no wrap in int64
    pi[nodes] = base[nodes].astype(kind) - dist.astype(kind)
    inside = _mask(tab, nodes)
    a = int(branch[key[1]])
    where = tab.touching(nodes, inside)
    if not (inside[tab.tail[a]] or inside[tab.head[a]]):
        where = np.append(where, a)
    l_c, h_c = _bounds_at(lo, hi, flows, ranks, key, where)
    g = cells.gaps(tab, pi, flows[q], l_c, h_c, where)
    return None if g is None else costs[q] - g


def _mask(tab: cells.Table, nodes: np.ndarray) -> np.ndarray:
    inside = np.zeros(tab.n_nodes, bool)
    inside[nodes] = True
    return inside


def _nodes(net: Network, ids: list[str], virtual: list[str], index: dict[str, int],
           key: tuple) -> np.ndarray:
    try:
        found = [index[i] for i in ids] + [net.n_user + _VIRTUAL.index(v) for v in virtual]
    except (KeyError, ValueError):
        raise _Refused("partition_bounds", f"frontier cell {key}: unknown node") from None
    if len(set(found)) != len(found):
        raise _Refused("partition_bounds", f"frontier cell {key}: a node is named twice")
    return np.asarray(found, np.int64)
