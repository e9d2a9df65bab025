"""Why a sink waits: every unmet row's reason against the definitions, rebuilt here with
networkx from the request and the answer (README, "Why a sink waits"), on seeded families;
the meaning of a ``penalty`` reason against a re-solve by the reference (tests/reference.py)
that serves the sink one unit more; and forged reasons rejected by the verifier."""

from __future__ import annotations

import copy
from fractions import Fraction
from typing import Any

import networkx as nx
import numpy as np
import pytest

from tests.reference import instance, read, solve_networkx

FAMILIES = ("unmet_hard", "penalties", "transshipment", "float_costs")


def _waiting(rng: np.random.Generator, seed: int) -> dict[str, Any]:
    """Short supply, eligibility gaps, soft sinks with penalties on both sides of the costs."""
    n, m = int(rng.integers(2, 8)), int(rng.integers(2, 10))
    src, snk = [f"tech-{i}" for i in range(n)], [f"job-{j}" for j in range(m)]
    sources = [{"id": i, "supply": int(rng.integers(0, 4))} for i in src]
    sinks: list[dict[str, Any]] = []
    for j in snk:
        sink: dict[str, Any] = {"id": j, "demand": int(rng.integers(1, 4))}
        if rng.random() < 0.6:
            sink["penalty"] = int(rng.integers(0, 50))
        sinks.append(sink)
    problem: dict[str, Any] = {"sources": sources, "sinks": sinks}
    if seed % 2:
        problem["costs"] = [[None if rng.random() < 0.5 else int(rng.integers(0, 40))
                             for _ in snk] for _ in src]
    else:
        problem["arcs"] = [{"from": i, "to": j, "cost": int(rng.integers(0, 40)),
                            **({"capacity": int(rng.integers(0, 3))} if rng.random() < 0.5
                               else {})}
                           for i in src for j in snk if rng.random() < 0.4]
    return problem


def _problems() -> list[tuple[str, int, dict[str, Any]]]:
    out = [("waiting", s, _waiting(np.random.default_rng([s, 77]), s)) for s in range(160)]
    out += [(f, s, instance(f, s)) for f in FAMILIES for s in range(40)]
    return out


PROBLEMS = _problems()


def _grid(value: int | float, integral: bool) -> Fraction:
    return Fraction(value) if integral else Fraction(repr(value))


def _expected_reasons(problem: dict[str, Any], answer: dict[str, Any]) -> dict[str, str]:
    """The reason of every short sink, from the definitions, with networkx."""
    net = read(problem)
    usable = nx.DiGraph()
    residual = nx.DiGraph()
    ids = [s for s, _ in net.sources] + net.nodes + [t for t, _, _ in net.sinks]
    usable.add_nodes_from(ids)
    residual.add_nodes_from(ids)
    flows: dict[int, int] = {}
    for row in answer["allocation"]:
        if "arc" in row:
            flows[row["arc"]] = row["flow"]
        else:   # a cost matrix: one arc per pair, in the order read() lists them
            k = next(k for k, (f, t, _, _) in enumerate(net.arcs)
                     if (f, t) == (row["from"], row["to"]))
            flows[k] = row["flow"]
    for k, (frm, to, _, cap) in enumerate(net.arcs):
        x = flows.get(k, 0)
        if cap is None or cap > 0:
            usable.add_edge(frm, to)
        if cap is None or x < cap:
            residual.add_edge(frm, to)
        if x > 0:
            residual.add_edge(to, frm)
    sent = {s: 0 for s, _ in net.sources}
    for row in answer["allocation"]:
        if row["from"] in sent:
            sent[row["from"]] += row["flow"]
    usable.add_node("root")
    residual.add_node("root")
    for s, supply in net.sources:
        if supply > 0:
            usable.add_edge("root", s)
        if sent[s] < supply:
            residual.add_edge("root", s)
    fed = nx.descendants(usable, "root")
    reach = nx.descendants(residual, "root")
    out = {}
    for row in answer["unmet"]:
        t = row["id"]
        out[t] = ("no-eligible-source" if t not in fed else "capacity" if t not in reach
                  else "penalty")
    return out


@pytest.mark.parametrize(("family", "seed", "problem"), PROBLEMS,
                         ids=[f"{f}-{s}" for f, s, _ in PROBLEMS])
def test_reasons_follow_the_definitions(solve: Any, verify: Any, family: str, seed: int,
                                        problem: dict[str, Any]) -> None:
    status, answer = solve(problem)
    if status != 200:
        assert status == 422            # reject with hard demand short, or unbounded
        return
    want = _expected_reasons(problem, answer)
    got = {row["id"]: row["reason"] for row in answer["unmet"]}
    assert got == want
    net = read(problem)
    penalty = {t: p for t, _, p in net.sinks}
    cert = answer["certificate"]
    for row in answer["unmet"]:
        if row["reason"] == "capacity" and row["hard"]:
            assert row["id"] in cert["cut"]["sinks"]
        if row["reason"] != "penalty":
            assert "reduced_cost" not in row
            continue
        assert not row["hard"]
        r = (_grid(cert["virtual_potentials"]["super_source"], net.integral)
             - _grid(cert["potentials"][row["id"]], net.integral)
             - _grid(penalty[row["id"]], net.integral))
        assert _grid(row["reduced_cost"], net.integral) == r >= 0
    status, verdict = verify(problem, answer)
    assert status == 200 and verdict["valid"], verdict


