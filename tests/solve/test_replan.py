"""Pins, changes against a previous plan and load costs, held to an independent reference.

The reference (replan_reference.py) is networkx's network simplex on a network transformed
in the test from the definitions of issue 13; every answer is also re-checked by the
verifier, and tampered answers must be refused.
"""

from __future__ import annotations

import copy
import json

import pytest
import replan_reference as ref

from service.errors import Infeasible, PinsInfeasible, ServiceError
from service.settings import Settings
from service.solve.pipeline import solve_body, verify_body

SETTINGS = Settings()
CONTROLS = [("fixed",), ("previous",), ("load",), ("fixed", "previous", "load")]
CASES = [pytest.param(c, s, id=f"{'+'.join(c)}-{s:03d}") for c in CONTROLS for s in range(200)]


def _show(problem: dict) -> str:
    return json.dumps(problem, separators=(",", ":"))


@pytest.mark.parametrize(("controls", "seed"), CASES)
def test_against_reference(controls: tuple[str, ...], seed: int) -> None:
    """Least hard shortfall and objective equal networkx's on the transformed network
    (replan_reference.reference), and the answer verifies."""
    problem = ref.instance(seed + 1000 * CONTROLS.index(controls), controls)
    expected = ref.reference(problem)
    try:
        answer = solve_body(copy.deepcopy(problem), SETTINGS)
    except PinsInfeasible as e:
        assert expected is None, f"{e.detail}\n{_show(problem)}"
        assert e.extra["witness"]["pins"], _show(problem)
        return
    except ServiceError as e:
        pytest.fail(f"{e.detail}\n{_show(problem)}")
    assert expected is not None, _show(problem)
    short, doubled = expected
    assert answer["certificate"]["hard_shortfall"] == short, _show(problem)
    assert 2 * answer["objective"] == doubled, _show(problem)
    verdict = verify_body({**problem, "answer": answer}, SETTINGS)
    assert verdict["valid"], verdict
    if short:
        # under "reject" the same cut is the witness: demand - capacity = the shortfall
        with pytest.raises(Infeasible) as refused:
            solve_body({**copy.deepcopy(problem), "unmet_demand": "reject"}, SETTINGS)
        w = refused.value.extra["witness"]
        assert w["demand"] - w["capacity"] == short, _show(problem)


def _solved(seed: int) -> tuple[dict, dict]:
    """A combined instance with an answer (the first seed from ``seed`` that has one)."""
    for s in range(seed, seed + 50):
        problem = ref.instance(5000 + s, ("fixed", "previous", "load"))
        if ref.reference(problem) is not None:
            return problem, solve_body(copy.deepcopy(problem), SETTINGS)
    raise AssertionError("no routable instance")


def _tamperings(answer: dict) -> list[tuple[str, dict]]:
    """Answers that must be refused: each changes one reported fact."""
    out = []
    rows = answer["allocation"]
    for i, row in enumerate(rows):
        if row.get("fixed"):
            forged = copy.deepcopy(answer)
            forged["allocation"][i]["flow"] += 1
            out.append(("pinned row carries one more", forged))
            forged = copy.deepcopy(answer)
            del forged["allocation"][i]
            out.append(("pinned row dropped", forged))
            break
    for i, row in enumerate(rows):
        if not row.get("fixed"):
            forged = copy.deepcopy(answer)
            forged["allocation"][i]["fixed"] = True
            out.append(("unpinned row flagged fixed", forged))
            break
    if "changes" in answer:
        for key in ("kept", "moved"):
            forged = copy.deepcopy(answer)
            forged["changes"][key] += 1
            out.append((f"changes.{key} + 1", forged))
        forged = copy.deepcopy(answer)
        forged["changes"]["penalty"] += 0.5
        out.append(("changes.penalty + 0.5", forged))
    for key in ("objective",):
        forged = copy.deepcopy(answer)
        forged[key] += 1
        out.append(("objective + 1", forged))
    forged = copy.deepcopy(answer)
    forged["certificate"]["dual_objective"] -= 1
    out.append(("dual objective - 1", forged))
    return out


