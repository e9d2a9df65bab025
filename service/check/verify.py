"""The independent checker: is this answer an optimal solution of this problem?

It reads the problem and the answer only, shares no code with the engines or the
certifier, and follows the definitions (README, "The certificate"):

* the allocation is a flow: allowed arcs, within capacity, conserved at nodes, within
  supply at sources, within demand at sinks; unmet, unused and objective as reported;
* the cut proves that no flow leaves less hard demand unmet (max-flow min-cut);
* the potentials prove that no flow with that shortfall costs less: by weak duality
  ``D (pi(S) - pi(T)) - sum_a u_a max(0, -c^pi_a)`` is a lower bound on every flow's cost
  when no unbounded arc has a negative reduced cost, and here it equals the cost.

All arithmetic is exact (:mod:`service.check.exact`): integers on the problem's cost grid,
sums and products that cannot wrap, and reported numbers read exactly (README, "Numbers").
"""

from __future__ import annotations

from typing import Any

import numpy as np
import orjson

from service.check.bottleneck import _threshold
from service.check.checks import _Checks, _result
from service.check.distances import residual_arcs
from service.check.duals import (
    _bounded_below_capacity,
    _bounded_dual_term,
    _cut_differs,
    _unbounded_negative,
    _virtual_arcs,
)
from service.check.exact import (
    _balances,
    _dot,
    _first,
    _fit,
    _grid_value,
    _grid_values,
    _ids_to_index,
    _show,
    _total,
)
from service.check.flows import _allocation, _amounts_differ
from service.check.partition import check_partition
from service.check.prices import PRICE_CHECKS, check_prices
from service.check.reasons import _reasons_differ
from service.check.replan import (
    _changes_differ,
    _extra_cost,
    _pins_breach,
    _replan_duals,
)
from service.network.model import Network

__all__ = ["verify_answer"]


_VIRTUAL = ("super_source", "super_sink", "hard_pool")

#: The checks after the node balances, skipped when those cannot be read.
_AFTER_BALANCES = ["unused", "unmet", "objective", "hard_shortfall", "unmet_demand_policy",
                   "shortfall_cut", "potentials", "dual_feasibility",
                   "complementary_slackness", "dual_objective", "unmet_reasons"]


def verify_answer(net: Network, answer: dict[str, Any], *,
                  alternatives: int | None = None,
                  price_work: int | None = None) -> dict[str, Any]:
    """Check ``answer`` (loaded by AnswerSchema) against ``net``; ``{"valid", "checks"}``.

    ``price_work``: the most work checking override prices may take (TooLarge beyond it);
    None for no limit (the service's own answers, already held to MAX_PRICES_WORK).

    ``alternatives``: how many next-best plans the problem asked for; they and their
    partition are checked whenever the problem asks for them or the answer has them.
    """
    checks = _Checks()
    _check_optimum(net, answer, checks, price_work)
    if alternatives is not None or "alternatives" in answer or "partition" in answer:
        check_partition(net, answer, checks, alternatives,
                        lambda doc: verify_answer(net, doc))
    return _result(checks)


