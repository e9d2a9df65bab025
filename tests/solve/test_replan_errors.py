"""Bad pins, previous plans and load costs: one 422 per message, naming the field."""

from __future__ import annotations

import copy
import json
import random
from typing import Any

import pytest

from service.errors import ServiceError
from service.settings import Settings
from service.solve.pipeline import solve_body, verify_body

SETTINGS = Settings()

BASE: dict[str, Any] = {
    "sources": [{"id": "north", "supply": 2}, {"id": "south", "supply": 1}],
    "sinks": [{"id": "fridge"}, {"id": "oven"}],
    "costs": [[20, 35], [30, None]],
}
ARCS: dict[str, Any] = {
    "sources": [{"id": "north", "supply": 2}],
    "sinks": [{"id": "fridge", "demand": 2}],
    "arcs": [{"from": "north", "to": "fridge", "cost": 3, "capacity": 1},
             {"from": "north", "to": "fridge", "cost": 5}],
}


def _errors(solve: Any, body: dict[str, Any]) -> list[dict[str, str]]:
    status, doc = solve(body)
    assert status == 422, doc
    assert doc["type"].endswith("invalid-problem"), doc
    return doc["errors"]


@pytest.mark.parametrize(("extra", "pointer", "words"), [
    ({"fixed": [{"from": "north", "to": "nowhere", "flow": 1}]}, "/fixed/0/to", "unknown id"),
    ({"fixed": [{"from": "south", "to": "oven", "flow": 1}]}, "/fixed/0", "not an allowed pair"),
    ({"fixed": [{"from": "north", "to": "oven", "flow": 1},
                {"from": "north", "to": "oven", "flow": 0}]}, "/fixed/1", "same pair"),
    ({"fixed": [{"from": "north", "to": "oven", "flow": 1, "arc": 0}]}, "/fixed/0/arc",
     "cost matrix"),
    ({"fixed": [{"from": "north", "to": "oven", "flow": -1}]}, "/fixed/0/flow", "whole number"),
    ({"previous": {"allocation": [], "change_penalty": -1}}, "/previous/change_penalty",
     "greater than or equal to 0"),
    ({"previous": {"allocation": []}}, "/previous/change_penalty", "missing"),
    ({"fixed": [{"from": "north", "to": "oven", "flow": 1}], "prices": True}, "/prices",
     "cannot be asked together"),
    ({"previous": {"allocation": [], "change_penalty": 1}, "alternatives": 2},
     "/alternatives", "cannot be asked together"),
    ({"previous": {"allocation": [{"from": "north", "to": "oven", "flow": 1},
                                  {"from": "north", "to": "oven", "flow": 2}],
                   "change_penalty": 1}}, "/previous/allocation/1", "same pair"),
])
def test_bad_entry_is_named(solve: Any, extra: dict, pointer: str, words: str) -> None:
    errors = _errors(solve, {**BASE, **extra})
    assert any(e["pointer"] == pointer and words in e["detail"] for e in errors), errors


def test_decreasing_load_costs_name_the_entry(solve: Any) -> None:
    body = {**BASE, "sources": [{"id": "north", "supply": 2, "load_costs": [1, 3, 2]},
                                {"id": "south", "supply": 1}]}
    errors = _errors(solve, body)
    assert errors == [{"pointer": "/sources/0/load_costs/2", "detail":
                       "must be at least the entry before it (3): load costs are "
                       "non-decreasing"}]


def test_empty_load_costs_refused(solve: Any) -> None:
    body = {**BASE, "sources": [{"id": "north", "load_costs": []}, {"id": "south"}]}
    assert _errors(solve, body)[0]["pointer"] == "/sources/0/load_costs"


def test_parallel_arcs_need_the_arc_index(solve: Any) -> None:
    errors = _errors(solve, {**ARCS, "fixed": [{"from": "north", "to": "fridge", "flow": 1}]})
    assert errors[0]["pointer"] == "/fixed/0" and "give the arc index" in errors[0]["detail"]
    status, answer = solve({**ARCS, "fixed": [{"from": "north", "to": "fridge", "flow": 1,
                                               "arc": 1}]})
    assert status == 200, answer
    # the cheaper arc 0 takes one unit, the pin puts the other on arc 1 (by hand: 3 + 5)
    assert answer["objective"] == 8
    assert {(r["arc"], r["flow"], r.get("fixed", False)) for r in answer["allocation"]} == {
        (0, 1, False), (1, 1, True)}


def test_arc_index_must_join_the_pair(solve: Any) -> None:
    body = {**ARCS, "sinks": [{"id": "fridge"}, {"id": "oven"}],
            "fixed": [{"from": "north", "to": "oven", "flow": 1, "arc": 0}]}
    errors = _errors(solve, body)
    assert errors[0]["pointer"] == "/fixed/0/arc"


def _pins_refused(solve: Any, body: dict[str, Any]) -> dict[str, Any]:
    status, doc = solve(body)
    assert status == 422 and doc["type"].endswith(":pins-infeasible"), doc
    witness = doc["witness"]
    assert witness["pinned"] > witness["available"]
    return witness


def test_pin_over_capacity_names_the_pin(solve: Any) -> None:
    w = _pins_refused(solve, {**ARCS, "fixed": [{"from": "north", "to": "fridge", "flow": 2,
                                                 "arc": 0}]})
    assert w == {"pins": ["/fixed/0"], "ids": ["north", "fridge"], "limit": "capacity",
                 "pinned": 2, "available": 1}


