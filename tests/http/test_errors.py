"""Every way a request can be refused: one RFC 9457 problem document per error path.

Each test sends one bad request and checks the status, the media type, the four RFC 9457
members and, for field errors, the exact JSON Pointers (RFC 6901) of the culprits. After
each refusal the same app must still solve a good problem: a bad request may not leave the
service in a bad state, and no bad input may ever be answered with 500.
"""

from __future__ import annotations

import json
from dataclasses import fields
from typing import Any

import examples
import pytest
from flask.testing import FlaskClient

from service.app import create_app
from service.settings import ENV_PREFIX, Settings

#: The scipy.optimize.linear_sum_assignment docstring example; its optimum is 5.
GOOD = {
    "sources": [{"id": "r0"}, {"id": "r1"}, {"id": "r2"}],
    "sinks": [{"id": "c0"}, {"id": "c1"}, {"id": "c2"}],
    "costs": [[4, 1, 3], [2, 0, 5], [3, 2, 2]],
}

#: A one-arc problem in the arc-list form, for errors that only arcs can have.
ARCS = {
    "sources": [{"id": "a"}],
    "sinks": [{"id": "x"}],
    "arcs": [{"from": "a", "to": "x", "cost": 1}],
}

JSON = "application/json"


@pytest.fixture(autouse=True)
def clean_env(monkeypatch: pytest.MonkeyPatch) -> None:
    # Several tests build their own app with one small limit; the shell must not add others.
    for f in fields(Settings):
        if f.name != "data_dir":                 # the session's temporary store
            monkeypatch.delenv(ENV_PREFIX + f.name.upper(), raising=False)


def problem_with(base: dict[str, Any] = GOOD, **changes: Any) -> dict[str, Any]:
    body = json.loads(json.dumps(base))
    body.update(changes)
    return body


def without(base: dict[str, Any], key: str) -> dict[str, Any]:
    return {k: v for k, v in base.items() if k != key}


def send(client: FlaskClient, body: Any, path: str = "/v1/solve") -> Any:
    # json.dumps, not the client's json=: it must write 10**30 and other edge values as given.
    return client.post(path, data=json.dumps(body), content_type=JSON)


def assert_problem(client: FlaskClient, resp: Any, status: int,
                   slug: str | None = None) -> dict[str, Any]:
    """Check one problem document, then that the app still answers a good request."""
    assert resp.status_code == status, resp.get_data(as_text=True)
    assert resp.mimetype == "application/problem+json"
    doc = json.loads(resp.data)
    assert isinstance(doc["type"], str) and doc["type"]
    assert isinstance(doc["title"], str) and doc["title"]
    assert doc["status"] == status
    assert isinstance(doc["detail"], str) and doc["detail"]
    if slug is not None:
        assert doc["type"].endswith(slug), doc["type"]
    good = send(client, GOOD)
    assert good.status_code == 200, good.get_data(as_text=True)
    assert good.get_json()["objective"] == 5
    return doc


def assert_invalid(client: FlaskClient, body: Any, pointers: list[str],
                   path: str = "/v1/solve") -> dict[str, Any]:
    """422 invalid-problem whose ``errors`` name exactly ``pointers`` (any order)."""
    doc = assert_problem(client, send(client, body, path), 422, "invalid-problem")
    got = [e["pointer"] for e in doc["errors"]]
    assert sorted(got) == sorted(pointers), doc["errors"]
    for e in doc["errors"]:
        assert isinstance(e["detail"], str) and e["detail"]
    return doc


def detail_at(doc: dict[str, Any], pointer: str) -> str:
    return next(e["detail"] for e in doc["errors"] if e["pointer"] == pointer)


# -- the body is not JSON ---------------------------------------------------------------------


def test_malformed_json_is_400(client):
    resp = client.post("/v1/solve", data=b'{"sources": [', content_type=JSON)
    assert_problem(client, resp, 400, "malformed-json")


