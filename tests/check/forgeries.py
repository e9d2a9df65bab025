"""Tampered and forged answers, built exactly, to attack a verifier with.

An honest answer (from ``POST /v1/solve``) is read into a :class:`Plan`: flows per arc,
potentials, hard shortfall and cut side, all exact integers of the cost grid. A forgery edits
the plan and writes it back with :func:`render`, which recomputes every reported number
(objective, row costs, unmet, unused, flow value, cut numbers) from the edited flow, so that
the forgery is internally consistent and only the property under attack is wrong.

Classes (each function says what a correct verifier must answer):

* a unit shifted around a residual cycle of positive reduced cost: feasible, dearer
  (:func:`shift_positive_cycle`), with the certificate left as it was or re-forged
  (:func:`forge_certificate`);
* int64 wrap-around: thousands of rows of flow near 2**53 on zero-cost arcs (:mod:`overflow`);
* off-grid and near-miss numbers (:func:`with_number`);
* zero-flow rows (valid) and two rows for one arc (invalid);
* answers with unmet hard demand sent under ``"unmet_demand": "reject"``.
"""

from __future__ import annotations

import copy
import random
from collections import deque
from dataclasses import dataclass, replace
from fractions import Fraction
from typing import Any

from exact_reference import VIRTUAL_NAMES, Model, P, S, T, grid_value, read_problem


@dataclass(frozen=True)
class Plan:
    """An answer as exact integers: flow per user arc, potentials (grid units, keys: user ids
    and the virtual nodes S, T, P), the hard shortfall and the ids on the cut's sink side."""

    m: Model
    x: tuple[int, ...]
    pi: dict[Any, int]
    shortfall: int
    side: tuple[str, ...]


def number(grid: int, scale: int) -> int | float:
    """A grid value as the service writes it: an integer for whole-number data, else the
    double nearest to the decimal (exactly recoverable below 2**33 in magnitude)."""
    return grid if scale == 1 else float(Fraction(grid, scale))


def plan_of(problem: dict[str, Any], answer: dict[str, Any]) -> Plan:
    """The plan of an honest answer."""
    m = read_problem(problem)
    x = [0] * len(m.arcs)
    for row in answer["allocation"]:
        k = row["arc"] if "arc" in row else m.pairs[(row["from"], row["to"])][0]
        x[k] = row["flow"]
    cert = answer["certificate"]
    pi: dict[Any, int] = {v: grid_value(p, m.scale) for v, p in cert["potentials"].items()}
    pi.update({VIRTUAL_NAMES[k]: grid_value(p, m.scale)
               for k, p in cert["virtual_potentials"].items()})
    return Plan(m, tuple(x), pi, cert["hard_shortfall"], tuple(cert["cut"]["sink_side"]))


def balances(plan: Plan) -> tuple[dict[str, int], dict[str, int]]:
    """(units each source sends, units each sink is short of)."""
    m = plan.m
    out = dict.fromkeys(m.ids, 0)
    for k, arc in enumerate(m.arcs):
        out[arc.tail] += plan.x[k]
        out[arc.head] -= plan.x[k]
    return ({s: out[s] for s in m.supply}, {t: m.demand[t] + out[t] for t in m.demand})


def extended(plan: Plan) -> list[tuple[Any, Any, int, int | None, int, int | None]]:
    """Arcs of the extended network: (tail, head, cost, capacity, flow, user arc or None)."""
    m = plan.m
    sent, unmet = balances(plan)
    arcs: list[tuple[Any, Any, int, int | None, int, int | None]] = [
        (a.tail, a.head, a.cost, a.cap, plan.x[k], k) for k, a in enumerate(m.arcs)]
    arcs += [(S, s, 0, m.supply[s], sent[s], None) for s in m.supply]
    arcs += [(t, T, 0, m.demand[t], m.demand[t], None) for t in m.demand]
    arcs += [(S, t, p, m.demand[t], unmet[t], None) for t, p in m.penalty.items()]
    hard = [t for t in m.demand if m.hard(t)]
    arcs.append((S, P, 0, plan.shortfall, sum(unmet[t] for t in hard), None))
    arcs += [(P, t, 0, m.demand[t], unmet[t], None) for t in hard]
    return arcs


def cost(plan: Plan) -> int:
    """Min-form cost of the plan's flow (arc costs and penalties), grid units."""
    _, unmet = balances(plan)
    return (sum(a.cost * q for a, q in zip(plan.m.arcs, plan.x, strict=True))
            + sum(p * unmet[t] for t, p in plan.m.penalty.items()))


def dual(plan: Plan) -> int:
    """The dual objective of the plan's potentials (AMO 1993, section 9.4), grid units."""
    pi = plan.pi
    value = plan.m.total_demand * (pi[S] - pi[T])
    for tail, head, c, cap, _, _ in extended(plan):
        if cap is not None:
            value -= cap * max(0, -(c - pi[tail] + pi[head]))
    return value


