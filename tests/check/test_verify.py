"""POST /v1/verify: real optimal answers pass, and every kind of tampering is caught by name.

Each tampering starts from an answer the service itself produced and changes one thing;
where a change would also break bookkeeping (unmet, unused, objective), the bookkeeping is
repaired so that the check under test is the one that must catch it.
"""

from __future__ import annotations

import copy
import json
from typing import Any

import examples
import numpy as np
import pytest
from scipy.optimize import linear_sum_assignment
from servers import without_decision

from service.app import create_app

#: The scipy.optimize.linear_sum_assignment docstring example.
LSA_COSTS = [[4, 1, 3], [2, 0, 5], [3, 2, 2]]
LSA = {
    "sources": [{"id": "r0"}, {"id": "r1"}, {"id": "r2"}],
    "sinks": [{"id": "c0"}, {"id": "c1"}, {"id": "c2"}],
    "costs": LSA_COSTS,
}

#: A plant ships through a hub (capacity 6) or directly; a mill ships directly.
#: Worked by hand: east (2, hard) can only come from the mill (cost 6); the mill's last unit
#: goes to north (4). The hub's 6 units serve north 4 (2 each) and south 2 (3 each); the
#: remaining 2 units of south would cost 9 each directly, more than the penalty 6, so they are
#: left unmet: 6 + 4 + 4 + 4 + 6 + 12 = 36.
FLOW = {
    "sources": [{"id": "plant", "supply": 8}, {"id": "mill", "supply": 3}],
    "nodes": [{"id": "hub"}],
    "sinks": [{"id": "north", "demand": 5}, {"id": "south", "demand": 4, "penalty": 6},
              {"id": "east", "demand": 2}],
    "arcs": [{"from": "plant", "to": "hub", "cost": 1, "capacity": 6},
             {"from": "hub", "to": "north", "cost": 1},
             {"from": "hub", "to": "south", "cost": 2},
             {"from": "plant", "to": "south", "cost": 9},
             {"from": "mill", "to": "north", "cost": 4, "capacity": 2},
             {"from": "mill", "to": "east", "cost": 3}],
}

#: Hard sinks X and Y need 10; only A (supply 5) and B -> X (capacity 2) reach them: 3 short.
SHORT = examples.SHORT

#: Checks that prove least cost; a feasible but dearer answer must fail some of these only.
# unmet_reasons: a penalty row's reduced_cost is read from the potentials
OPTIMALITY = {"dual_feasibility", "complementary_slackness", "dual_objective", "unmet_reasons"}


def solved(solve, problem: dict[str, Any]) -> dict[str, Any]:
    status, answer = solve(problem)
    assert status == 200, answer
    return answer


def failed(result: dict[str, Any]) -> set[str]:
    return {c["name"] for c in result["checks"] if not c["passed"]}


def detail(result: dict[str, Any], name: str) -> str:
    return next(c["detail"] for c in result["checks"] if c["name"] == name)


def checked(verify, problem: dict[str, Any], answer: dict[str, Any]) -> dict[str, Any]:
    status, result = verify(problem, answer)
    assert status == 200, result
    assert result["valid"] == (not failed(result))
    return result


def row(answer: dict[str, Any], src: str, dst: str) -> dict[str, Any]:
    return next(r for r in answer["allocation"] if r["from"] == src and r["to"] == dst)


@pytest.fixture
def lsa(solve) -> dict[str, Any]:
    return solved(solve, LSA)


@pytest.fixture
def flow(solve) -> dict[str, Any]:
    return solved(solve, FLOW)


@pytest.fixture
def short(solve) -> dict[str, Any]:
    return solved(solve, SHORT)


# -- real answers verify ----------------------------------------------------------------------


def test_assignment_answer_is_optimal_and_verifies(lsa, verify):
    # Cross-check against scipy itself: the docstring states the optimum 5.
    r, c = linear_sum_assignment(np.array(LSA_COSTS))
    assert lsa["objective"] == int(np.array(LSA_COSTS)[r, c].sum()) == 5
    result = checked(verify, LSA, lsa)
    assert result["valid"] is True
    names = {c["name"] for c in result["checks"]}
    assert {"objective", "shortfall_cut", "complementary_slackness", "dual_objective"} <= names


