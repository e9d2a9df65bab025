"""The bulk checks of large lists (schemas/tables.py) and the ids they resolve.

Large lists are checked with as few passes as possible: numpy's conversion is the type
check of a number column, a count of keys stands in for the set of all keys, and arc ends
are checked by the lookup that resolves them. Each shortcut has a case it must not let
through; the tests below put one bad entry among many good ones, where a shortcut would
miss it, and expect the answer README "Errors" describes: 422, every bad field named by
its JSON Pointer (RFC 6901).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest
from marshmallow import ValidationError

from schemas import ProblemSchema, to_pointers
from service.errors import InvalidProblem
from service.network.build import build_network
from service.settings import Settings

BIG = 40   # rows and columns: enough entries that the few 0s and 1s are picked out one by one


def errors_of(body: dict[str, Any]) -> list[dict[str, str]]:
    """The field errors of ``body`` as the service answers them (schema, then network)."""
    try:
        data = ProblemSchema().load(body)
    except ValidationError as e:
        return to_pointers(e.messages)
    try:
        build_network(data, Settings())
    except InvalidProblem as e:
        return e.errors
    return []


def pointers(body: dict[str, Any]) -> list[str]:
    return [e["pointer"] for e in errors_of(body)]


def ids(prefix: str, n: int, **extra: Any) -> list[dict[str, Any]]:
    return [{"id": f"{prefix}{i}", **extra} for i in range(n)]


def matrix(cells: list[list[Any]]) -> dict[str, Any]:
    return {"sources": ids("s", len(cells)), "sinks": ids("t", len(cells[0])), "costs": cells}


def wide_costs(low: int = 2) -> list[list[Any]]:
    """BIG x BIG costs from ``low`` up: no 0 or 1 unless ``low`` is below 2."""
    rng = np.random.default_rng(11)
    return rng.integers(low, 50, size=(BIG, BIG)).tolist()


def arc_list(costs: list[Any], **extra: Any) -> dict[str, Any]:
    """One arc per cost, from source i % BIG to sink (7 i) % BIG."""
    return {"sources": ids("s", BIG, supply=BIG), "sinks": ids("t", BIG),
            "arcs": [{"from": f"s{i % BIG}", "to": f"t{7 * i % BIG}", "cost": c}
                     for i, c in enumerate(costs)], **extra}


# -- numbers: conversion and type check in one ----------------------------------------------


@pytest.mark.parametrize("bad", [True, False])
def test_a_boolean_among_numbers_in_a_matrix_is_named(bad):
    cells = wide_costs()
    cells[17][4] = bad
    cells[3][9] = 1 - bad          # a genuine number equal to the other boolean
    assert pointers(matrix(cells)) == ["/costs/17/4"]


def test_a_boolean_in_a_matrix_of_zeros_and_ones_is_named():
    cells = (np.arange(BIG * BIG).reshape(BIG, BIG) % 2).tolist()
    cells[30][31] = True
    assert pointers(matrix(cells)) == ["/costs/30/31"]


@pytest.mark.parametrize("low", [0, 2])
def test_a_boolean_arc_cost_is_named(low):
    costs = np.random.default_rng(5).integers(low, low + 3, size=300).tolist()
    costs[123] = True
    assert pointers(arc_list(costs)) == ["/arcs/123/cost"]


@pytest.mark.parametrize("bad", ["7", "1", None, [3], {"v": 3}, 10**30])
def test_a_non_number_among_many_arc_costs_is_named(bad):
    costs = list(range(2, 302))
    costs[250] = bad
    assert pointers(arc_list(costs)) == ["/arcs/250/cost"]


@pytest.mark.parametrize("bad", ["7", None, [3], 2**64])
def test_a_non_number_among_many_matrix_cells_is_named(bad):
    cells = wide_costs()
    cells[39][0] = bad
    expected = [] if bad is None else ["/costs/39/0"]       # null: the pair is not allowed
    assert pointers(matrix(cells)) == expected


@pytest.mark.parametrize("extreme", [-2**63, 2**63 - 1, -2**63 + 1])
def test_the_extremes_of_64_bit_integers_are_out_of_range(extreme, solve):
    # -2**63 has no positive counterpart in int64 (its magnitude wraps to itself), so a
    # bound check by magnitude would let it through; it once became a 500.
    cells = wide_costs()
    cells[5][6] = extreme
    assert pointers(matrix(cells)) == ["/costs/5/6"]
    costs = list(range(2, 302))
    costs[6] = extreme
    assert pointers(arc_list(costs)) == ["/arcs/6/cost"]
    status, doc = solve({"sources": [{"id": "a"}], "sinks": [{"id": "x"}],
                         "costs": [[extreme]]})
    assert status == 422 and [e["pointer"] for e in doc["errors"]] == ["/costs/0/0"], doc


def test_a_fractional_count_among_many_is_named():
    body = arc_list(list(range(2, 302)))
    for i, arc in enumerate(body["arcs"]):
        arc["capacity"] = 2 + i % 5
    body["arcs"][77]["capacity"] = 2.5
    assert pointers(body) == ["/arcs/77/capacity"]


def test_whole_costs_load_as_integers_and_fractions_as_floats():
    data = ProblemSchema().load(matrix(wide_costs()))
    assert data["costs"].dtype == np.int64
    data = ProblemSchema().load(arc_list(list(range(2, 302))))
    assert data["arcs"].columns["cost"].dtype == np.int64
    data = ProblemSchema().load(arc_list([2.5, *range(3, 302)]))
    assert data["arcs"].columns["cost"].dtype == np.float64


# -- keys: counted, not collected -----------------------------------------------------------


def test_absent_optional_columns_take_their_defaults():
    data = ProblemSchema().load(arc_list(list(range(2, 302))))
    arcs = data["arcs"]
    assert not arcs.present["capacity"].any()
    assert data["sinks"].columns["demand"].tolist() == [1] * BIG
    assert not data["sinks"].present["penalty"].any()


def test_an_unknown_key_in_place_of_an_optional_one_is_named():
    # every arc has as many keys as with a capacity, but one of them is not a capacity
    body = arc_list(list(range(2, 302)))
    for arc in body["arcs"]:
        arc["capacity"] = 3
    body["arcs"][42] = {**body["arcs"][42], "capacity": None}
    del body["arcs"][42]["capacity"]
    body["arcs"][42]["capacty"] = 3
    assert pointers(body) == ["/arcs/42/capacty"]


def test_an_unknown_key_beside_an_explicit_null_is_named():
    body = arc_list(list(range(2, 302)))
    body["arcs"][3]["capacity"] = None                # allowed: unbounded
    body["arcs"][200]["colour"] = "red"
    assert pointers(body) == ["/arcs/200/colour"]


def test_an_unknown_key_in_place_of_a_missing_required_one_is_named_with_it():
    body = arc_list(list(range(2, 302)))
    del body["arcs"][9]["from"]
    body["arcs"][9]["frm"] = "s9"
    assert sorted(pointers(body)) == ["/arcs/9/frm", "/arcs/9/from"]
    assert {e["pointer"]: e["detail"] for e in errors_of(body)}["/arcs/9/from"] == "missing"


def test_explicit_nulls_of_optional_fields_mean_their_defaults():
    body = arc_list(list(range(2, 302)))
    body["sources"][0]["supply"] = None
    body["sinks"][0]["penalty"] = None
    body["arcs"][0]["capacity"] = None
    data = ProblemSchema().load(body)
    assert data["sources"].columns["supply"][0] == 1
    assert not data["sinks"].present["penalty"][0]
    assert not data["arcs"].present["capacity"].any()


def test_a_record_that_is_not_an_object_is_named():
    body = arc_list(list(range(2, 302)))
    body["arcs"][150] = ["s1", "t1", 3]
    assert pointers(body) == ["/arcs/150"]


def test_errors_beyond_the_cap_are_counted():
    body = arc_list(["x"] * 300)
    errors = errors_of(body)
    # schemas.tables.MAX_ERRORS_PER_LIST records, then one line for the rest
    assert len(errors) == 51
    assert errors[-1] == {"pointer": "/arcs", "detail": "250 more records have errors"}


# -- arc ends: resolved and checked by one lookup -------------------------------------------


def test_arc_ends_resolve_to_sources_then_nodes_then_sinks():
    body = {"sources": [{"id": "a"}], "nodes": [{"id": "h"}], "sinks": [{"id": "x"}],
            "arcs": [{"from": "a", "to": "h", "cost": 1}, {"from": "h", "to": "x", "cost": 1},
                     {"from": "x", "to": "a", "cost": 5}]}
    arcs = ProblemSchema().load(body)["arcs"]
    assert arcs.resolved["from"].tolist() == [0, 1, 2]
    assert arcs.resolved["to"].tolist() == [1, 2, 0]


@pytest.mark.parametrize("end", ["", 7, None, True, ["s1"], {"id": "s1"}])
def test_an_arc_end_that_is_no_string_is_named(end):
    body = arc_list(list(range(2, 302)))
    body["arcs"][260]["to"] = end
    assert [(e["pointer"], e["detail"]) for e in errors_of(body)] == [
        ("/arcs/260/to", "must be a non-empty string")]


def test_an_arc_end_naming_no_id_is_an_unknown_id():
    body = arc_list(list(range(2, 302)))
    body["arcs"][260]["from"] = "t1x"
    assert errors_of(body) == [{"pointer": "/arcs/260/from", "detail": "unknown id 't1x'"}]


def test_bad_ends_are_named_with_the_other_errors_of_the_arcs():
    body = arc_list(list(range(2, 302)))
    body["arcs"][4]["to"] = 4
    body["arcs"][8]["cost"] = "cheap"
    body["objective"] = "up"
    assert pointers(body) == ["/arcs/4/to", "/arcs/8/cost", "/objective"]


def test_bad_ends_are_named_beside_bad_ids():
    # the ids cannot be resolved against, so the ends are checked on their own
    body = arc_list(list(range(2, 302)))
    body["sources"][0]["id"] = 0
    body["arcs"][0]["from"] = 0
    body["arcs"][1]["from"] = "s0"       # a string: a later, cross-field error at most
    assert pointers(body) == ["/sources/0/id", "/arcs/0/from"]


def test_a_duplicate_id_is_reported_before_the_arcs_are_used():
    body = arc_list(list(range(2, 302)))
    body["sinks"][3]["id"] = "s3"
    assert pointers(body) == ["/sinks/3/id"]