def render(plan: Plan, *, objective: int | None = None, dual_objective: int | None = None,
           rows: str = "used") -> dict[str, Any]:
    """The answer of a plan in the service's format, every number recomputed exactly.

    ``objective`` and ``dual_objective`` (min form, grid units) override the recomputed
    values; ``rows="used"`` writes rows for arcs with flow only.
    """
    m = plan.m
    sent, unmet = balances(plan)
    sc, sg = m.scale, m.sigma
    allocation = []
    for k, (arc, q) in enumerate(zip(m.arcs, plan.x, strict=True)):
        if q == 0 and rows == "used":
            continue
        row: dict[str, Any] = {"from": arc.tail, "to": arc.head, "flow": q,
                               "cost": number(q * arc.caller, sc)}
        if not m.matrix:
            row["arc"] = k
        allocation.append(row)
    y = set(plan.side)
    hard_in = [t for t in m.demand if t in y and m.hard(t)]
    capacity = sum(q for s, q in m.supply.items() if s in y) + sum(
        a.cap or 0 for a in m.arcs if a.tail not in y and a.head in y)
    primal = cost(plan) if objective is None else objective
    return {
        "status": "optimal",
        "objective": number(sg * primal, sc),
        "flow_value": sum(sent.values()),
        "allocation": allocation,
        "unmet": [{"id": t, "amount": q} for t, q in unmet.items() if q],
        "unused": [{"id": s, "amount": m.supply[s] - q} for s, q in sent.items()
                   if m.supply[s] - q],
        "certificate": {
            "negated": sg < 0,
            "potentials": {v: number(plan.pi[v], sc) for v in m.ids},
            "virtual_potentials": {k: number(plan.pi[v], sc) for k, v in VIRTUAL_NAMES.items()},
            "hard_shortfall": plan.shortfall,
            "cut": {"sink_side": list(plan.side), "sinks": hard_in,
                    "demand": sum(m.demand[t] for t in hard_in), "capacity": capacity},
            "dual_objective": number(sg * (dual(plan) if dual_objective is None
                                           else dual_objective), sc),
        },
    }


# -- (a) a unit around a residual cycle of positive reduced cost --------------------------


def shift_positive_cycle(plan: Plan, rng: random.Random) -> Plan | None:
    """The plan with one unit sent around a residual cycle of positive reduced cost.

    The cycle starts with a residual arc of positive reduced cost and closes along residual
    arcs; with valid potentials every residual arc has a non-negative reduced cost, so the
    cycle's cost is positive (costs telescope into reduced costs): the new flow is feasible,
    has the same hard shortfall (the pool arc is full, and no cycle can empty it: the cut) and
    costs more. None when no residual arc has a positive reduced cost.
    """
    arcs = extended(plan)
    pi = plan.pi
    residual: dict[Any, list[tuple[Any, int, int]]] = {}   # node -> (next, arc, direction)
    starts = []
    for i, (tail, head, c, cap, q, _) in enumerate(arcs):
        if cap is None or q < cap:
            residual.setdefault(tail, []).append((head, i, 1))
            if c - pi[tail] + pi[head] > 0:
                starts.append(i)
        if q > 0:
            residual.setdefault(head, []).append((tail, i, -1))
    rng.shuffle(starts)
    for first in starts:
        tail, head = arcs[first][0], arcs[first][1]
        path = _path(residual, head, tail, skip=first)
        if path is None:
            continue
        x = list(plan.x)
        for i, direction in [(first, 1), *path]:
            k = arcs[i][5]
            if k is not None:
                x[k] += direction
        shifted = replace(plan, x=tuple(x))
        assert cost(shifted) > cost(plan), "a positive cycle must cost more"
        return shifted
    return None


def _path(residual: dict[Any, list[tuple[Any, int, int]]], start: Any, goal: Any,
          skip: int) -> list[tuple[int, int]] | None:
    """Residual arcs (index, direction) of a shortest path start -> goal, by breadth first."""
    back: dict[Any, tuple[Any, int, int] | None] = {start: None}
    queue = deque([start])
    while queue:
        v = queue.popleft()
        if v == goal:
            steps = []
            while back[v] is not None:
                u, i, d = back[v]
                steps.append((i, d))
                v = u
            return steps[::-1]
        for w, i, d in residual.get(v, []):
            if i != skip and w not in back:
                back[w] = (v, i, d)
                queue.append(w)
    return None


# -- (b) an internally consistent certificate for a dearer flow --------------------------


FORGERS = ("stale", "claimed", "lift", "relabel")


