"""Edges of exact verification: an empty day, the ``hard`` flag of unmet rows, numbers at the
ends of the answer's range, and the bound that solve names when it refuses.

Every verdict is compared with the exact reference checker (``exact_reference``: Python
integers and fractions, from the definitions of Ahuja, Magnanti & Orlin 1993, section 9.4),
and optima with networkx (``exact_optimum``). The service is reached only through HTTP.
"""

from __future__ import annotations

import copy
from fractions import Fraction

import pytest
from exact_http import PROBLEM, assert_agree, failed_detail, post, service_verdict, solved
from exact_optimum import optimum
from forgeries import with_number

# -- an empty day: no sinks, or no sources, is an answer, not an error ----------------------

EMPTY_DAYS = {
    "no tickets (matrix)": {"sources": [{"id": "tech-ana", "supply": 3}, {"id": "tech-ben"}],
                            "sinks": [], "costs": [[], []]},
    "no tickets (arcs)": {"sources": [{"id": "depot", "supply": 4}], "nodes": [{"id": "hub"}],
                          "sinks": [], "arcs": [{"from": "depot", "to": "hub", "cost": 2}]},
    "no technicians": {"sources": [], "sinks": [{"id": "ticket-1", "demand": 2},
                                                {"id": "ticket-2", "penalty": 7.5}],
                       "costs": []},
    "no stock, hub only": {"sources": [], "nodes": [{"id": "hub"}],
                           "sinks": [{"id": "store", "demand": 3}],
                           "arcs": [{"from": "hub", "to": "store", "cost": 1}]},
    "nothing at all": {"sources": [], "sinks": [], "costs": []},
    "no tickets, max": {"sources": [{"id": "tech-ana"}], "sinks": [], "costs": [[]],
                        "objective": "max"},
}


@pytest.mark.parametrize("name", sorted(EMPTY_DAYS))
def test_an_empty_day_is_answered_and_its_answer_is_valid(client, name):
    problem = EMPTY_DAYS[name]
    answer = solved(client, problem)
    assert answer["allocation"] == []
    shortfall, best = optimum(problem)             # networkx, see exact_optimum
    assert answer["certificate"]["hard_shortfall"] == shortfall
    assert Fraction(repr(answer["objective"])) == best
    supply = {s["id"]: s.get("supply", 1) for s in problem["sources"]}
    demand = {t["id"]: t.get("demand", 1) for t in problem["sinks"]}
    assert {u["id"]: u["amount"] for u in answer["unused"]} == supply    # everything unused
    assert {u["id"]: u["amount"] for u in answer["unmet"]} == demand     # everything unmet
    assert_agree(client, problem, answer, expected=True)
    for fmt in ("html", "svg"):          # the audit report draws an empty day too
        resp = client.post(f"/v1/report?format={fmt}", json={**problem, "answer": answer})
        assert resp.status_code == 200, resp.get_data(as_text=True)[:300]


def _tampered(problem: dict, answer: dict) -> list[dict]:
    """Answers to an empty day that say something false about it."""
    out = []
    if answer["unused"]:
        wrong = copy.deepcopy(answer)
        wrong["unused"][0]["amount"] -= 1
        out.append(wrong)
        wrong = copy.deepcopy(answer)
        wrong["unused"] = []
        out.append(wrong)
    if answer["unmet"]:
        wrong = copy.deepcopy(answer)
        wrong["unmet"] = []
        out.append(wrong)
        out.append(with_number(answer, "objective", answer["objective"] - 1))
    wrong = copy.deepcopy(answer)
    wrong["flow_value"] = 1
    out.append(wrong)
    out.append(with_number(answer, "dual_objective", answer["objective"] + 1))
    if problem["sources"] and problem["sinks"] == []:
        # a row to a place that is no sink: no allowed arc
        wrong = copy.deepcopy(answer)
        wrong["allocation"] = [{"from": problem["sources"][0]["id"], "to": "ticket-9",
                                "flow": 1, "cost": 0}]
        out.append(wrong)
    if problem["sinks"] and "costs" in problem:
        # a row between two sinks of an empty matrix: it names no cell at all (this once
        # indexed the empty matrix and failed as a 500)
        wrong = copy.deepcopy(answer)
        wrong["allocation"] = [{"from": problem["sinks"][0]["id"],
                                "to": problem["sinks"][-1]["id"], "flow": 1, "cost": 0}]
        out.append(wrong)
    return out


