"""``"objective": "bottleneck"`` against a reference built here from the definitions: the
most hard demand by a networkx maximum flow, the least threshold by a scan of the sorted
costs with a networkx maximum flow at each, then the least cost on the pairs at or below it
by tests/reference.py's networkx min-cost flow; on the seeded families (Gross 1959,
Garfinkel 1971 for the threshold; Burkard & Rendl 1991 for the order). Forged thresholds
and cuts are rejected by the verifier."""

from __future__ import annotations

import copy
from fractions import Fraction
from typing import Any

import networkx as nx
import pytest

from tests.reference import FAMILIES, instance, read, same_objective, solve_networkx


def _bottleneck(problem: dict[str, Any]) -> dict[str, Any]:
    out = copy.deepcopy(problem)
    out["objective"] = "bottleneck"
    return out


def _served(problem: dict[str, Any], limit: Fraction | None) -> int:
    """Most hard demand served on the pairs costing at most ``limit`` (networkx)."""
    net = read(problem)
    g = nx.DiGraph()
    g.add_nodes_from(["S", "T"])
    for s, supply in net.sources:
        g.add_edge("S", ("n", s), capacity=supply)
    for frm, to, cost, cap in net.arcs:
        if limit is None or Fraction(repr(cost) if isinstance(cost, float) else cost) > limit:
            continue
        u, v = ("n", frm), ("n", to)
        if not g.has_edge(u, v):
            g.add_edge(u, v, **({} if cap is None else {"capacity": cap}))
        elif cap is None:
            g[u][v].pop("capacity", None)
        elif "capacity" in g[u][v]:
            g[u][v]["capacity"] += cap
    for t, demand, penalty in net.sinks:
        if penalty is None:
            g.add_edge(("n", t), "T", capacity=demand)
    return int(nx.maximum_flow_value(g, "S", "T"))


def _exact(value: int | float) -> Fraction:
    return Fraction(repr(value)) if isinstance(value, float) else Fraction(value)


def _reference_threshold(problem: dict[str, Any]) -> Fraction | None:
    net = read(problem)
    target = _served(problem, Fraction(10**12))
    if target == 0:
        return None
    costs = sorted({_exact(c) for _, _, c, cap in net.arcs if cap is None or cap > 0})
    return next(c for c in costs if _served(problem, c) == target)


def _at_or_below(problem: dict[str, Any], limit: Fraction | None) -> dict[str, Any]:
    """The problem with only the pairs costing at most ``limit``, as a min problem."""
    out = copy.deepcopy(problem)
    out["objective"] = "min"

    def keep(c: int | float | None) -> bool:
        return c is not None and limit is not None and _exact(c) <= limit

    if "costs" in out:
        out["costs"] = [[c if keep(c) else None for c in row] for row in out["costs"]]
    else:
        out["arcs"] = [a for a in out["arcs"] if keep(a["cost"])]
    return out


def _cases() -> list[tuple[str, int]]:
    return [(f, s) for f in FAMILIES for s in range(22)]


CASES = _cases()


@pytest.mark.parametrize(("family", "seed"), CASES, ids=[f"{f}-{s}" for f, s in CASES])
def test_bottleneck_matches_the_reference(solve: Any, verify: Any, family: str,
                                          seed: int) -> None:
    problem = _bottleneck(instance(family, seed))
    status, answer = solve(problem)
    if status != 200:
        assert status == 422, answer
        return
    theta = _reference_threshold(problem)
    given = answer["certificate"]["bottleneck"]
    if theta is None:
        assert given == {"threshold": None, "cut": None}
        assert all(row["flow"] == 0 for row in answer["allocation"])
    else:
        assert _exact(given["threshold"]) == theta
    net = read(problem)
    costs = {k: cost for k, (_, _, cost, _) in enumerate(net.arcs)}
    used = [row for row in answer["allocation"] if row["flow"] > 0]
    if used:
        if "arc" in used[0]:
            top = max(_exact(costs[row["arc"]]) for row in used)
        else:
            top = max(_exact(row["cost"]) / row["flow"] for row in used)
        assert top == theta            # the largest cost of a used pair is the threshold
    reference = solve_networkx(_at_or_below(problem, theta))
    assert reference.hard_shortfall == answer["certificate"]["hard_shortfall"]
    assert same_objective(answer["objective"], reference.objective, net.integral)
    status, verdict = verify(problem, answer)
    assert status == 200 and verdict["valid"], verdict


