"""The independent checker: is this answer an optimal solution of this problem?

It reads the problem and the answer only, shares no code with the engines or the
certifier, and follows the definitions (README, "The certificate"):

* the allocation is a flow: allowed arcs, within capacity, conserved at nodes, within
  supply at sources, within demand at sinks; unmet, unused and objective as reported;
* the cut proves that no flow leaves less hard demand unmet (max-flow min-cut);
* the potentials prove that no flow with that shortfall costs less: by weak duality
  ``D (pi(S) - pi(T)) - sum_a u_a max(0, -c^pi_a)`` is a lower bound on every flow's cost
  when no unbounded arc has a negative reduced cost, and here it equals the cost.

All arithmetic is exact on integers (costs scaled as in the network model); a reported
fractional value is compared after scaling with the relative tolerance FLOAT_TOLERANCE.
"""

from __future__ import annotations

from itertools import repeat
from typing import Any

import numpy as np

from service.network import FORBIDDEN, Network

__all__ = ["FLOAT_TOLERANCE", "verify_answer"]

#: Relative tolerance for reported fractional values (objective, dual objective, row cost)
#: against their exact recomputation.
FLOAT_TOLERANCE = 1e-9

_VIRTUAL = ("super_source", "super_sink", "hard_pool")
_INT64_SAFE = 2.0**62
#: Rows of a cost matrix checked at once: bounds the temporary to this x columns.
_CHUNK_ROWS = 256


class _Checks:
    def __init__(self) -> None:
        self.items: list[dict[str, Any]] = []

    def add(self, name: str, bad: str | None, ok_detail: str) -> bool:
        self.items.append({"name": name, "passed": bad is None,
                           "detail": ok_detail if bad is None else bad})
        return bad is None

    def skip(self, names: list[str], why: str) -> None:
        for name in names:
            self.add(name, f"not checked: {why}", "")


def _close(reported: Any, exact_scaled: Any, scale: int) -> np.ndarray:
    """Reported values against their exact recomputations (in grid units), elementwise.

    Whole-number data: equal, up to the representation of the number as a float.
    Fractional data: within FLOAT_TOLERANCE relative. Scalars give a 0-d mask.
    """
    scaled = np.asarray(reported, np.float64) * scale
    exact = np.asarray(exact_scaled, np.float64)
    gap = np.abs(scaled - exact) - 8 * np.spacing(np.abs(scaled))
    if scale == 1:
        return gap <= 0
    return gap <= FLOAT_TOLERANCE * np.abs(exact) + 1e-3


def _dot(a: np.ndarray, b: np.ndarray) -> int:
    """Exact sum of products of two integer arrays, whatever their size."""
    bound = float(np.abs(a).astype(np.float64) @ np.abs(b).astype(np.float64)) if len(a) else 0
    if bound < _INT64_SAFE:
        return int(np.asarray(a, np.int64) @ np.asarray(b, np.int64))
    return int(np.asarray(a, object) @ np.asarray(b, object))


def _to_grid(values: np.ndarray, scale: int) -> np.ndarray | None:
    """Reported potentials as integers of the cost grid; None when off the grid or too big.

    Off the grid: farther than 1e-3 of a grid unit from it, beyond float representation
    error (8 units in the last place).
    """
    scaled = np.asarray(values, np.float64) * scale
    grid = np.rint(scaled)
    if len(grid) and (np.abs(grid).max() >= _INT64_SAFE / 4 or (
            np.abs(scaled - grid) - 8 * np.spacing(np.abs(scaled))).max() > 1e-3):
        return None
    return grid.astype(np.int64)


def _ids_to_index(names: list[str], index: dict[str, int]) -> np.ndarray:
    return np.fromiter(map(index.get, names, repeat(-1)), np.int64, count=len(names))


def _first(mask: np.ndarray) -> int | None:
    """Index of the first True, or None."""
    if len(mask) == 0:
        return None
    i = int(mask.argmax())
    return i if mask[i] else None


def _has_repeats(values: np.ndarray) -> bool:
    """Whether some value occurs twice.

    By sorting: np.unique (numpy 2.4, hash-based) took 0.66 s on a million ids where the
    sort takes 5 ms, and is no faster on ten.
    """
    ordered = np.sort(values)
    return bool((ordered[1:] == ordered[:-1]).any())