@pytest.mark.parametrize("seed", range(0, 400, 2))
def test_tampered_answers_refused(seed: int) -> None:
    """Every single-fact forgery of a re-planning answer is refused by the verifier (the
    facts are recomputed from the definitions, README "The certificate")."""
    problem, answer = _solved(seed)
    assert verify_body({**problem, "answer": answer}, SETTINGS)["valid"]
    for what, forged in _tamperings(answer):
        verdict = verify_body({**problem, "answer": forged}, SETTINGS)
        assert not verdict["valid"], f"{what} accepted\n{_show(problem)}"


@pytest.mark.parametrize("seed", range(200))
def test_plan_of_another_problem_refused_unless_as_good(seed: int) -> None:
    """An optimal plan of the problem without pins, previous plan and load costs, with its
    objective restated for this problem, is valid only when it is as good as networkx's
    optimum of this problem (replan_reference.reference) and its certificate proves it."""
    problem = ref.instance(9000 + seed, ("fixed", "previous", "load"))
    expected = ref.reference(problem)
    plain = {k: v for k, v in copy.deepcopy(problem).items() if k not in ("fixed", "previous")}
    for source in plain["sources"]:
        source.pop("load_costs", None)
    try:
        answer = solve_body(plain, SETTINGS)
    except ServiceError:
        return
    verdict = verify_body({**problem, "answer": answer}, SETTINGS)
    if verdict["valid"]:
        assert expected is not None
        assert 2 * answer["objective"] == expected[1]


@pytest.mark.parametrize("seed", range(200))
def test_replanning_an_unchanged_day_moves_nothing(seed: int) -> None:
    """With its own optimal plan as the previous one and any change penalty > 0, the plan
    keeps every unit (an optimum already, and each move would cost more: the definition
    of the penalty); the objective is the same as without the previous plan."""
    problem = ref.instance(20000 + seed, ("load",))
    try:
        first = solve_body(copy.deepcopy(problem), SETTINGS)
    except ServiceError:
        return
    again = {**copy.deepcopy(problem),
             "previous": {"allocation": first["allocation"], "change_penalty": 0.5}}
    answer = solve_body(again, SETTINGS)
    total = sum(r["flow"] for r in first["allocation"])
    assert answer["changes"] == {"kept": total, "moved": 0, "penalty": 0}
    assert answer["objective"] == first["objective"]


def _restricted(problem: dict, limit: float | None) -> dict:
    """The problem with only the pairs costing at most ``limit`` (none for None)."""
    out = copy.deepcopy(problem)
    out["objective"] = "min"
    if "costs" in out:
        out["costs"] = [[c if c is not None and limit is not None and c <= limit else None
                         for c in row] for row in out["costs"]]
    else:
        out["arcs"] = [a for a in out["arcs"] if limit is not None and a["cost"] <= limit]
    return out


@pytest.mark.parametrize("seed", range(200))
def test_bottleneck_with_previous_plan_and_load_costs(seed: int) -> None:
    """Under "bottleneck" change penalties and load costs are costs of the last stage.
    Reference from the definitions (issue 13): the least hard shortfall (networkx, above),
    then a threshold search over the sorted costs, each checked by the reference on the
    pairs at or below it, then the reference's optimum on the pairs at or below the
    threshold (no pair at all when no hard demand can be served)."""
    problem = ref.instance(30000 + seed, ("previous", "load"))
    problem["objective"] = "bottleneck"
    whole = ref.reference(_restricted(problem, float("inf")))
    assert whole is not None
    hard = sum(t["demand"] for t in problem["sinks"] if "penalty" not in t)
    if whole[0] == hard:
        theta, best = None, ref.reference(_restricted(problem, None))
    else:
        costs = sorted({c for row in problem.get("costs", []) for c in row if c is not None}
                       | {a["cost"] for a in problem.get("arcs", [])
                          if a.get("capacity", 1) != 0})
        theta = next(c for c in costs
                     if ref.reference(_restricted(problem, c))[0] == whole[0])
        best = ref.reference(_restricted(problem, theta))
    assert best is not None
    answer = solve_body(copy.deepcopy(problem), SETTINGS)
    assert answer["certificate"]["bottleneck"]["threshold"] == theta, _show(problem)
    assert answer["certificate"]["hard_shortfall"] == whole[0]
    assert 2 * answer["objective"] == best[1], _show(problem)
    assert verify_body({**problem, "answer": answer}, SETTINGS)["valid"]