@pytest.mark.parametrize("name", sorted(EMPTY_DAYS))
def test_an_empty_day_s_tampered_answers_are_invalid(client, name):
    problem = EMPTY_DAYS[name]
    answer = solved(client, problem)
    for wrong in _tampered(problem, answer):
        assert_agree(client, problem, wrong, expected=False)


def test_an_empty_day_under_reject_is_infeasible_only_with_hard_demand(client):
    # no technicians: ticket-1's hard demand cannot be met
    problem = {**EMPTY_DAYS["no technicians"], "unmet_demand": "reject"}
    status, doc = post(client, "/v1/solve", problem)
    assert status == 422 and doc["type"] == PROBLEM + "infeasible", doc
    assert doc["witness"]["shortfall"] == 2
    soft_only = {"sources": [], "sinks": [{"id": "ticket-2", "penalty": 7.5}], "costs": [],
                 "unmet_demand": "reject"}
    answer = solved(client, soft_only)
    assert answer["objective"] == 7.5
    assert_agree(client, soft_only, answer, expected=True)


# -- unmet rows say whether the sink is hard ------------------------------------------------

MIXED = {"sources": [{"id": "north"}],
         "sinks": [{"id": "fridge"}, {"id": "oven", "demand": 2},
                   {"id": "washer", "penalty": 50}],
         "costs": [[20, 35, 60]]}


def test_solve_writes_the_hard_flag_of_every_unmet_sink(client):
    answer = solved(client, MIXED)
    penalised = {t["id"] for t in MIXED["sinks"] if t.get("penalty") is not None}
    assert answer["unmet"], "one technician, three tickets: some wait"
    for row in answer["unmet"]:
        assert row["hard"] is (row["id"] not in penalised)
    assert_agree(client, MIXED, answer, expected=True)


def test_an_answer_without_hard_flags_is_valid(client):
    # third-party answers may not carry the flag: it is checked only when present
    answer = solved(client, MIXED)
    for row in answer["unmet"]:
        del row["hard"]
    assert_agree(client, MIXED, answer, expected=True)


def test_a_wrong_hard_flag_fails_the_unmet_check(client):
    answer = solved(client, MIXED)
    for row in answer["unmet"]:
        wrong = copy.deepcopy(answer)
        flipped = next(r for r in wrong["unmet"] if r["id"] == row["id"])
        flipped["hard"] = not row["hard"]
        valid, failed = assert_agree(client, MIXED, wrong, expected=False)
        assert failed == ["unmet"], failed
        _, _, doc = service_verdict(client, MIXED, wrong)
        assert row["id"] in failed_detail(doc, "unmet")


@pytest.mark.parametrize("flag", ["true", 1, 0, "no"])
def test_a_hard_flag_that_is_no_boolean_is_refused(client, flag):
    answer = solved(client, MIXED)
    answer["unmet"][0]["hard"] = flag
    status, doc = post(client, "/v1/verify", {**MIXED, "answer": answer})
    assert status == 422, doc
    assert [e["pointer"] for e in doc["errors"]] == ["/answer/unmet/0/hard"]


# -- numbers at the ends of the answer's range ----------------------------------------------

# One source with no supply and no arcs: its potential is free (its supply arc carries 0
# of capacity 0), so any number up to 2**53 proves the same thing.
IDLE = {"sources": [{"id": "north"}, {"id": "idle", "supply": 0}],
        "sinks": [{"id": "fridge"}, {"id": "washer", "penalty": 2.5}],
        "costs": [[1.5, None], [None, None]]}


@pytest.mark.parametrize("value", [2**53, -(2**53), 2.0**52 + 0.5, -123456789012.25,
                                   9007199254740991.0])