def test_invalid_utf8_is_400(client):
    body = b'{"sources": [{"id": "\xff\xfe"}], "sinks": [{"id": "x"}], "costs": [[1]]}'
    resp = client.post("/v1/solve", data=body, content_type=JSON)
    assert_problem(client, resp, 400, "malformed-json")


@pytest.mark.parametrize("literal", ["NaN", "Infinity", "-Infinity"])
def test_non_finite_literals_are_400(client, literal):
    # Python's json module would accept these; JSON (RFC 8259) does not.
    body = '{"sources": [{"id": "a"}], "sinks": [{"id": "x"}], "costs": [[' + literal + "]]}"
    resp = client.post("/v1/solve", data=body, content_type=JSON)
    assert_problem(client, resp, 400, "malformed-json")


@pytest.mark.parametrize("where", ["top", "inside a field"])
def test_deeply_nested_body_is_400_not_a_crash(client, where):
    deep = "[" * 5000 + "]" * 5000
    body = deep if where == "top" else '{"sources": ' + deep + "}"
    resp = client.post("/v1/solve", data=body, content_type=JSON)
    assert_problem(client, resp, 400, "malformed-json")


def test_body_over_max_body_bytes_is_413():
    client = create_app({"TESTING": True, "MAX_BODY_BYTES": 1000}).test_client()
    body = problem_with(sources=[{"id": "r" * 1200}, {"id": "r1"}, {"id": "r2"}])
    assert_problem(client, send(client, body), 413)


def test_good_body_under_max_body_bytes_still_solves():
    # The limit must not refuse what fits: the GOOD problem is well under 1000 bytes.
    client = create_app({"TESTING": True, "MAX_BODY_BYTES": 1000}).test_client()
    assert len(json.dumps(GOOD)) < 1000
    assert send(client, GOOD).status_code == 200


# -- transport: media type, path, method ------------------------------------------------------


def test_text_plain_is_415(client):
    resp = client.post("/v1/solve", data=json.dumps(GOOD), content_type="text/plain")
    doc = assert_problem(client, resp, 415, "unsupported-media-type")
    assert "text/plain" in doc["detail"]


def test_no_content_type_is_415(client):
    resp = client.post("/v1/solve", data=json.dumps(GOOD))
    assert_problem(client, resp, 415, "unsupported-media-type")


def test_unknown_path_is_404_problem_document(client):
    doc = assert_problem(client, client.get("/v1/nowhere"), 404)
    # RFC 9457 section 4.2.1: with type about:blank the title is the HTTP status phrase.
    assert doc["type"] == "about:blank"
    assert doc["title"] == "Not Found"


def test_get_on_solve_is_405_with_allow(client):
    resp = client.get("/v1/solve")
    doc = assert_problem(client, resp, 405)
    assert doc["type"] == "about:blank"
    assert doc["title"] == "Method Not Allowed"
    # RFC 9110 section 15.5.6: a 405 must say which methods the resource supports.
    assert "POST" in resp.headers["Allow"]


# -- the body is JSON but not a problem -------------------------------------------------------


@pytest.mark.parametrize("body", [[GOOD], [], "sources", 5, True, None])
def test_body_not_an_object_is_422_at_the_root(client, body):
    # Only the root is wrong: no field errors may be invented for an object that is absent.
    doc = assert_invalid(client, body, [""])
    assert "invalid input type" in detail_at(doc, "")


def test_missing_sources(client):
    doc = assert_invalid(client, without(GOOD, "sources"), ["/sources"])
    assert "missing" in detail_at(doc, "/sources")


@pytest.mark.parametrize("body", [problem_with(ARCS, sources=[], arcs=[]),
                                  problem_with(sources=[], costs=[]),
                                  problem_with(sinks=[], costs=[[], [], []])],
                         ids=["no sources, arcs", "no sources, matrix", "no sinks, matrix"])
def test_an_empty_day_is_no_error(client, body):
    # DESIGN 5: no sources or no sinks is an empty day, answered with an empty allocation
    # (the answer's exactness is checked in tests/check/test_exact_edges.py)
    resp = send(client, body)
    assert resp.status_code == 200, resp.get_json()
    assert resp.get_json()["allocation"] == []