def test_maximising_answer_verifies(solve, verify):
    problem = {**LSA, "objective": "max"}
    answer = solved(solve, problem)
    r, c = linear_sum_assignment(np.array(LSA_COSTS), maximize=True)
    assert answer["objective"] == int(np.array(LSA_COSTS)[r, c].sum()) == 11
    assert answer["certificate"]["negated"] is True
    assert checked(verify, problem, answer)["valid"] is True


def test_transshipment_answer_matches_the_hand_optimum_and_verifies(flow, verify):
    assert flow["objective"] == 36
    # plant has 2 spare and reaches south (9 a unit, over its penalty 6): it waits for its
    # penalty; south is half served, so its waiting arc is strictly between its bounds and
    # its reduced cost is 0 (complementary slackness, common practice, no source)
    assert flow["unmet"] == [{"id": "south", "amount": 2, "hard": False, "reason": "penalty",
                              "reduced_cost": 0}]
    assert flow["unused"] == [{"id": "plant", "amount": 2}]
    assert checked(verify, FLOW, flow)["valid"] is True


def test_answer_with_a_shortfall_verifies_with_its_cut(short, verify):
    cut = short["certificate"]["cut"]
    assert short["certificate"]["hard_shortfall"] == 3
    assert sorted(cut["sink_side"]) == ["A", "X", "Y"]
    assert checked(verify, SHORT, short)["valid"] is True


def test_only_the_answer_members_are_needed(lsa, verify):
    # status, shape, solver and flow_value are informative; a hand-made answer may omit them.
    bare = {k: lsa[k] for k in ("allocation", "unmet", "unused", "objective", "certificate")}
    assert checked(verify, LSA, bare)["valid"] is True


#: The docstring example divided by 10, maximised, with a soft sink: costs off the integers.
FRACTIONAL = {
    "sources": [{"id": "r0"}, {"id": "r1"}, {"id": "r2"}],
    "sinks": [{"id": "c0"}, {"id": "c1"}, {"id": "c2", "penalty": 0.35}],
    "costs": [[c / 10 for c in r] for r in LSA_COSTS],
    "objective": "max",
}


def test_fractional_maximising_answer_verifies(solve, verify):
    answer = solved(solve, FRACTIONAL)
    r, c = linear_sum_assignment(np.array(LSA_COSTS), maximize=True)
    assert answer["objective"] == pytest.approx(np.array(LSA_COSTS)[r, c].sum() / 10)
    assert checked(verify, FRACTIONAL, answer)["valid"] is True


def test_fractional_objective_off_by_one_grid_step_is_caught(solve, verify):
    # Costs are exact to 6 decimals, so 1e-6 is a whole step of the grid, not noise.
    t = solved(solve, FRACTIONAL)
    t["objective"] += 1e-6
    assert failed(checked(verify, FRACTIONAL, t)) == {"objective"}


# -- tampering: each is caught, by the right check ---------------------------------------------


def test_dropping_a_unit_is_caught(lsa, verify):
    t = copy.deepcopy(lsa)
    t["allocation"] = [r for r in t["allocation"] if r["from"] != "r2"]
    result = checked(verify, LSA, t)
    assert {"unmet", "unused", "objective"} <= failed(result)
    assert "c2" in detail(result, "unmet")


def test_swapping_onto_dearer_cells_fails_only_optimality(lsa, verify):
    # r0 -> c0 and r1 -> c1 instead of r0 -> c1 and r1 -> c0: still a full matching, costs 6.
    t = copy.deepcopy(lsa)
    t["allocation"] = [{"from": "r0", "to": "c0", "flow": 1, "cost": 4},
                       {"from": "r1", "to": "c1", "flow": 1, "cost": 0},
                       row(lsa, "r2", "c2")]
    t["objective"] = 6
    t["certificate"]["dual_objective"] = 6
    result = checked(verify, LSA, t)
    assert failed(result) and failed(result) <= OPTIMALITY
    assert "r0 -> c0" in detail(result, "complementary_slackness")


def test_routing_a_unit_over_a_dear_arc_fails_only_optimality(flow, verify):
    # Serve one more unit of south directly from the plant (9) instead of paying the penalty
    # (6): feasible, bookkeeping repaired, 3 dearer.
    t = copy.deepcopy(flow)
    t["allocation"].append({"from": "plant", "to": "south", "flow": 1, "cost": 9, "arc": 3})
    t["unmet"] = [{"id": "south", "amount": 1}]
    t["unused"] = [{"id": "plant", "amount": 1}]
    t["objective"] = 39
    t["flow_value"] = 10
    result = checked(verify, FLOW, t)
    assert failed(result) and failed(result) <= OPTIMALITY
    assert "plant -> south" in detail(result, "complementary_slackness")


