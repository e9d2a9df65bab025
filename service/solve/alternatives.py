"""The ``alternatives`` and ``partition`` of an answer, from the ranked search.

Each alternative is written as the optimum is (:func:`service.solve.answer.build_answer`):
objective, allocation, unmet, unused, and potentials proving it the best of its cell; the
partition says how the cells came about and proves the cells left unexpanded hold nothing
better than the last alternative (README, "Ranked alternatives").
"""

from __future__ import annotations

from dataclasses import replace
from typing import Any

import numpy as np

from service.network.model import Flow, Network
from service.solve.answer import _value, _values, build_answer
from service.solve.certificate import Certificate
from service.solve.dispatch import Solution
from service.solve.ranked import INF, Frontier, Plan, Ranked

__all__ = ["alternatives_answer"]

_VIRTUAL = ("super_source", "super_sink", "hard_pool")


def alternatives_answer(net: Network, solution: Solution, cert: Certificate, ranked: Ranked,
                        requested: int) -> dict[str, Any]:
    """``{"alternatives": [...], "partition": {...}}`` for the answer document."""
    alternatives = []
    for plan in ranked.plans[1:]:
        alternatives.append(_alternative(net, solution, cert, ranked, plan))
    branches = [None if p.branch is None else _pairs(net, ranked, p.branch)
                for p in ranked.plans]
    frontier = [_frontier(net, ranked, f) for f in ranked.frontier]
    return {"alternatives": alternatives,
            "partition": {"requested": requested, "branches": branches, "frontier": frontier}}


def _alternative(net: Network, solution: Solution, cert: Certificate, ranked: Ranked,
                 plan: Plan) -> dict[str, Any]:
    m = ranked.n_user_arcs
    used = np.flatnonzero(plan.x[:m])
    flow = Flow(arc=net.arcs.id[used], amount=plan.x[:m][used])
    doc = build_answer(net, replace(solution, flow=flow),
                       replace(cert, virtual_flow=plan.x[m:], potential=plan.pi,
                               primal=plan.cost, dual=plan.cost))
    assert plan.parent is not None
    parent, branch, side = plan.parent
    changed = np.flatnonzero((plan.lo[:m] != 0) | (plan.hi[:m] != ranked.cap[:m]))
    bounds = _pairs(net, ranked, changed)
    for row, lo, hi in zip(bounds, plan.lo[changed].tolist(), plan.hi[changed].tolist(),
                           strict=True):
        row["min"] = lo
        row["max"] = None if hi >= INF else hi
    full = doc["certificate"]
    return {
        "objective": doc["objective"],
        "allocation": doc["allocation"],
        "unmet": doc["unmet"],
        "unused": doc["unused"],
        "cell": {"parent": parent, "branch": branch, "side": side, "bounds": bounds},
        "certificate": {"potentials": full["potentials"],
                        "virtual_potentials": full["virtual_potentials"],
                        "dual_objective": full["dual_objective"]},
    }


def _pairs(net: Network, ranked: Ranked, positions: np.ndarray) -> list[dict[str, Any]]:
    """User arcs (positions in ``net.arcs``) as pairs, with the arc index for arc lists."""
    ids = net.ids
    tails = ranked.tail[positions].tolist()
    heads = ranked.head[positions].tolist()
    if net.arc_list is None:
        return [{"from": ids[t], "to": ids[h]} for t, h in zip(tails, heads, strict=True)]
    return [{"from": ids[t], "to": ids[h], "arc": a}
            for t, h, a in zip(tails, heads, net.arcs.id[positions].tolist(), strict=True)]


def _frontier(net: Network, ranked: Ranked, f: Frontier) -> dict[str, Any]:
    out: dict[str, Any] = {"parent": f.plan, "branch": f.branch, "side": f.side}
    n = net.n_user
    user = f.nodes < n
    if f.kind == "empty":
        out["empty"] = {"nodes": [net.ids[i] for i in f.nodes[user].tolist()],
                        "virtual_nodes": [_VIRTUAL[i - n] for i in f.nodes[~user].tolist()]}
        return out
    out["bound"] = _value(net, net.sign * f.bound)
    out["shift"] = _value(net, f.shift)
    dist = _values(net, f.dist)
    out["distances"] = {net.ids[i]: d for i, d, u in
                        zip(f.nodes.tolist(), dist, user.tolist(), strict=True) if u}
    out["virtual_distances"] = {_VIRTUAL[i - n]: d for i, d, u in
                                zip(f.nodes.tolist(), dist, user.tolist(), strict=True)
                                if not u}
    return out