def test_no_sources_but_matrix_rows(client):
    doc = assert_invalid(client, problem_with(sources=[]), ["/costs"])
    assert "expected 0" in detail_at(doc, "/costs")


def test_no_sinks_but_matrix_columns(client):
    doc = assert_invalid(client, problem_with(sinks=[]), ["/costs/0"])
    assert "expected 0" in detail_at(doc, "/costs/0")


@pytest.mark.parametrize(("change", "pointer"), [
    ({"sources": [{"id": "r0", "supply": "2"}, {"id": "r1"}, {"id": "r2"}]},
     "/sources/0/supply"),
    ({"costs": [[4, "1", 3], [2, 0, 5], [3, 2, 2]]}, "/costs/0/1"),
    ({"sinks": [{"id": "c0"}, {"id": "c1", "penalty": "3"}, {"id": "c2"}]}, "/sinks/1/penalty"),
])
def test_string_for_a_number(client, change, pointer):
    assert_invalid(client, problem_with(**change), [pointer])


def test_string_for_an_arc_cost(client):
    body = problem_with(ARCS, arcs=[{"from": "a", "to": "x", "cost": "1"}])
    assert_invalid(client, body, ["/arcs/0/cost"])


@pytest.mark.parametrize(("change", "pointer"), [
    ({"sinks": [{"id": "c0"}, {"id": "c1", "demand": True}, {"id": "c2"}]}, "/sinks/1/demand"),
    ({"costs": [[4, 1, 3], [False, 0, 5], [3, 2, 2]]}, "/costs/1/0"),
])
def test_boolean_for_a_number(client, change, pointer):
    # JSON true is not 1: a boolean where a number belongs is a caller's mistake.
    assert_invalid(client, problem_with(**change), [pointer])



@pytest.mark.parametrize(("body", "pointer"), [
    (problem_with(costs=[[4, 1, 3], [2, 0, 5], [3, 2, 10**30]]), "/costs/2/2"),
    (problem_with(sinks=[{"id": "c0"}, {"id": "c1", "penalty": 10**30}, {"id": "c2"}]),
     "/sinks/1/penalty"),
    (problem_with(ARCS, arcs=[{"from": "a", "to": "x", "cost": -10**30}]), "/arcs/0/cost"),
    pytest.param(problem_with(sources=[{"id": "r0", "supply": 10**30}, {"id": "r1"},
                                       {"id": "r2"}]),
                 "/sources/0/supply"),
    pytest.param(problem_with(sinks=[{"id": "c0", "demand": 10**30}, {"id": "c1"},
                                     {"id": "c2"}]),
                 "/sinks/0/demand"),
    pytest.param(problem_with(ARCS, arcs=[{"from": "a", "to": "x", "cost": 1,
                                           "capacity": 10**30}]),
                 "/arcs/0/capacity"),
], ids=["cost-cell", "penalty", "arc-cost", "supply", "demand", "capacity"])
def test_huge_integer_is_422_naming_the_range(client, body, pointer):
    doc = assert_invalid(client, body, [pointer])
    assert "1000000000" in detail_at(doc, pointer)


def test_negative_supply(client):
    body = problem_with(sources=[{"id": "r0"}, {"id": "r1", "supply": -1}, {"id": "r2"}])
    doc = assert_invalid(client, body, ["/sources/1/supply"])
    assert "from 0 to" in detail_at(doc, "/sources/1/supply")


def test_fractional_demand(client):
    body = problem_with(sinks=[{"id": "c0"}, {"id": "c1"}, {"id": "c2", "demand": 1.5}])
    doc = assert_invalid(client, body, ["/sinks/2/demand"])
    assert "whole number" in detail_at(doc, "/sinks/2/demand")


def test_unknown_field_at_the_top(client):
    assert_invalid(client, problem_with(colour="red"), ["/colour"])