def test_changing_the_objective_is_caught(lsa, verify):
    t = copy.deepcopy(lsa)
    t["objective"] = 6
    assert failed(checked(verify, LSA, t)) == {"objective"}


def test_changing_the_dual_objective_is_caught(lsa, verify):
    t = copy.deepcopy(lsa)
    t["certificate"]["dual_objective"] = 4
    assert failed(checked(verify, LSA, t)) == {"dual_objective"}


@pytest.mark.parametrize("node", ["r0", "c1"])
def test_changing_one_potential_is_caught(lsa, verify, node):
    t = copy.deepcopy(lsa)
    t["certificate"]["potentials"][node] += 1
    result = checked(verify, LSA, t)
    assert failed(result) and failed(result) <= OPTIMALITY


@pytest.mark.parametrize("node", ["super_source", "super_sink"])
def test_changing_a_virtual_potential_is_caught(flow, verify, node):
    t = copy.deepcopy(flow)
    t["certificate"]["virtual_potentials"][node] += 1
    result = checked(verify, FLOW, t)
    assert failed(result) and failed(result) <= OPTIMALITY


def test_a_missing_potential_is_caught(lsa, verify):
    t = copy.deepcopy(lsa)
    del t["certificate"]["potentials"]["c2"]
    result = checked(verify, LSA, t)
    assert "potentials" in failed(result)
    assert "c2" in detail(result, "potentials")


def test_claiming_a_smaller_shortfall_with_a_wrong_cut_is_caught(short, verify):
    # Everything on the sink side: 13 hard demand against 15 supply proves nothing short.
    t = copy.deepcopy(short)
    t["certificate"]["hard_shortfall"] = 2
    t["certificate"]["cut"] = {"sink_side": ["A", "B", "X", "Y", "Z"]}
    result = checked(verify, SHORT, t)
    assert {"hard_shortfall", "shortfall_cut"} <= failed(result)


@pytest.mark.parametrize(("sink_side", "why"), [
    (["X", "Y"], "unbounded arc A -> X crosses"),      # A's unbounded arcs cross into the side
    (["A", "Y"], "proves 0 short"),                    # only Y: 4 needed, 5 available
    (["A", "X", "Y", "ghost"], "unknown id"),
])
def test_a_wrong_cut_alone_is_caught(short, verify, sink_side, why):
    t = copy.deepcopy(short)
    t["certificate"]["cut"]["sink_side"] = sink_side
    result = checked(verify, SHORT, t)
    assert failed(result) == {"shortfall_cut"}
    assert why in detail(result, "shortfall_cut")


@pytest.mark.parametrize("change", [{"demand": 20, "capacity": 17}, {"sinks": ["Z"]}])
def test_false_numbers_in_the_cut_are_caught(short, verify, change):
    t = copy.deepcopy(short)
    t["certificate"]["cut"].update(change)
    assert failed(checked(verify, SHORT, t)) == {"shortfall_cut"}


def test_flipping_negated_is_caught(lsa, verify):
    t = copy.deepcopy(lsa)
    t["certificate"]["negated"] = True
    assert failed(checked(verify, LSA, t)) == {"sense"}


def test_a_row_naming_an_unknown_id_is_caught(lsa, verify):
    t = copy.deepcopy(lsa)
    t["allocation"][0]["to"] = "ghost"
    result = checked(verify, LSA, t)
    assert "allocation_arcs" in failed(result)
    assert "row 0" in detail(result, "allocation_arcs")


def test_a_row_on_a_forbidden_pair_is_caught(solve, verify):
    # Forbid r1 -> c2 (null) and move r1 there, r2 to c0: a "matching" through a missing cell.
    problem = {**LSA, "costs": [[4, 1, 3], [2, 0, None], [3, 2, 2]]}
    answer = solved(solve, problem)
    assert checked(verify, problem, answer)["valid"] is True
    t = copy.deepcopy(answer)
    t["allocation"] = [row(answer, "r0", "c1"), {"from": "r1", "to": "c2", "flow": 1},
                       {"from": "r2", "to": "c0", "flow": 1, "cost": 3}]
    result = checked(verify, problem, t)
    assert "allocation_arcs" in failed(result)
    assert "r1 -> c2" in detail(result, "allocation_arcs")