def test_pins_over_supply_name_the_source(solve: Any) -> None:
    body = {**BASE, "sinks": [{"id": "fridge", "demand": 3}, {"id": "oven", "demand": 3}],
            "fixed": [{"from": "north", "to": "fridge", "flow": 2},
                      {"from": "north", "to": "oven", "flow": 1}]}
    w = _pins_refused(solve, body)
    # north can send 2 (its supply) and the pins take 3 out of it: by hand
    assert (w["pins"], w["ids"], w["limit"], w["pinned"], w["available"]) == (
        ["/fixed/0", "/fixed/1"], ["north"], "out", 3, 2)


def test_pins_over_demand_name_the_sink(solve: Any) -> None:
    body = {**BASE, "fixed": [{"from": "north", "to": "fridge", "flow": 1},
                              {"from": "south", "to": "fridge", "flow": 1}]}
    w = _pins_refused(solve, body)
    assert (w["pins"], w["ids"], w["limit"], w["pinned"], w["available"]) == (
        ["/fixed/0", "/fixed/1"], ["fridge"], "in", 2, 1)


def test_previous_plan_with_vanished_pairs_is_accepted(solve: Any, verify: Any) -> None:
    body = {**BASE, "previous": {"allocation": [
        {"from": "gone", "to": "fridge", "flow": 1}, {"from": "south", "to": "oven", "flow": 1},
        {"from": "north", "to": "oven", "flow": 1, "cost": 35, "arc": None}],
        "change_penalty": 100}}
    status, answer = solve(body)
    assert status == 200, answer
    # by hand: north->oven kept (35) and north->fridge (20), south idle; 2 of the 3
    # previous units moved (one on a vanished pair)
    assert answer["changes"] == {"kept": 1, "moved": 2, "penalty": 200}
    assert answer["objective"] == 35 + 20 + 200
    status, verdict = verify(body, answer)
    assert status == 200 and verdict["valid"], verdict


@pytest.mark.parametrize("costs", [[], [[]]])
def test_empty_day_with_a_previous_plan(solve: Any, verify: Any, costs: list) -> None:
    """No sources (or no sinks): every previous unit is on a vanished pair, so all move
    (common practice, no source: an empty day is answered, README "Using it")."""
    body = {"sources": [{"id": "north"}] if costs == [[]] else [], "sinks": [] if costs == [[]]
            else [{"id": "fridge"}], "costs": costs,
            "previous": {"allocation": [{"from": "north", "to": "fridge", "flow": 2}],
                         "change_penalty": 1.5},
            "fixed": []}
    status, answer = solve(body)
    assert status == 200, answer
    assert answer["changes"] == {"kept": 0, "moved": 2, "penalty": 3}
    status, verdict = verify(body, answer)
    assert status == 200 and verdict["valid"], verdict


def _extreme(seed: int) -> dict[str, Any]:
    """A small problem with re-planning controls and numbers up to the request bounds."""
    r = random.Random(seed)
    ns, nt = r.randint(0, 5), r.randint(0, 5)
    big = r.choice([1, 10**3, 10**9])
    sinks = []
    for j in range(nt):
        sink: dict[str, Any] = {"id": f"t{j}", "demand": r.randint(0, big)}
        if r.random() < 0.5:
            sink["penalty"] = r.choice([0, 1.5, 10**9])
        sinks.append(sink)
    p: dict[str, Any] = {"sources": [{"id": f"s{i}", "supply": r.randint(0, big)}
                                     for i in range(ns)],
                         "sinks": sinks, "objective": r.choice(["min", "max", "bottleneck"])}
    if r.random() < 0.5:
        p["costs"] = [[r.choice([None, r.randint(-10**9, 10**9), r.random()])
                       for _ in range(nt)] for _ in range(ns)]
    else:
        ids = [f"s{i}" for i in range(ns)] + [f"t{j}" for j in range(nt)]
        arcs = []
        for _ in range(r.randint(0, 8) if ids else 0):
            a, b = r.choice(ids), r.choice(ids)
            if a != b:
                arc: dict[str, Any] = {"from": a, "to": b, "cost": r.randint(-5, 10**9)}
                if r.random() < 0.5:
                    arc["capacity"] = r.randint(0, big)
                arcs.append(arc)
        p["arcs"] = arcs
    if ns and nt and r.random() < 0.6 and p["objective"] != "bottleneck":
        p["fixed"] = [{"from": f"s{r.randrange(ns)}", "to": f"t{r.randrange(nt)}",
                       "flow": r.randint(0, big)} for _ in range(r.randint(1, 3))]
    if r.random() < 0.6:
        p["previous"] = {"allocation": [{"from": f"s{r.randrange(6)}", "to": f"t{r.randrange(6)}",
                                         "flow": r.randint(0, big)}
                                        for _ in range(r.randint(0, 4))],
                         "change_penalty": r.choice([0, 0.25, 10**9])}
    for s in p["sources"]:
        if r.random() < 0.5:
            s["load_costs"] = sorted(r.choice([r.randint(-10**9, 10**9), r.random()])
                                     for _ in range(r.randint(1, 5)))
    return p


@pytest.mark.parametrize("seed", range(200))
def test_extreme_numbers_are_answered_or_refused(seed: int) -> None:
    """Never a 500 (project rule, README "Errors"): every problem is answered with an answer
    the verifier accepts, or refused with a 4xx; duplicate pairs among the pins or the
    previous rows are allowed to be refused."""
    problem = _extreme(seed)
    try:
        answer = solve_body(copy.deepcopy(problem), SETTINGS)
    except ServiceError as e:
        assert e.status < 500, e.detail
        return
    verdict = verify_body({**problem, "answer": json.loads(json.dumps(answer))}, SETTINGS)
    assert verdict["valid"], [c for c in verdict["checks"] if not c["passed"]]