def test_unknown_field_inside_a_sink(client):
    body = problem_with(sinks=[{"id": "c0"}, {"id": "c1", "colour": "red"}, {"id": "c2"}])
    assert_invalid(client, body, ["/sinks/1/colour"])


def test_duplicate_id_across_sources_and_sinks(client):
    body = problem_with(sinks=[{"id": "c0"}, {"id": "r1"}, {"id": "c2"}])
    doc = assert_invalid(client, body, ["/sinks/1/id"])
    # The message points back at the first use, so the caller can see both.
    assert "/sources/1/id" in detail_at(doc, "/sinks/1/id")


def test_empty_id(client):
    body = problem_with(sources=[{"id": "r0"}, {"id": ""}, {"id": "r2"}])
    assert_invalid(client, body, ["/sources/1/id"])


@pytest.mark.parametrize(("arc", "pointer"), [
    ({"from": "ghost", "to": "x", "cost": 1}, "/arcs/1/from"),
    ({"from": "a", "to": "ghost", "cost": 1}, "/arcs/1/to"),
])
def test_unknown_id_in_an_arc(client, arc, pointer):
    body = problem_with(ARCS, arcs=[ARCS["arcs"][0], arc])
    doc = assert_invalid(client, body, [pointer])
    assert "ghost" in detail_at(doc, pointer)


def test_self_loop_arc(client):
    body = problem_with(ARCS, arcs=[ARCS["arcs"][0], {"from": "x", "to": "x", "cost": 1}])
    assert_invalid(client, body, ["/arcs/1"])


def test_ragged_cost_matrix(client):
    assert_invalid(client, problem_with(costs=[[4, 1, 3], [2, 0], [3, 2, 2]]), ["/costs/1"])


def test_matrix_row_count_differs_from_sources(client):
    doc = assert_invalid(client, problem_with(costs=[[4, 1, 3], [2, 0, 5]]), ["/costs"])
    assert "expected 3" in detail_at(doc, "/costs")


def test_matrix_column_count_differs_from_sinks(client):
    body = problem_with(costs=[[4, 1], [2, 0], [3, 2]])
    doc = assert_invalid(client, body, ["/costs/0"])
    assert "expected 3" in detail_at(doc, "/costs/0")


def test_both_costs_and_arcs(client):
    body = problem_with(arcs=[{"from": "r0", "to": "c0", "cost": 1}])
    assert_invalid(client, body, ["/arcs"])


def test_neither_costs_nor_arcs(client):
    assert_invalid(client, without(GOOD, "costs"), ["/costs"])


def test_nodes_without_arcs(client):
    assert_invalid(client, problem_with(nodes=[{"id": "hub"}]), ["/nodes"])


@pytest.mark.parametrize(("key", "value"), [("objective", "maximise"),
                                            ("unmet_demand", "ignore")])
def test_value_outside_an_enumeration(client, key, value):
    doc = assert_invalid(client, problem_with(**{key: value}), [f"/{key}"])
    assert "must be one of" in detail_at(doc, f"/{key}")


def test_negative_capacity(client):
    body = problem_with(ARCS, arcs=[{"from": "a", "to": "x", "cost": 1, "capacity": -2}])
    assert_invalid(client, body, ["/arcs/0/capacity"])


def test_id_too_long(client):
    body = problem_with(sources=[{"id": "r0"}, {"id": "r" * 201}, {"id": "r2"}])
    doc = assert_invalid(client, body, ["/sources/1/id"])
    assert "200" in detail_at(doc, "/sources/1/id")


def test_id_length_follows_the_setting():
    client = create_app({"TESTING": True, "MAX_ID_LENGTH": 2}).test_client()
    doc = assert_invalid(client, problem_with(sinks=[{"id": "c0"}, {"id": "c1"}, {"id": "c22"}]),
                         ["/sinks/2/id"])
    assert "at most 2" in detail_at(doc, "/sinks/2/id")