def _check_optimum(net: Network, answer: dict[str, Any], checks: _Checks,
                   price_work: int | None = None) -> None:
    ids = net.ids
    index = dict(zip(ids, range(len(ids)), strict=True))
    scale = net.cost_scale
    cert = answer["certificate"]
    checks.add("sense", None if cert["negated"] == net.maximize else
               f"negated is {cert['negated']} but the objective is "
               f"{'max' if net.maximize else 'min'}",
               "certificate is for the min form" + (" with costs negated" if net.maximize
                                                    else ""))

    if "data" in answer:
        checks.add("data", _data_differs(net, answer["data"]),
                   "data as the problem carries it")
    used = _allocation(net, answer["allocation"], index, checks)
    if used is None:
        checks.skip(["capacity", "conservation", "supply", "demand", *_AFTER_BALANCES],
                    "the allocation does not name allowed arcs")
        return
    arc, x = used
    tail, head = net.endpoints(arc)
    cost = net.arc_cost(arc)

    # -- primal feasibility -------------------------------------------------------------
    cap, bounded = net.arc_bound(arc)
    over = _first(bounded & (x > cap))
    checks.add("capacity", None if over is None else
               f"arc {ids[tail[over]]} -> {ids[head[over]]} carries {x[over]} "
               f"over its capacity {cap[over]}", "every arc within its capacity")
    flagged = answer["allocation"].present.get("fixed")
    if net.pins is not None or (flagged is not None and flagged.any()):
        checks.add("fixed", _pins_breach(net, arc, x, answer["allocation"]),
                   "every pinned arc carries exactly its pin")
    net_out = _fit(_balances(net.n_user, tail, head, x))
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
    if net_out.dtype == object:
        # a balance beyond 2**60: one of the three checks above has failed
        checks.skip(_AFTER_BALANCES, "node balances beyond 64-bit range")
        return
    unused = net.supply - sent
    unmet = net.demand - received
    checks.add("unused", _amounts_differ(answer["unused"], unused, ids, index, 0,
                                         net.n_sources, "source"),
               "unused supply as reported")
    checks.add("unmet", _amounts_differ(answer["unmet"], unmet, ids, index, off,
                                        net.n_sinks, "sink", hard=~net.soft),
               "unmet demand as reported")
    if "flow_value" in answer:
        routed = _total(sent)
        checks.add("flow_value", None if answer["flow_value"] == routed else
                   f"flow_value is {answer['flow_value']}, the allocation routes {routed}",
                   "flow_value as routed")
    primal = _dot(cost, x) + _dot(net.penalty[net.soft], unmet[net.soft])
    if net.replans:
        primal += _extra_cost(net, arc, x, sent)
    if net.keep is not None or answer.get("changes") is not None:
        checks.add("changes", _changes_differ(net, answer.get("changes"), arc, x,
                                              lambda v: _grid_value(v, scale)),
                   "kept, moved and their penalty as recomputed")
    sign = net.sign
    checks.add("objective",
               None if _grid_value(answer["objective"], scale) == sign * primal else
               f"objective is {answer['objective']}, recomputed {_show(sign * primal, scale)}",
               f"objective recomputed: {_show(sign * primal, scale)}")

    # -- least hard shortfall: the cut --------------------------------------------------
    shortfall = cert["hard_shortfall"]
    hard_unmet = _total(unmet[~net.soft])
    checks.add("hard_shortfall", None if hard_unmet == shortfall else
               f"hard demand left unmet is {hard_unmet}, the certificate says {shortfall}",
               f"{shortfall} units of hard demand unmet")
    checks.add("unmet_demand_policy", _policy_breach(net, hard_unmet, shortfall),
               "/unmet_demand is reject: no hard demand unmet" if net.reject_unmet else
               "/unmet_demand is minimize: hard demand may be left unmet")
    checks.add("shortfall_cut", _cut_differs(net, cert["cut"], index, shortfall),
               f"no flow can leave less than {shortfall} units of hard demand unmet")
    # the cost stage of a bottleneck answer optimises over the pairs at or below its
    # threshold: its potentials are checked there
    within = _threshold(net, cert, arc, x, index, checks)

    # -- least cost: the potentials -----------------------------------------------------
    pi, wrong = _potentials(net, cert, index)
    if pi is None:
        checks.add("potentials", wrong, "")
        checks.skip(["dual_feasibility", "complementary_slackness", "dual_objective",
                     "unmet_reasons"], "potentials incomplete")
        return
    checks.add("potentials", None, "one potential per source, sink and node")
    S, T, P = net.n_user, net.n_user + 1, net.n_user + 2

    # Virtual arcs, then user arcs: every arc is checked, whatever its representation.
    v_tail, v_head, v_cost, v_cap, v_x = _virtual_arcs(net, unmet, sent, shortfall, S, T, P)
    if net.load is not None:
        v_cap[: net.n_sources] = 0       # the load tiers stand for the supply arcs
        v_x[: net.n_sources] = 0
    v_reduced = v_cost - pi[v_tail] + pi[v_head]
    u_reduced = cost - pi[tail] + pi[head]
    if net.replans:
        extra_term, extra_slack, free_name = _replan_duals(within, pi, arc, x, sent, S)
        bad_dual_arc = None if free_name is None else (free_name, 0)
    else:
        bad_dual_arc = _unbounded_negative(within, pi)
    checks.add("dual_feasibility", None if bad_dual_arc is None else
               f"unbounded arc {bad_dual_arc[0]} has negative reduced cost" +
               ("" if net.replans else f" {_show(bad_dual_arc[1], scale)}"),
               "no unbounded arc has a negative reduced cost")
    bad_v = _first(((v_reduced > 0) & (v_x > 0)) | ((v_reduced < 0) & (v_x < v_cap)))
    # a row of flow 0 says nothing: only arcs that carry flow need a reduced cost <= 0
    bad_u = None if net.replans else _first((u_reduced > 0) & (x > 0))
    saturated = None if net.replans else _bounded_below_capacity(within, pi, arc, x)
    slack: str | None = None
    if bad_v is not None:
        labels = list(ids) + list(_VIRTUAL)
        slack = (f"arc {labels[v_tail[bad_v]]} -> {labels[v_head[bad_v]]} has reduced cost "
                 f"{_show(int(v_reduced[bad_v]), scale)} and flow {v_x[bad_v]} of capacity "
                 f"{v_cap[bad_v]}")
    elif bad_u is not None:
        slack = (f"arc {ids[tail[bad_u]]} -> {ids[head[bad_u]]} has reduced cost "
                 f"{_show(int(u_reduced[bad_u]), scale)} and flow {x[bad_u]}")
    elif saturated is not None:
        slack = f"arc {saturated} has negative reduced cost and is below its capacity"
    elif net.replans:
        slack = extra_slack
    checks.add("complementary_slackness", slack,
               "positive reduced cost: at the lower bound; negative: at capacity"
               if net.replans else "positive reduced cost: no flow; negative: at capacity")
    demand = net.total_demand
    if net.replans:
        keep_constant = 0 if net.keep is None else net.keep.penalty * net.keep.total
        dual = (demand * int(pi[S] - pi[T]) - _dot(v_cap, np.maximum(0, -v_reduced))
                + extra_term + keep_constant)
    else:
        dual = (demand * int(pi[S] - pi[T]) - _dot(v_cap, np.maximum(0, -v_reduced))
                - _bounded_dual_term(within, pi))
    reported_dual = cert["dual_objective"]
    if dual != primal:
        bad_dual = (f"dual objective {_show(sign * dual, scale)} differs from the cost "
                    f"{_show(sign * primal, scale)}")
    elif _grid_value(reported_dual, scale) != sign * dual:
        bad_dual = f"dual_objective is {reported_dual}, recomputed {_show(sign * dual, scale)}"
    else:
        bad_dual = None
    checks.add("dual_objective", bad_dual, "dual objective equals the objective")
    checks.add("unmet_reasons", _reasons_differ(net, answer["unmet"], index, arc, x, unused,
                                                pi, within),
               "each reason given for unmet demand follows the rule")
    if answer.get("prices") is not None:
        _check_prices(checks, net, answer, arc, x, pi,
                      (v_tail, v_head, v_reduced, v_cap, v_x), price_work)


