"""Every plan of a small bipartite problem, enumerated: the reference the ranked answers
(alternatives, override prices) are held to on small instances.

A *plan* is an integer flow on the arcs from sources to sinks (a cost matrix's allowed
cells, or the request's arcs) within capacities, each source sending at most its supply
and each sink receiving at most its demand. Plans are compared as the service compares
them (README, "The problem"): most hard demand served first, then least total cost (arc
cost x flow plus penalty x unmet demand of soft sinks; for ``"max"`` the largest score
minus penalties). :func:`plans` lists the plans serving the most hard demand, best first.

Written for the tests alone, from the definitions, with no line shared with the service:
exact ``Fraction`` arithmetic, a recursion over sources that distributes each supply among
its arcs. Sizes stay small (about 7 x 7 assignments, 4 x 4 transportation problems with
supplies of a few units); the recursion prunes branches that cannot reach the best hard
demand served, nothing else.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction
from typing import Any

Problem = dict[str, Any]
#: A plan's flows: ((from, to, arc index or None), amount) for each arc with positive flow,
#: in arc order.
Flows = tuple[tuple[tuple[str, str, int | None], int], ...]


@dataclass(frozen=True)
class Plan:
    """One plan: its objective in the caller's sense and its positive flows."""

    objective: Fraction
    flows: Flows


def _arcs(problem: Problem) -> list[tuple[int, int, Fraction, int | None, int | None]]:
    """(source position, sink position, cost, capacity or None, arc index or None)."""
    src = {s["id"]: i for i, s in enumerate(problem["sources"])}
    snk = {t["id"]: j for j, t in enumerate(problem["sinks"])}
    out = []
    if "costs" in problem:
        for i, row in enumerate(problem["costs"]):
            for j, c in enumerate(row):
                if c is not None:
                    out.append((i, j, Fraction(repr(c)) if isinstance(c, float) else
                                Fraction(c), None, None))
        return out
    for k, a in enumerate(problem["arcs"]):
        if a["from"] not in src or a["to"] not in snk:
            raise ValueError("brute force takes bipartite problems only")
        c = a["cost"]
        out.append((src[a["from"]], snk[a["to"]],
                    Fraction(repr(c)) if isinstance(c, float) else Fraction(c),
                    a.get("capacity"), k))
    return out


def plans(problem: Problem, limit: int = 2_000_000) -> list[Plan]:
    """Every plan serving the most hard demand, best first (ties in enumeration order).

    ``limit`` bounds the plans visited, so a test that asks too much fails loudly instead
    of running for hours.
    """
    sources, sinks = problem["sources"], problem["sinks"]
    supply = [s.get("supply", 1) for s in sources]
    demand = [t.get("demand", 1) for t in sinks]
    penalty = [None if t.get("penalty") is None else Fraction(repr(t["penalty"]))
               if isinstance(t["penalty"], float) else Fraction(t["penalty"]) for t in sinks]
    hard = [p is None for p in penalty]
    arcs = _arcs(problem)
    by_source: list[list[int]] = [[] for _ in sources]
    for k, (i, _, _, _, _) in enumerate(arcs):
        by_source[i].append(k)
    # the most each source could still add to hard sinks, for pruning
    reach = [sum(1 for k in by_source[i] if hard[arcs[k][1]]) for i in range(len(sources))]
    left_after = [0] * (len(sources) + 1)
    for i in range(len(sources) - 1, -1, -1):
        left_after[i] = left_after[i + 1] + (supply[i] if reach[i] else 0)
    received = [0] * len(sinks)
    x = [0] * len(arcs)
    found: list[tuple[int, Fraction, Fraction, Flows]] = []
    best_hard = [-1]
    visited = [0]

    def served_hard() -> int:
        return sum(r for r, h in zip(received, hard, strict=True) if h)

    def spread(i: int, pos: int, left: int) -> None:
        """Give the ``left`` units of source ``i`` to its arcs from ``pos`` on."""
        if pos == len(by_source[i]):
            walk(i + 1)
            return
        k = by_source[i][pos]
        _, j, _, cap, _ = arcs[k]
        top = min(left, demand[j] - received[j], left if cap is None else cap)
        for amount in range(top + 1):
            x[k] = amount
            received[j] += amount
            spread(i, pos + 1, left - amount)
            received[j] -= amount
        x[k] = 0

    def walk(i: int) -> None:
        if served_hard() + left_after[i] < best_hard[0]:
            return                      # cannot reach the best hard demand served
        if i == len(sources):
            visited[0] += 1
            if visited[0] > limit:
                raise RuntimeError(f"more than {limit} plans: too large for brute force")
            h = served_hard()
            best_hard[0] = max(best_hard[0], h)
            cost = sum((arcs[k][2] * x[k] for k in range(len(arcs)) if x[k]), Fraction(0))
            cost_pen = sum((p * (d - r) for p, d, r in zip(penalty, demand, received,
                                                             strict=True) if p is not None),
                           Fraction(0))
            flows = tuple(((sources[arcs[k][0]]["id"], sinks[arcs[k][1]]["id"], arcs[k][4]),
                           x[k]) for k in range(len(arcs)) if x[k])
            found.append((h, cost, cost_pen, flows))
            return
        spread(i, 0, supply[i])          # every split of at most the supply

    walk(0)
    top = max(h for h, *_ in found)
    maximize = problem.get("objective", "min") == "max"
    out = [Plan(cost - pen if maximize else cost + pen, flows)
           for h, cost, pen, flows in found if h == top]
    out.sort(key=lambda p: -p.objective if maximize else p.objective)
    return out


def flows_of(answer_like: dict[str, Any], by_arc: bool) -> Flows:
    """An answer's (or an alternative's) allocation in the form :func:`plans` lists."""
    rows = sorted(answer_like["allocation"],
                  key=lambda r: (r.get("arc", -1), r["from"], r["to"]))
    key = [((r["from"], r["to"], r["arc"] if by_arc else None), r["flow"])
           for r in rows if r["flow"]]
    return tuple(key)


def canonical(flows: Flows) -> frozenset:
    """Flows as a set, for comparing plans whatever the row order."""
    return frozenset(flows)