def test_flow_over_capacity_is_caught(flow, verify):
    # One more unit through the hub (capacity 6) to north instead of the mill's direct unit.
    t = copy.deepcopy(flow)
    t["allocation"] = [r for r in t["allocation"] if (r["from"], r["to"]) != ("mill", "north")]
    row(t, "plant", "hub").update(flow=7, cost=7)
    row(t, "hub", "north").update(flow=5, cost=5)
    t["unused"] = [{"id": "plant", "amount": 1}, {"id": "mill", "amount": 1}]
    t["objective"] = 34
    t["flow_value"] = 9
    result = checked(verify, FLOW, t)
    assert "capacity" in failed(result)
    assert "plant -> hub" in detail(result, "capacity")


def test_a_duplicated_row_is_caught(lsa, verify):
    t = copy.deepcopy(lsa)
    t["allocation"].append(copy.deepcopy(t["allocation"][0]))
    result = checked(verify, LSA, t)
    assert "allocation_arcs" in failed(result)
    assert "more than one" in detail(result, "allocation_arcs")


def test_a_wrong_flow_value_is_caught(lsa, verify):
    t = copy.deepcopy(lsa)
    t["flow_value"] = 2
    assert failed(checked(verify, LSA, t)) == {"flow_value"}


def test_a_wrong_row_cost_is_caught(lsa, verify):
    t = copy.deepcopy(lsa)
    row(t, "r1", "c0")["cost"] = 3
    assert failed(checked(verify, LSA, t)) == {"allocation_costs"}


def test_a_sink_listed_twice_as_unmet_is_caught(short, verify):
    t = copy.deepcopy(short)
    assert t["unmet"], "SHORT leaves hard demand unmet"
    t["unmet"].append(copy.deepcopy(t["unmet"][0]))
    result = checked(verify, SHORT, t)
    assert "unmet" in failed(result)
    assert "more than once" in detail(result, "unmet")


def test_row_costs_are_held_to_the_grid_row_by_row(solve, verify):
    # Costs with decimals are kept to 10**-6 (README, "Numbers"): a row's cost is read as its
    # decimal rounded to that grid, so float noise rounds back and one step of the grid is
    # wrong; 'cost' is optional.
    problem = {**LSA, "costs": [[c + 0.25 for c in r] for r in LSA_COSTS]}
    t = copy.deepcopy(solved(solve, problem))
    last = len(t["allocation"]) - 1
    t["allocation"][last]["cost"] *= 1 + 1e-12
    del t["allocation"][0]["cost"]
    assert checked(verify, problem, t)["valid"] is True
    t["allocation"][last]["cost"] += 1e-6
    result = checked(verify, problem, t)
    assert failed(result) == {"allocation_costs"}
    assert detail(result, "allocation_costs").startswith(f"allocation row {last}: ")


def test_wrong_unmet_and_unused_are_caught(short, verify):
    t = copy.deepcopy(short)
    t["unmet"] = [{"id": "Y", "amount": 2}]
    t["unused"] = [{"id": "B", "amount": 6}]
    result = checked(verify, SHORT, t)
    assert {"unmet", "unused"} <= failed(result)


@pytest.mark.parametrize("where", ["objective", "dual_objective", "row cost"])
def test_a_fractional_error_in_a_whole_number_answer_is_caught(lsa, verify, where):
    # Every cost is whole, so 5.4 cannot be the cost of any flow.
    t = copy.deepcopy(lsa)
    if where == "objective":
        t["objective"] = 5.4
    elif where == "dual_objective":
        t["certificate"]["dual_objective"] = 5.4
    else:
        row(t, "r0", "c1")["cost"] = 1.4
    assert checked(verify, LSA, t)["valid"] is False


def test_a_fractional_potential_that_breaks_dual_feasibility_is_caught(lsa, verify):
    # pi(r0) = 3.4 gives the unbounded cell r0 -> c1 the reduced cost 1 - 3.4 + 2 = -0.4 < 0.
    t = copy.deepcopy(lsa)
    t["certificate"]["potentials"]["r0"] = 3.4
    assert checked(verify, LSA, t)["valid"] is False