def test_a_free_potential_anywhere_in_range_is_valid(client, value):
    # Beyond 2**60 grid units the checker leaves int64; the forbidden cells of the matrix
    # (idle's whole row) must still not count as arcs.
    answer = with_number(solved(client, IDLE), "potential:idle", value)
    assert_agree(client, IDLE, answer, expected=True)


@pytest.mark.parametrize("value", [2**53, 2.0**52 + 0.5])
def test_a_huge_potential_on_an_allowed_cell_breaks_dual_feasibility(client, value):
    # the same numbers, but the spare source may serve the fridge: its cell's reduced cost
    # 2.5 - value + pi(fridge) is negative on an unbounded arc (and the spread of the
    # potentials leaves int64, so the checker works in Python integers)
    problem = {**IDLE, "costs": [[1.5, None], [2.5, None]]}
    answer = with_number(solved(client, problem), "potential:idle", value)
    valid, failed = assert_agree(client, problem, answer, expected=False)
    assert "dual_feasibility" in failed, failed


def test_potentials_shifted_by_10_13_are_valid(client):
    # reduced costs and D (pi(S) - pi(T)) do not change when every potential moves together
    answer = solved(client, IDLE)
    cert = answer["certificate"]
    for table in (cert["potentials"], cert["virtual_potentials"]):
        for key in table:
            table[key] += 10**13
    assert_agree(client, IDLE, answer, expected=True)


CYCLE = {"sources": [{"id": "depot"}], "nodes": [{"id": "hub-a"}, {"id": "hub-b"}],
         "sinks": [{"id": "store"}],
         "arcs": [{"from": "depot", "to": "store", "cost": 1.25},
                  {"from": "hub-a", "to": "hub-b", "cost": 0.5},
                  {"from": "hub-b", "to": "hub-a", "cost": -0.5}]}


def test_a_huge_zero_cost_circulation_with_exact_row_costs_is_valid(client):
    # 2**53 units around a cycle of cost 0.5 - 0.5: feasible and optimal; its row costs
    # (2**53 x 500000 grid units) leave int64 but are exact, and must be read as such
    answer = solved(client, CYCLE)
    answer["allocation"] += [
        {"from": "hub-a", "to": "hub-b", "flow": 2**53, "cost": 2**52, "arc": 1},
        {"from": "hub-b", "to": "hub-a", "flow": 2**53, "cost": -(2**52), "arc": 2}]
    assert_agree(client, CYCLE, answer, expected=True)
    answer["allocation"][-1]["cost"] = -(2**52) + 1
    valid, failed = assert_agree(client, CYCLE, answer, expected=False)
    assert failed == ["allocation_costs"], failed


# -- the bound solve names when it refuses --------------------------------------------------


def test_fractional_refusal_names_both_bounds(client):
    # 999,999,929 units at 9.000001: the objective 9,000,000,360.999929 is above 2**33
    problem = {"sources": [{"id": "north", "supply": 999_999_929}],
               "sinks": [{"id": "fridge", "demand": 999_999_929}], "costs": [[9.000001]]}
    status, doc = post(client, "/v1/solve", problem)
    assert status == 422 and doc["type"] == PROBLEM + "out-of-range", doc
    assert "2**33 (8,589,934,592)" in doc["detail"] and "2**53" in doc["detail"], doc


def test_just_below_the_fractional_bound_is_answered_exactly(client):
    # 999,999,929 units at 8.000001 cost 8,000,000,431.999929 < 2**33: exactly written
    problem = {"sources": [{"id": "north", "supply": 999_999_929}],
               "sinks": [{"id": "fridge", "demand": 999_999_929}], "costs": [[8.000001]]}
    answer = solved(client, problem)
    assert Fraction(repr(answer["objective"])) == 999_999_929 * Fraction("8.000001")
    assert_agree(client, problem, answer, expected=True)


def test_whole_number_refusal_names_2_53(client):
    problem = {"sources": [{"id": "north", "supply": 10**9}],
               "sinks": [{"id": "fridge", "demand": 10**9}], "costs": [[10**7]]}
    status, doc = post(client, "/v1/solve", problem)
    assert status == 422 and doc["type"] == PROBLEM + "out-of-range", doc
    assert "2**53" in doc["detail"], doc