def verify_answer(net: Network, answer: dict[str, Any]) -> dict[str, Any]:
    """Check ``answer`` (loaded by AnswerSchema) against ``net``; ``{"valid", "checks"}``."""
    checks = _Checks()
    ids = net.ids
    index = dict(zip(ids, range(len(ids)), strict=True))
    scale = net.cost_scale
    cert = answer["certificate"]
    checks.add("sense", None if cert["negated"] == net.maximize else
               f"negated is {cert['negated']} but the objective is "
               f"{'max' if net.maximize else 'min'}",
               "certificate is for the min form" + (" with costs negated" if net.maximize
                                                    else ""))

    used = _allocation(net, answer["allocation"], index, checks)
    if used is None:
        checks.skip(["capacity", "conservation", "supply", "demand", "unused", "unmet",
                     "objective", "hard_shortfall", "shortfall_cut", "potentials",
                     "dual_feasibility", "complementary_slackness", "dual_objective"],
                    "the allocation does not name allowed arcs")
        return _result(checks)
    arc, x = used
    tail, head = net.endpoints(arc)
    cost = net.arc_cost(arc)

    # -- primal feasibility -------------------------------------------------------------
    cap, bounded = net.arc_bound(arc)
    over = _first(bounded & (x > cap))
    checks.add("capacity", None if over is None else
               f"arc {ids[tail[over]]} -> {ids[head[over]]} carries {x[over]} "
               f"over its capacity {cap[over]}", "every arc within its capacity")
    net_out = np.zeros(net.n_user, np.int64)
    np.add.at(net_out, tail, x)
    np.subtract.at(net_out, head, x)
    off = net.sink_offset
    sent = net_out[: net.n_sources]
    through = net_out[net.n_sources: off]
    received = -net_out[off:]
    leak = _first(through != 0)
    checks.add("conservation", None if leak is None else
               f"node {ids[net.n_sources + leak]} has net outflow {through[leak]}",
               "what enters each node leaves it")
    bad = _first((sent < 0) | (sent > net.supply))
    checks.add("supply", None if bad is None else
               f"source {ids[bad]} sends {sent[bad]}, allowed 0 to {net.supply[bad]}",
               "each source sends between 0 and its supply")
    bad = _first((received < 0) | (received > net.demand))
    checks.add("demand", None if bad is None else
               f"sink {ids[off + bad]} receives {received[bad]}, allowed 0 to "
               f"{net.demand[bad]}", "each sink receives between 0 and its demand")
    unused = net.supply - sent
    unmet = net.demand - received
    checks.add("unused", _amounts_differ(answer["unused"], unused, ids, index, 0,
                                         net.n_sources, "source"),
               "unused supply as reported")
    checks.add("unmet", _amounts_differ(answer["unmet"], unmet, ids, index, off,
                                        net.n_sinks, "sink"),
               "unmet demand as reported")
    if "flow_value" in answer:
        routed = int(sent.sum())
        checks.add("flow_value", None if answer["flow_value"] == routed else
                   f"flow_value is {answer['flow_value']}, the allocation routes {routed}",
                   "flow_value as routed")
    primal = _dot(cost, x) + _dot(net.penalty[net.soft], unmet[net.soft])
    sign = net.sign
    checks.add("objective", None if bool(_close(answer["objective"], sign * primal, scale)) else
               f"objective is {answer['objective']}, recomputed {sign * primal / scale:g}",
               f"objective recomputed: {sign * primal / scale:g}")

    # -- least hard shortfall: the cut --------------------------------------------------
    shortfall = cert["hard_shortfall"]
    hard_unmet = int(unmet[~net.soft].sum())
    checks.add("hard_shortfall", None if hard_unmet == shortfall else
               f"hard demand left unmet is {hard_unmet}, the certificate says {shortfall}",
               f"{shortfall} units of hard demand unmet")
    checks.add("shortfall_cut", _cut_differs(net, cert["cut"], index, shortfall),
               f"no flow can leave less than {shortfall} units of hard demand unmet")

    # -- least cost: the potentials -----------------------------------------------------
    keys, values = cert["potentials"]
    where = _ids_to_index(keys, index)
    vp = cert["virtual_potentials"]
    grid = _to_grid(np.append(values, [vp[name] for name in _VIRTUAL]), scale)
    missing = [i for i in ids if i not in set(keys)] if len(set(keys)) != len(ids) else []
    if (where < 0).any() or missing or grid is None:
        checks.add("potentials", f"potentials missing for {missing[:5]}" if missing else
                   f"potential for unknown id {keys[_first(where < 0) or 0]!r}"
                   if (where < 0).any() else
                   f"potentials must be multiples of {1 / scale:g} within 64-bit range", "")
        checks.skip(["dual_feasibility", "complementary_slackness", "dual_objective"],
                    "potentials incomplete")
        return _result(checks)
    checks.add("potentials", None, "one potential per source, sink and node")
    S, T, P = net.n_user, net.n_user + 1, net.n_user + 2
    pi = np.zeros(net.n_user + 3, np.int64)
    pi[where] = grid[: len(keys)]
    pi[[S, T, P]] = grid[len(keys):]

    # Virtual arcs, then user arcs: every arc is checked, whatever its representation.
    v_tail, v_head, v_cost, v_cap, v_x = _virtual_arcs(net, unmet, sent, shortfall, S, T, P)
    v_reduced = v_cost - pi[v_tail] + pi[v_head]
    u_reduced = cost - pi[tail] + pi[head]
    bad_dual_arc = _unbounded_negative(net, pi)
    checks.add("dual_feasibility", None if bad_dual_arc is None else
               f"unbounded arc {bad_dual_arc[0]} has negative reduced cost "
               f"{bad_dual_arc[1] / scale:g}", "no unbounded arc has a negative reduced cost")
    bad_v = _first(((v_reduced > 0) & (v_x > 0)) | ((v_reduced < 0) & (v_x < v_cap)))
    bad_u = _first(u_reduced > 0)
    saturated = _bounded_below_capacity(net, pi, arc, x)
    if bad_v is not None:
        labels = list(ids) + list(_VIRTUAL)
        slack = (f"arc {labels[v_tail[bad_v]]} -> {labels[v_head[bad_v]]} has reduced cost "
                 f"{v_reduced[bad_v] / scale:g} and flow {v_x[bad_v]} of capacity "
                 f"{v_cap[bad_v]}")
    elif bad_u is not None:
        slack = (f"arc {ids[tail[bad_u]]} -> {ids[head[bad_u]]} has reduced cost "
                 f"{u_reduced[bad_u] / scale:g} and flow {x[bad_u]}")
    elif saturated is not None:
        slack = f"arc {saturated} has negative reduced cost and is below its capacity"
    else:
        slack = None
    checks.add("complementary_slackness", slack,
               "positive reduced cost: no flow; negative: at capacity")
    demand = net.total_demand
    dual = (demand * int(pi[S] - pi[T]) - _dot(v_cap, np.maximum(0, -v_reduced))
            - _bounded_dual_term(net, pi))
    reported_dual = cert["dual_objective"]
    if dual != primal:
        bad_dual = f"dual objective {sign * dual / scale:g} differs from the cost " \
                   f"{sign * primal / scale:g}"
    elif not bool(_close(reported_dual, sign * dual, scale)):
        bad_dual = f"dual_objective is {reported_dual}, recomputed {sign * dual / scale:g}"
    else:
        bad_dual = None
    checks.add("dual_objective", bad_dual, "dual objective equals the objective")
    return _result(checks)