# -- malformed answers are 422 with pointers under /answer -------------------------------------


def _invalid(verify, problem: dict[str, Any], answer: Any) -> list[str]:
    status, doc = verify(problem, answer)
    assert status == 422, doc
    assert doc["type"].endswith("invalid-problem")
    return [e["pointer"] for e in doc["errors"]]


def test_missing_certificate_is_422(lsa, verify):
    t = {k: v for k, v in lsa.items() if k != "certificate"}
    assert _invalid(verify, LSA, t) == ["/answer/certificate"]


def test_string_flow_is_422(lsa, verify):
    t = copy.deepcopy(lsa)
    t["allocation"][1]["flow"] = "1"
    assert _invalid(verify, LSA, t) == ["/answer/allocation/1/flow"]


def test_string_potential_is_422(lsa, verify):
    t = copy.deepcopy(lsa)
    t["certificate"]["potentials"]["c0"] = "0"
    assert _invalid(verify, LSA, t) == ["/answer/certificate/potentials/c0"]


def test_missing_answer_is_422(verify, post_json):
    status, doc = post_json("/v1/verify", LSA)
    assert status == 422
    assert [e["pointer"] for e in doc["errors"]] == ["/answer"]


def test_huge_flow_is_422(lsa, verify):
    t = copy.deepcopy(lsa)
    t["allocation"][0]["flow"] = 10**30
    assert _invalid(verify, LSA, t) == ["/answer/allocation/0/flow"]


def test_an_arc_index_into_an_empty_arc_list_is_not_a_crash(solve, verify):
    problem = {"sources": [{"id": "a"}], "sinks": [{"id": "x"}], "arcs": []}
    answer = solved(solve, problem)
    t = copy.deepcopy(answer)
    t["allocation"] = [{"from": "a", "to": "x", "flow": 1, "arc": 0}]
    t["unmet"], t["unused"] = [], []
    result = checked(verify, problem, t)
    assert "allocation_arcs" in failed(result)


# -- parallel arcs: an answer written by hand with the "arc" index -----------------------------

#: One unit may go a -> x cheaply (cost 1, capacity 1); the rest must take the dear arc (3).
PARALLEL = {
    "sources": [{"id": "a", "supply": 2}],
    "sinks": [{"id": "x", "demand": 2}],
    "arcs": [{"from": "a", "to": "x", "cost": 1, "capacity": 1},
             {"from": "a", "to": "x", "cost": 3}],
}


def hand_answer() -> dict[str, Any]:
    """The optimum 1 + 3 = 4 with potentials worked out by hand (min form, pi(T) = 0).

    The dear arc carries flow and is unbounded, so its reduced cost 3 - pi(a) + pi(x) is 0:
    pi(a) = 3 with pi(x) = 0. The cheap arc then has reduced cost -2 and is full, as it must
    be. The super-source's arc to a is full, so pi(S) = 3 is allowed. Dual objective:
    D (pi(S) - pi(T)) - u_cheap * 2 = 2 * 3 - 1 * 2 = 4, the cost.
    """
    return {
        "allocation": [{"from": "a", "to": "x", "flow": 1, "cost": 1, "arc": 0},
                       {"from": "a", "to": "x", "flow": 1, "cost": 3, "arc": 1}],
        "unmet": [],
        "unused": [],
        "objective": 4,
        "certificate": {
            "negated": False,
            "potentials": {"a": 3, "x": 0},
            "virtual_potentials": {"super_source": 3, "super_sink": 0, "hard_pool": 0},
            "hard_shortfall": 0,
            "cut": {"sink_side": []},
            "dual_objective": 4,
        },
    }


def test_hand_made_answer_on_parallel_arcs_verifies(solve, verify):
    assert checked(verify, PARALLEL, hand_answer())["valid"] is True
    # The service agrees on the optimum and names the arcs by index as well.
    answer = solved(solve, PARALLEL)
    assert answer["objective"] == 4
    assert sorted((r["arc"], r["flow"]) for r in answer["allocation"]) == [(0, 1), (1, 1)]


def test_parallel_arcs_without_the_index_are_ambiguous(verify):
    t = hand_answer()
    for r in t["allocation"]:
        del r["arc"]
    result = checked(verify, PARALLEL, t)
    assert "allocation_arcs" in failed(result)
    assert "several arcs" in detail(result, "allocation_arcs")