def _one_more(problem: dict[str, Any], sink: str, unmet: int) -> dict[str, Any]:
    """The problem with ``sink`` served one unit more than the answer serves it: the part
    served becomes a hard sink, the rest stays soft."""
    out = copy.deepcopy(problem)
    t = next(t for t in out["sinks"] if t["id"] == sink)
    demand = t.get("demand", 1)
    t["demand"] = unmet - 1
    hard_part = {"id": sink + "~served", "demand": demand - unmet + 1}
    out["sinks"].append(hard_part)
    if "costs" in out:
        k = [s["id"] for s in problem["sinks"]].index(sink)
        for row in out["costs"]:
            row.append(row[k])
    else:
        out["arcs"] += [{**a, "to": hard_part["id"]} for a in problem["arcs"]
                        if a["to"] == sink]
    return out


@pytest.mark.parametrize("seed", range(60))
def test_a_penalty_reason_prices_serving_one_more(solve: Any, seed: int) -> None:
    # reference: tests/reference.py solve_networkx (networkx max-flow + network simplex)
    problem = _waiting(np.random.default_rng([seed, 78]), seed)
    status, answer = solve(problem)
    assert status == 200
    net = read(problem)
    sense = net.sense
    for row in answer["unmet"]:
        if row["reason"] != "penalty":
            continue
        again = solve_networkx(_one_more(problem, row["id"], row["amount"]))
        assert again.hard_shortfall == answer["certificate"]["hard_shortfall"]
        # min form: the extra cost of serving one more unit is at least the reduced cost
        assert sense * (again.objective - answer["objective"]) >= row["reduced_cost"]


def _forge(answer: dict[str, Any], k: int, reason: str, **extra: Any) -> dict[str, Any]:
    forged = copy.deepcopy(answer)
    row = forged["unmet"][k]
    row.pop("reduced_cost", None)
    row.update(reason=reason, **extra)
    return forged


@pytest.mark.parametrize("seed", range(40))
def test_wrong_reasons_are_rejected(solve: Any, verify: Any, seed: int) -> None:
    problem = _waiting(np.random.default_rng([seed, 79]), seed)
    status, answer = solve(problem)
    assert status == 200
    for k, row in enumerate(answer["unmet"]):
        for other in ("no-eligible-source", "capacity", "penalty", "busy"):
            if other == row["reason"]:
                continue
            extra = {"reduced_cost": 0} if other == "penalty" else {}
            _, verdict = verify(problem, _forge(answer, k, other, **extra))
            failed = [c["name"] for c in verdict["checks"] if not c["passed"]]
            assert failed == ["unmet_reasons"], (other, verdict)
        if row["reason"] == "penalty":
            for price in (row["reduced_cost"] + 1, row["reduced_cost"] - 1):
                _, verdict = verify(problem, _forge(answer, k, "penalty", reduced_cost=price))
                assert not verdict["valid"]
            _, verdict = verify(problem, _forge(answer, k, "penalty"))
            assert not verdict["valid"]
        else:
            _, verdict = verify(problem, _forge(answer, k, row["reason"], reduced_cost=0))
            assert not verdict["valid"]


def test_reasons_may_be_left_out(solve: Any, verify: Any) -> None:
    problem = _waiting(np.random.default_rng(5), 5)
    _, answer = solve(problem)
    for row in answer["unmet"]:
        row.pop("reason")
        row.pop("reduced_cost", None)
    _, verdict = verify(problem, answer)
    assert verdict["valid"]


def _under_threshold(problem: dict[str, Any], answer: dict[str, Any]) -> dict[str, Any]:
    """The problem as the last bottleneck stage sees it: pairs above the threshold cannot
    carry flow (capacity 0), so neither eligibility's residual part nor a cheaper cycle may
    use them; eligibility itself is the whole problem's (README, "Why a sink waits")."""
    theta = answer["certificate"]["bottleneck"]["threshold"]
    out = copy.deepcopy(problem)

    def above(c: Any) -> bool:
        return c is not None and (theta is None or Fraction(repr(c)) > Fraction(repr(theta)))

    if "costs" in out:
        out["arcs"] = [{"from": s["id"], "to": t["id"], "cost": c,
                        **({"capacity": 0} if above(c) else {})}
                       for s, row in zip(out["sources"], out.pop("costs"), strict=True)
                       for t, c in zip(out["sinks"], row, strict=True) if c is not None]
    else:
        out["arcs"] = [{**a, "capacity": 0} if above(a["cost"]) else a for a in out["arcs"]]
    return out


BOTTLENECK = [(s, _waiting(np.random.default_rng([s, 80]), s)) for s in range(200)]


@pytest.mark.parametrize(("seed", "problem"), BOTTLENECK, ids=[str(s) for s, _ in BOTTLENECK])
def test_reasons_under_the_bottleneck_objective(solve: Any, verify: Any, seed: int,
                                                problem: dict[str, Any]) -> None:
    problem = {**problem, "objective": "bottleneck"}
    status, answer = solve(problem)
    assert status == 200
    fed = _expected_reasons(problem, answer)
    within = _expected_reasons(_under_threshold(problem, answer), answer)
    want = {t: "no-eligible-source" if fed[t] == "no-eligible-source" else
            ("capacity" if within[t] != "penalty" else "penalty") for t in fed}
    assert {row["id"]: row["reason"] for row in answer["unmet"]} == want
    status, verdict = verify(problem, answer)
    assert status == 200 and verdict["valid"], verdict