def _unbounded_negative(net: Network, pi: np.ndarray) -> tuple[str, int] | None:
    """The first unbounded user arc with a negative reduced cost, as (name, reduced cost)."""
    if net.dense is not None:
        n_rows, n_cols = net.dense.shape
        col_pi = pi[net.sink_offset: net.sink_offset + n_cols]
        for start in range(0, n_rows, _CHUNK_ROWS):
            block = net.dense[start: start + _CHUNK_ROWS]
            # forbidden cells are 2**62: they stay far positive, no mask needed
            reduced = block - pi[start: start + len(block)][:, None] + col_pi[None, :]
            hit = _first((reduced < 0).reshape(-1))
            if hit is not None:
                r, c = divmod(hit, n_cols)
                return (f"{net.ids[start + r]} -> {net.ids[net.sink_offset + c]}",
                        int(reduced[r, c]))
        return None
    arcs = net.arcs
    free = ~arcs.bounded
    reduced = arcs.cost[free] - pi[arcs.tail[free]] + pi[arcs.head[free]]
    hit = _first(reduced < 0)
    if hit is None:
        return None
    t, h = arcs.tail[free][hit], arcs.head[free][hit]
    return f"{net.ids[t]} -> {net.ids[h]}", int(reduced[hit])


def _bounded_below_capacity(net: Network, pi: np.ndarray, arc: np.ndarray,
                            x: np.ndarray) -> str | None:
    """A bounded user arc with negative reduced cost and flow below capacity, named."""
    if net.arc_list is None:
        return None
    arcs = net.arc_list
    flow = np.zeros(len(arcs), np.int64)
    flow[arc] = x
    reduced = arcs.cost - pi[arcs.tail] + pi[arcs.head]
    hit = _first(arcs.bounded & (reduced < 0) & (flow < arcs.capacity))
    if hit is None:
        return None
    return f"{net.ids[arcs.tail[hit]]} -> {net.ids[arcs.head[hit]]}"