def test_all_flow_on_the_dear_parallel_arc_fails_optimality(verify):
    t = hand_answer()
    t["allocation"] = [{"from": "a", "to": "x", "flow": 2, "cost": 6, "arc": 1}]
    t["objective"] = 6
    result = checked(verify, PARALLEL, t)
    assert failed(result) and failed(result) <= OPTIMALITY


@pytest.mark.parametrize("arc", [5, 1_000_000_000])
def test_an_arc_index_out_of_range_is_caught(verify, arc):
    t = hand_answer()
    t["allocation"][1]["arc"] = arc
    assert "allocation_arcs" in failed(checked(verify, PARALLEL, t))


def test_an_arc_index_joining_other_ends_is_caught(solve, verify):
    problem = {**PARALLEL, "sinks": [{"id": "x", "demand": 2}, {"id": "y", "penalty": 1}],
               "arcs": [*PARALLEL["arcs"], {"from": "a", "to": "y", "cost": 1}]}
    t = hand_answer()
    t["allocation"][0]["arc"] = 2          # arc 2 is a -> y, the row says a -> x
    result = checked(verify, problem, t)
    assert "allocation_arcs" in failed(result)
    assert "does not join" in detail(result, "allocation_arcs")


def test_an_arc_index_on_a_matrix_problem_is_caught(lsa, verify):
    t = copy.deepcopy(lsa)
    t["allocation"][0]["arc"] = 0
    assert "allocation_arcs" in failed(checked(verify, LSA, t))


# -- determinism and order --------------------------------------------------------------------


@pytest.mark.parametrize("problem", [
    # All costs equal: every matching is optimal, so only a fixed tie rule gives one answer.
    {"sources": [{"id": f"s{i}"} for i in range(4)], "sinks": [{"id": f"t{j}"} for j in range(4)],
     "costs": [[1] * 4 for _ in range(4)]},
    FLOW,
    SHORT,
], ids=["ties", "transshipment", "shortfall"])
def test_the_same_request_twice_gives_identical_bytes(client, problem):
    body = json.dumps(problem)
    first = client.post("/v1/solve", data=body, content_type="application/json")
    second = client.post("/v1/solve", data=body, content_type="application/json")
    assert first.status_code == 200
    # The promise covers the answer without its decision object (README, "Determinism"):
    # each request is a decision of its own, with its own id and time.
    assert without_decision(first.data) == without_decision(second.data)
    assert first.get_json()["decision"]["id"] != second.get_json()["decision"]["id"]
    # A fresh app (as in another worker process) must answer the same bytes too.
    third = create_app({"TESTING": True}).test_client().post(
        "/v1/solve", data=body, content_type="application/json")
    assert without_decision(third.data) == without_decision(first.data)


def test_allocation_rows_follow_source_then_sink_order(solve):
    # Ids out of alphabetical order and arcs listed backwards: only request order may decide.
    sources = [{"id": "zeta", "supply": 2}, {"id": "alpha", "supply": 2}]
    sinks = [{"id": "yak"}, {"id": "bee"}, {"id": "moth"}, {"id": "ant"}]
    arcs = [{"from": s["id"], "to": t["id"], "cost": 1} for s in sources for t in sinks][::-1]
    answer = solved(solve, {"sources": sources, "sinks": sinks, "arcs": arcs})
    assert len(answer["allocation"]) == 4
    pos = {x["id"]: i for i, x in enumerate(sources + sinks)}
    keys = [(pos[r["from"]], pos[r["to"]]) for r in answer["allocation"]]
    assert keys == sorted(keys)


def test_matrix_allocation_rows_follow_source_then_sink_order(solve):
    # Ids in reverse alphabetical order: sorting rows by id instead of position would show.
    problem = {"sources": [{"id": "q"}, {"id": "p"}, {"id": "o"}],
               "sinks": [{"id": "c"}, {"id": "b"}, {"id": "a"}],
               "costs": [[9, 9, 0], [9, 0, 9], [0, 9, 9]]}
    answer = solved(solve, problem)
    assert [(r["from"], r["to"]) for r in answer["allocation"]] == [
        ("q", "a"), ("p", "b"), ("o", "c")]