def _next_cost(problem: dict[str, Any], theta: Fraction, step: int) -> Fraction | None:
    net = read(problem)
    costs = sorted({_exact(c) for _, _, c, cap in net.arcs if cap is None or cap > 0})
    k = costs.index(theta) + step
    return costs[k] if 0 <= k < len(costs) else None


def _number(x: Fraction) -> int | float:
    return int(x) if x.denominator == 1 else float(x)


@pytest.mark.parametrize(("family", "seed"), CASES[::2], ids=[f"{f}-{s}" for f, s in CASES[::2]])
def test_forged_thresholds_and_cuts_are_rejected(solve: Any, verify: Any, family: str,
                                                 seed: int) -> None:
    problem = _bottleneck(instance(family, seed))
    status, answer = solve(problem)
    if status != 200 or answer["certificate"]["bottleneck"]["threshold"] is None:
        return
    given = answer["certificate"]["bottleneck"]
    theta = _exact(given["threshold"])

    def rejected(change: Any) -> list[str]:
        forged = copy.deepcopy(answer)
        change(forged["certificate"]["bottleneck"])
        _, verdict = verify(problem, forged)
        assert verdict.get("valid") is False, verdict
        return [c["name"] for c in verdict["checks"] if not c["passed"]]

    higher = _next_cost(problem, theta, +1)
    if higher is not None:      # a threshold too high: its cut does not hold below it
        assert "bottleneck_cut" in rejected(lambda b: b.update(threshold=_number(higher)))
    lower = _next_cost(problem, theta, -1)
    low = lower if lower is not None else theta - 1
    assert "bottleneck_threshold" in rejected(lambda b: b.update(threshold=_number(low)))
    assert "bottleneck_cut" in rejected(lambda b: b.update(cut={
        "sink_side": [], "sinks": [], "demand": 0, "capacity": 0}))
    assert "bottleneck_cut" in rejected(lambda b: b.update(cut=None))
    if given["cut"]["sink_side"]:
        assert "bottleneck_cut" in rejected(lambda b: b["cut"].update(
            capacity=b["cut"]["capacity"] + 1, demand=b["cut"]["demand"] + 1))
    # a plain min answer is no bottleneck answer, nor is a bottleneck answer a min one
    plain = copy.deepcopy(answer)
    del plain["certificate"]["bottleneck"]
    _, verdict = verify(problem, plain)
    assert not verdict["valid"]
    _, verdict = verify({**problem, "objective": "min"}, answer)
    assert not verdict["valid"]


def test_no_hard_demand_served_means_no_threshold(solve: Any, verify: Any) -> None:
    # worked by hand: the only ticket is soft, so the empty plan serves all the hard demand
    # there is (none) with no pair at all; the ticket waits
    problem = {"sources": [{"id": "ann"}], "sinks": [{"id": "t1", "penalty": 90}],
               "costs": [[10]], "objective": "bottleneck"}
    status, answer = solve(problem)
    assert status == 200
    assert answer["certificate"]["bottleneck"] == {"threshold": None, "cut": None}
    assert answer["allocation"] == [] and answer["objective"] == 90
    assert answer["unmet"][0]["reason"] == "capacity"
    assert verify(problem, answer)[1]["valid"]


def test_the_longest_trip_is_shortened_at_a_cost(solve: Any) -> None:
    # worked by hand: min pairs a-x (1) and b-y (100), total 101, longest 100; bottleneck
    # pairs a-y (60) and b-x (60), longest 60, total 120. Common practice, no source.
    problem = {"sources": [{"id": "a"}, {"id": "b"}], "sinks": [{"id": "x"}, {"id": "y"}],
               "costs": [[1, 60], [60, 100]]}
    _, plain = solve(problem)
    _, short = solve({**problem, "objective": "bottleneck"})
    assert plain["objective"] == 101 and short["objective"] == 120
    assert short["certificate"]["bottleneck"]["threshold"] == 60
    assert short["certificate"]["bottleneck"]["cut"]["demand"] == 2


@pytest.mark.parametrize(("extra", "value"), [("prices", True), ("alternatives", 2)])
def test_bottleneck_refuses_controls_it_does_not_offer(solve: Any, extra: str,
                                                       value: Any) -> None:
    problem = {"sources": [{"id": "a"}], "sinks": [{"id": "x"}], "costs": [[1]],
               "objective": "bottleneck", extra: value}
    status, body = solve(problem)
    assert status == 422
    assert [e["pointer"] for e in body["errors"]] == [f"/{extra}"]