def forge_certificate(honest: Plan, shifted: Plan, how: str) -> dict[str, Any]:
    """The answer of ``shifted`` with a certificate forged ``how``:

    * ``stale``: the honest potentials and the honest dual objective, as they were;
    * ``claimed``: the honest potentials, the dual objective claimed equal to the new cost;
    * ``lift``: pi(S) raised so that ``D (pi(S) - pi(T))`` grows by the extra cost, objective
      and dual objective both claimed equal to the new cost;
    * ``relabel``: potentials from |V| rounds of Bellman-Ford in the new flow's residual
      graph (which has a negative cycle, so they prove nothing), claims as in ``lift``.

    Weak duality bounds every dual objective by the optimum, below the new cost: a correct
    verifier rejects every one of them.
    """
    new = cost(shifted)
    if how == "stale":
        return render(shifted, dual_objective=dual(honest))
    if how == "claimed":
        return render(shifted, dual_objective=new)
    if how == "lift":
        d = honest.m.total_demand or 1
        pi = dict(honest.pi)
        pi[S] += -(-(new - cost(honest)) // d)
        return render(replace(shifted, pi=pi), dual_objective=new)
    if how == "relabel":
        return render(replace(shifted, pi=_relabelled(shifted)), dual_objective=new)
    raise ValueError(how)


def _relabelled(plan: Plan) -> dict[Any, int]:
    """Minus the distances after |V| Bellman-Ford rounds from a root joined to every node."""
    arcs = extended(plan)
    dist = dict.fromkeys(list(plan.pi), 0)
    edges = [(t, h, c) for t, h, c, cap, q, _ in arcs if cap is None or q < cap]
    edges += [(h, t, -c) for t, h, c, cap, q, _ in arcs if q > 0]
    for _ in range(len(dist)):
        for t, h, c in edges:
            if dist[t] + c < dist[h]:
                dist[h] = dist[t] + c
    return {v: -d for v, d in dist.items()}


# -- (d), (e), (f): numbers, rows and policy ----------------------------------------------


def with_number(answer: dict[str, Any], where: str, value: Any) -> dict[str, Any]:
    """A copy of ``answer`` with one reported number replaced: ``where`` is "objective",
    "dual_objective", "potential:<id>", "virtual:<name>" or "row_cost:<index>"."""
    out = copy.deepcopy(answer)
    cert = out["certificate"]
    kind, _, key = where.partition(":")
    if kind == "objective":
        out["objective"] = value
    elif kind == "dual_objective":
        cert["dual_objective"] = value
    elif kind == "potential":
        cert["potentials"][key] = value
    elif kind == "virtual":
        cert["virtual_potentials"][key] = value
    elif kind == "row_cost":
        out["allocation"][int(key)]["cost"] = value
    else:
        raise ValueError(where)
    return out


def with_zero_rows(problem: dict[str, Any], answer: dict[str, Any], rng: random.Random,
                   k: int) -> dict[str, Any]:
    """``answer`` plus up to ``k`` rows of flow 0 on allowed arcs it does not use (valid)."""
    m = read_problem(problem)
    plan = plan_of(problem, answer)
    free = [i for i, q in enumerate(plan.x) if q == 0]
    out = copy.deepcopy(answer)
    for i in rng.sample(free, min(k, len(free))):
        arc = m.arcs[i]
        row: dict[str, Any] = {"from": arc.tail, "to": arc.head, "flow": 0,
                               "cost": 0 if m.scale == 1 else 0.0}
        if not m.matrix and (len(m.pairs[(arc.tail, arc.head)]) > 1 or rng.random() < 0.5):
            row["arc"] = i
        out["allocation"].insert(rng.randint(0, len(out["allocation"])), row)
    return out


def with_duplicate_row(problem: dict[str, Any], answer: dict[str, Any], rng: random.Random
                       ) -> dict[str, Any] | None:
    """``answer`` with one arc's flow split over two rows (invalid); None without rows."""
    m = read_problem(problem)
    rows = answer["allocation"]
    if not rows:
        return None
    out = copy.deepcopy(answer)
    r = rng.randrange(len(rows))
    row = out["allocation"][r]
    k = row["arc"] if "arc" in row else m.pairs[(row["from"], row["to"])][0]
    part = rng.randint(0, row["flow"])
    twin = dict(row, flow=row["flow"] - part,
                cost=number((row["flow"] - part) * m.arcs[k].caller, m.scale))
    row.update(flow=part, cost=number(part * m.arcs[k].caller, m.scale))
    out["allocation"].insert(rng.randint(0, len(out["allocation"])), twin)
    return out


def under_reject(problem: dict[str, Any]) -> dict[str, Any]:
    """The same problem with unmet hard demand to be rejected."""
    return {**problem, "unmet_demand": "reject"}