def _bounded_dual_term(net: Network, pi: np.ndarray) -> int:
    """Sum over bounded user arcs of capacity x max(0, -reduced cost)."""
    if net.arc_list is None:
        return 0
    arcs = net.arc_list
    b = arcs.bounded
    reduced = arcs.cost[b] - pi[arcs.tail[b]] + pi[arcs.head[b]]
    return _dot(arcs.capacity[b], np.maximum(0, -reduced))


def _result(checks: _Checks) -> dict[str, Any]:
    return {"valid": all(c["passed"] for c in checks.items), "checks": checks.items}


def _allocation(net: Network, rows: Any, index: dict[str, int], checks: _Checks
                ) -> tuple[np.ndarray, np.ndarray] | None:
    """(arc ids, flows) named by the allocation rows, or None (check failed)."""
    n = len(rows)
    tails = _ids_to_index(rows.columns["from"], index)
    heads = _ids_to_index(rows.columns["to"], index)
    unknown = _first((tails < 0) | (heads < 0))
    if unknown is not None:
        checks.add("allocation_arcs", f"allocation row {unknown} names an unknown id", "")
        return None
    arc_given = rows.present["arc"] if "arc" in rows.present else np.zeros(n, bool)
    if net.dense is not None:
        if arc_given.any():
            checks.add("allocation_arcs", "allocation rows carry 'arc' but the problem "
                       "gives a cost matrix", "")
            return None
        col = heads - net.sink_offset
        cell = (tails < net.n_sources) & (col >= 0) & (col < net.n_sinks)
        arc = np.where(cell, tails * net.n_sinks + col, -1)
        missing = _first(~net.arc_exists(arc))
    else:
        arc = np.full(n, -1, np.int64)
        arc[arc_given] = rows.columns["arc"][arc_given]
        exists = net.arc_exists(arc)
        wrong = _first(arc_given & ~exists)
        if wrong is None and arc_given.any():
            given = np.flatnonzero(arc_given)
            t, h = net.endpoints(arc[given])
            mismatch = _first((t != tails[given]) | (h != heads[given]))
            wrong = None if mismatch is None else int(given[mismatch])
        if wrong is not None:
            checks.add("allocation_arcs", f"allocation row {wrong}: arc {arc[wrong]} does "
                       f"not join {rows.columns['from'][wrong]} to {rows.columns['to'][wrong]}",
                       "")
            return None
        missing = None
        lookup = ~arc_given
        if lookup.any():
            arcs = net.arcs
            keys = arcs.tail * net.n_user + arcs.head
            order = np.argsort(keys, kind="stable")
            sorted_keys = keys[order]
            want = tails * net.n_user + heads
            lo = np.searchsorted(sorted_keys, want, "left")
            hi = np.searchsorted(sorted_keys, want, "right")
            missing = _first(lookup & (lo == hi))
            ambiguous = _first(lookup & (hi - lo > 1))
            if missing is None and ambiguous is not None:
                checks.add("allocation_arcs", f"allocation row {ambiguous}: several arcs join "
                           "this pair; give the arc index in 'arc'", "")
                return None
            if missing is None:
                arc[lookup] = order[lo[lookup]]
    if missing is not None:
        checks.add("allocation_arcs", f"allocation row {missing}: no allowed arc "
                   f"{rows.columns['from'][missing]} -> {rows.columns['to'][missing]}", "")
        return None
    if _has_repeats(arc):
        checks.add("allocation_arcs", "an arc appears in more than one allocation row", "")
        return None
    checks.add("allocation_arcs", None, "every row names one allowed arc")
    x = rows.columns["flow"].astype(np.int64)
    if "cost" in rows.present:
        given = rows.present["cost"]
        exact = x * net.arc_cost(arc) * net.sign
        off = _first(given & ~_close(rows.columns["cost"], exact, net.cost_scale))
        checks.add("allocation_costs", None if off is None else
                   f"allocation row {off}: cost {rows.columns['cost'][off]}, flow x "
                   f"arc cost is {exact[off] / net.cost_scale:g}",
                   "row costs are flow x arc cost")
    return arc, x


