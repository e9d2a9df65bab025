"""Bad pins, previous plans and load costs: one 422 per message, naming the field."""

from __future__ import annotations

from typing import Any

import pytest

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