def test_several_bad_fields_are_all_listed(client):
    body = problem_with(
        sources=[{"id": "r0", "supply": -1}, {"id": "r1", "supply": "many"}, {"id": "r2"}],
        sinks=[{"id": "c0", "demand": 0.5}, {"id": "c1"}, {"id": "c2", "penalty": None,
                                                          "colour": "red"}],
        objective="up",
    )
    doc = assert_invalid(client, body, ["/sources/0/supply", "/sources/1/supply",
                                        "/sinks/0/demand", "/sinks/2/colour", "/objective"])
    # The summary names the first culprit and says how many more follow.
    assert "(and 4 more)" in doc["detail"]


# -- size limits of the server ----------------------------------------------------------------


@pytest.mark.parametrize("setting", ["MAX_ARCS", "MAX_CELLS", "MAX_NODES"])
def test_over_a_size_limit_is_413_naming_the_setting(setting):
    # Limits just above GOOD's size (9 cells, 6 nodes) so that GOOD still solves afterwards.
    client = create_app({"TESTING": True, setting: 9}).test_client()
    big = {
        "MAX_ARCS": problem_with(ARCS, arcs=[{"from": "a", "to": "x", "cost": c}
                                             for c in range(10)]),
        "MAX_CELLS": problem_with(sinks=GOOD["sinks"] + [{"id": "c3"}],
                                  costs=[row + [1] for row in GOOD["costs"]]),
        "MAX_NODES": {"sources": [{"id": f"s{i}"} for i in range(5)],
                      "sinks": [{"id": f"t{i}"} for i in range(5)],
                      "costs": [[1] * 5 for _ in range(5)]},
    }[setting]
    doc = assert_problem(client, send(client, big), 413, "too-large")
    assert setting in doc["detail"]
    assert doc["limit"] == 9


# -- problems that are well formed but cannot be solved ---------------------------------------


#: s -> u -> v -> t with a loop u -> v -> u of cost -3 + 1 per turn and no capacities.
LOOP = {
    "sources": [{"id": "s"}],
    "nodes": [{"id": "u"}, {"id": "v"}],
    "sinks": [{"id": "t"}],
    "arcs": [{"from": "s", "to": "u", "cost": 1}, {"from": "u", "to": "v", "cost": -3},
             {"from": "v", "to": "u", "cost": 1}, {"from": "v", "to": "t", "cost": 1}],
}


def _assert_cycle_of(doc: dict[str, Any], problem: dict[str, Any]) -> None:
    cycle = doc["cycle"]
    assert set(cycle) == {"u", "v"}
    # The ids must follow arcs of the request, closing back on the first.
    arcs = {(a["from"], a["to"]) for a in problem["arcs"] if a.get("capacity") is None}
    for here, there in zip(cycle, cycle[1:] + cycle[:1], strict=True):
        assert (here, there) in arcs


def test_unbounded_negative_cycle_is_422_naming_the_cycle(client):
    doc = assert_problem(client, send(client, LOOP), 422, "unbounded")
    _assert_cycle_of(doc, LOOP)


def test_unbounded_positive_cycle_when_maximising(client):
    flipped = problem_with(LOOP, objective="max",
                           arcs=[{**a, "cost": -a["cost"]} for a in LOOP["arcs"]])
    doc = assert_problem(client, send(client, flipped), 422, "unbounded")
    _assert_cycle_of(doc, flipped)


def test_a_capped_negative_cycle_is_solvable(client):
    # The same loop with a capacity on u -> v can only be turned 5 times: not unbounded.
    capped = problem_with(LOOP, arcs=[{**a, "capacity": 5} if a["from"] == "u" else a
                                      for a in LOOP["arcs"]])
    resp = send(client, capped)
    assert resp.status_code == 200
    # s->u->v->t costs 1 - 3 + 1, then four more turns u->v->u gain 2 each: -1 - 8.
    assert resp.get_json()["objective"] == -9