def _check_prices(checks: _Checks, net: Network, answer: dict[str, Any], arc: np.ndarray,
                  x: np.ndarray, pi: np.ndarray, virtual: tuple[np.ndarray, ...],
                  price_work: int | None) -> None:
    """The override prices, once the answer itself is proven optimal."""
    if net.bottleneck:
        checks.add("price_rows", "override prices are not defined for objective "
                   "bottleneck", "")
        checks.skip(PRICE_CHECKS[1:], "no prices for objective bottleneck")
        return
    if not all(c["passed"] for c in checks.items):
        checks.skip(PRICE_CHECKS, "the answer itself is not proven optimal")
        return
    if pi.dtype == object:
        checks.skip(PRICE_CHECKS, "potentials beyond 2**60")
        return
    arcs = net.arcs
    flow = np.zeros(len(arcs), np.int64)
    np.add.at(flow, arc if net.arc_list is not None else np.searchsorted(arcs.id, arc), x)
    reduced = arcs.cost - pi[arcs.tail] + pi[arcs.head]
    pairs = {"tail": arcs.tail, "head": arcs.head, "id": arcs.id, "flow": flow,
             "reduced": reduced, "room": ~arcs.bounded | (flow < arcs.capacity),
             "from": [net.ids[i] for i in arcs.tail.tolist()],
             "to": [net.ids[i] for i in arcs.head.tolist()]}
    g = residual_arcs(net.n_user + 3, (arcs.tail, arcs.head, arcs.id, reduced,
                                       arcs.capacity, arcs.bounded, flow), virtual)
    check_prices(checks, g, pairs, answer["prices"], answer["certificate"].get("prices"),
                 net.cost_scale, price_work)