def _amounts_differ(rows: Any, actual: np.ndarray, ids: list[str], index: dict[str, int],
                    start: int, count: int, kind: str) -> str | None:
    where = _ids_to_index(rows.columns["id"], index) - start
    stray = _first((where < 0) | (where >= count))
    if stray is not None:
        return f"{rows.columns['id'][stray]!r} is not a {kind}"
    if _has_repeats(where):
        return f"a {kind} is listed more than once"
    reported = np.zeros(count, np.int64)
    reported[where] = rows.columns["amount"]          # each at most once: checked above
    bad = _first(reported != actual)
    if bad is None:
        return None
    return f"{kind} {ids[start + bad]}: reported {reported[bad]}, actual {actual[bad]}"


def _cut_differs(net: Network, cut: dict[str, Any], index: dict[str, int],
                 shortfall: int) -> str | None:
    side = np.zeros(net.n_user, bool)
    for id_ in cut["sink_side"]:
        if id_ not in index:
            return f"the cut names unknown id {id_!r}"
        side[index[id_]] = True
    off = net.sink_offset
    hard_in = side[off:] & ~net.soft
    demand = int(net.demand[hard_in].sum())
    capacity = int(net.supply[side[: net.n_sources]].sum())
    if net.dense is not None:
        outside, inside = ~side[: net.n_sources], side[off:]
        if inside.any() and (net.dense[np.ix_(outside, inside)] != FORBIDDEN).any():
            return "an unbounded matrix cell crosses the cut"
    else:
        arcs = net.arcs
        crossing = ~side[arcs.tail] & side[arcs.head]
        open_arc = _first(crossing & ~arcs.bounded)
        if open_arc is not None:
            return (f"unbounded arc {net.ids[arcs.tail[open_arc]]} -> "
                    f"{net.ids[arcs.head[open_arc]]} crosses the cut")
        capacity += int(arcs.capacity[crossing].sum())
    if demand - capacity != shortfall:
        return (f"hard sinks on the sink side need {demand}, arcs into it carry {capacity}: "
                f"that proves {max(0, demand - capacity)} short, not {shortfall}")
    sinks = {net.ids[off + i] for i in np.flatnonzero(hard_in).tolist()}
    if set(cut["sinks"]) != sinks or len(cut["sinks"]) != len(sinks):
        return "the cut's sinks are not the hard sinks on its sink side"
    if (cut["demand"], cut["capacity"]) != (demand, capacity):
        return (f"the cut reports demand {cut['demand']} and capacity {cut['capacity']}, "
                f"recomputed {demand} and {capacity}")
    return None


def _virtual_arcs(net: Network, unmet: np.ndarray, sent: np.ndarray, shortfall: int,
                  S: int, T: int, P: int) -> tuple[np.ndarray, ...]:
    """Virtual arcs of the extended network: (tail, head, min-form cost, capacity, flow).

    Five blocks, in this order: S -> each source (its supply), each sink -> T (its demand),
    S -> each soft sink (its unmet units, at the penalty), S -> P (the hard shortfall), and
    P -> each hard sink (its unmet units). Built column by column: a few array calls in all,
    whatever the size, since on a small problem each call costs more than its data.
    """
    off = net.sink_offset
    soft, hard = np.flatnonzero(net.soft), np.flatnonzero(~net.soft)
    n_src, n_snk, n_soft = net.n_sources, net.n_sinks, len(soft)
    tail = np.concatenate((np.full(n_src, S), np.arange(off, off + n_snk),
                           np.full(n_soft + 1, S), np.full(len(hard), P)))
    head = np.concatenate((np.arange(n_src), np.full(n_snk, T), soft + off, [P], hard + off))
    cost = np.zeros(len(tail), np.int64)
    cost[n_src + n_snk: n_src + n_snk + n_soft] = net.penalty[soft]
    cap = np.concatenate((net.supply, net.demand, net.demand[soft], [shortfall],
                          net.demand[hard]))
    flow = np.concatenate((sent, net.demand, unmet[soft], [unmet[hard].sum()], unmet[hard]))
    return tuple(np.asarray(column, np.int64) for column in (tail, head, cost, cap, flow))