#: Sinks X and Y need 6 + 4 = 10. Only A (supply 5, unbounded arcs to X and Y) and the arc
#: B -> X (capacity 2) reach them: 7 at most, so 3 short. Z is served by B alone.
SHORT = {**examples.SHORT, "unmet_demand": "reject"}


def test_rejected_shortfall_is_422_with_the_witness(client):
    doc = assert_problem(client, send(client, SHORT), 422, "infeasible")
    w = doc["witness"]
    assert sorted(w["sinks"]) == ["X", "Y"]
    assert w["sources"] == ["A"]
    assert w["arcs"] == [{"from": "B", "to": "X", "capacity": 2}]
    assert (w["demand"], w["capacity"], w["shortfall"]) == (10, 7, 3)


def test_rejected_assignment_with_too_few_sources(client):
    # Three unit tickets, two unit agents: whatever the costs, one ticket waits.
    body = {"sources": [{"id": "a1"}, {"id": "a2"}],
            "sinks": [{"id": "t1"}, {"id": "t2"}, {"id": "t3"}],
            "costs": [[1, 2, 3], [4, 5, 6]], "unmet_demand": "reject"}
    doc = assert_problem(client, send(client, body), 422, "infeasible")
    w = doc["witness"]
    assert (w["demand"], w["capacity"], w["shortfall"]) == (3, 2, 1)
    assert w["demand"] - w["capacity"] == w["shortfall"]


def test_the_same_shortfall_without_reject_is_answered(client):
    resp = send(client, without(SHORT, "unmet_demand"))
    assert resp.status_code == 200
    answer = resp.get_json()
    assert answer["certificate"]["hard_shortfall"] == 3
    # Y's only way in is full: it waits for capacity (README "Why a sink waits")
    assert answer["unmet"] == [{"id": "Y", "amount": 3, "hard": True, "reason": "capacity"}]


# -- no bad input gives 500 -------------------------------------------------------------------

#: A problem using every optional field, so each one can be broken in turn.
FULL = {
    "sources": [{"id": "a", "supply": 2}],
    "nodes": [{"id": "h"}],
    "sinks": [{"id": "x", "demand": 1, "penalty": 2.5}],
    "arcs": [{"from": "a", "to": "h", "cost": 1, "capacity": 3},
             {"from": "h", "to": "x", "cost": 0.5}],
    "objective": "min",
    "unmet_demand": "minimize",
}

#: Wrong values of every JSON type. Numbers beyond 1e9 are left to the huge-integer test
#: above.
WRONG = [None, True, "", "text", -1, 0.5, 1e9 + 1, [], [None], [{}], {}, {"id": "a"}]


def _paths(doc: Any, here: tuple = ()) -> list[tuple]:
    out = [here] if here else []
    if isinstance(doc, dict):
        for k, v in doc.items():
            out += _paths(v, (*here, k))
    elif isinstance(doc, list):
        for i, v in enumerate(doc):
            out += _paths(v, (*here, i))
    return out


def _replace(doc: Any, path: tuple, value: Any) -> Any:
    doc = json.loads(json.dumps(doc))
    target = doc
    for key in path[:-1]:
        target = target[key]
    target[path[-1]] = value
    return doc


@pytest.mark.parametrize("path", _paths(FULL), ids=lambda p: "/".join(map(str, p)))
def test_any_wrong_value_anywhere_is_4xx(client, path):
    for value in WRONG:
        resp = send(client, _replace(FULL, path, value))
        assert resp.status_code in (200, 400, 413, 422), (path, value, resp.get_data())
        if resp.status_code != 200:
            assert resp.mimetype == "application/problem+json"
    assert send(client, GOOD).status_code == 200


@pytest.mark.parametrize("path", ["/v1/solve", "/healthz"])
def test_options_is_405_like_any_method_the_spec_does_not_list(client, path):
    # openapi.yaml documents every method a route answers; OPTIONS is none of them.
    response = client.open(path, method="OPTIONS")
    assert response.status_code == 405
    assert response.content_type == "application/problem+json"
    assert "OPTIONS" not in response.headers["Allow"]