def _data_differs(net: Network, data: dict[str, Any]) -> str | None:
    """What differs between an answer's ``data`` and the problem's, or None: the same ids,
    each with the same object (compared as sorted compact JSON, so 1 and 1.0 differ)."""
    if list(data) != list(net.data):
        extra = [k for k in data if k not in net.data]
        lost = [k for k in net.data if k not in data]
        if extra:
            return f"data for {extra[0]!r}, which carries none in the problem"
        if lost:
            return f"data for {lost[0]!r} is missing"
        return "data lists the ids out of order (sources, nodes, sinks, as in the problem)"
    for key, value in data.items():
        if _json(value) != _json(net.data[key]):
            return f"data for {key!r} differs from the problem's"
    return None


def _json(value: Any) -> bytes | None:
    try:
        return orjson.dumps(value, option=orjson.OPT_SORT_KEYS)
    except (TypeError, orjson.JSONEncodeError):
        return None


def _policy_breach(net: Network, hard_unmet: int, shortfall: int) -> str | None:
    """Under ``unmet_demand: "reject"`` an answer leaving hard demand unmet answers another
    problem (the one that allows it): what is wrong, or None."""
    if not net.reject_unmet or (hard_unmet == 0 and shortfall == 0):
        return None
    if hard_unmet > 0:
        return f"/unmet_demand is reject but {hard_unmet} units of hard demand are unmet"
    return f"/unmet_demand is reject but the certificate reports a hard shortfall of {shortfall}"


def _potentials(net: Network, cert: dict[str, Any], index: dict[str, int]
                ) -> tuple[np.ndarray | None, str | None]:
    """(potential of every user node, then S, T, P, on the grid; None) or (None, what is
    wrong). One pass over the ids: a mask of the ids covered, not a search per id."""
    keys, values = cert["potentials"]
    where = _ids_to_index(keys, index)
    covered = np.zeros(net.n_user, bool)
    covered[where[where >= 0]] = True
    missing = np.flatnonzero(~covered)
    if len(missing):
        names = ", ".join(net.ids[i] for i in missing[:5].tolist())
        more = f" and {len(missing) - 5} more" if len(missing) > 5 else ""
        return None, f"potentials missing for {names}{more}"
    unknown = _first(where < 0)
    if unknown is not None:
        return None, f"potential for unknown id {keys[unknown]!r}"
    vp = cert["virtual_potentials"]
    reported = np.append(values, [vp[name] for name in _VIRTUAL])
    grid, not_whole = _grid_values(reported, net.cost_scale)
    bad = _first(not_whole)
    if bad is not None:
        name = keys[bad] if bad < len(keys) else _VIRTUAL[bad - len(keys)]
        return None, (f"potential of {name} is {reported[bad]}: every cost of the problem is "
                      "whole, so every potential must be a whole number")
    if grid.dtype == object:
        # Python ints: a potential beyond 2**60 grid units. Reduced costs and the dual
        # objective do not change when every potential moves together, so measure them
        # from the super-sink's; int64 again unless they really spread that far.
        grid = _fit(grid - grid[-2])
    pi = np.zeros(net.n_user + 3, grid.dtype)
    pi[where] = grid[: len(keys)]
    pi[net.n_user:] = grid[len(keys):]
    return pi, None
