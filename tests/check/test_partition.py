"""Tampered alternatives and partitions are refused by the verifier, each by the right check.

The certified k-best claim (README, "Ranked alternatives") stands on four legs: every
alternative is the best plan of its cell, the cells are disjoint, they cover every plan
with the frontier, and every frontier cell is bounded at or beyond the last alternative.
Each forgery below breaks one leg; tests/solve/test_alternatives.py holds the honest
answers to brute force and networkx.
"""

from __future__ import annotations

import copy
from typing import Any

import pytest

from service.settings import Settings
from service.solve.pipeline import solve_body, verify_body

#: A 4 x 4 assignment with several near ties (invented), and a small transportation
#: problem with a soft sink, capacities and spare supply.
MATRIX = {"sources": [{"id": f"s{i}"} for i in range(4)],
          "sinks": [{"id": f"t{j}"} for j in range(4)],
          "costs": [[3, 1, 4, 1], [5, 9, 2, 6], [5, 3, 5, 8], [9, 7, 9, 3]]}
ARCS = {"sources": [{"id": "a", "supply": 3}, {"id": "b", "supply": 2}],
        "sinks": [{"id": "x", "demand": 2}, {"id": "y", "demand": 2, "penalty": 6}],
        "arcs": [{"from": "a", "to": "x", "cost": 2, "capacity": 2},
                 {"from": "a", "to": "y", "cost": 3},
                 {"from": "b", "to": "x", "cost": 1},
                 {"from": "b", "to": "y", "cost": 4, "capacity": 1}]}


def _answer(problem: dict[str, Any], k: int) -> dict[str, Any]:
    return solve_body({**problem, "alternatives": k}, Settings())


def _failed(problem: dict[str, Any], k: int | None, answer: dict[str, Any]) -> list[str]:
    body = {**problem, "answer": answer}
    if k is not None:
        body["alternatives"] = k
    result = verify_body(body, Settings())
    return [c["name"] for c in result["checks"] if not c["passed"]]


@pytest.mark.parametrize("problem", [MATRIX, ARCS], ids=["matrix", "arcs"])
def test_honest_answers_pass(problem):
    answer = _answer(problem, 3)
    assert _failed(problem, 3, answer) == []
    assert _failed(problem, None, answer) == []       # /v1/verify without the request's k


@pytest.mark.parametrize("problem", [MATRIX, ARCS], ids=["matrix", "arcs"])
def test_a_missing_frontier_cell_leaves_plans_uncovered(problem):
    answer = _answer(problem, 2)
    assert answer["partition"]["frontier"]
    answer["partition"]["frontier"].pop(0)
    assert _failed(problem, 2, answer)[0] == "partition_cover"


def test_a_shortened_branch_list_leaves_plans_uncovered():
    # Two of the optimum's four pairs dropped from its branch list, with their cells: the
    # other two pairs can then swap, a plan no cell holds. (Dropping one pair alone would
    # be harmless: the three others force the fourth in a 4 x 4 assignment.)
    answer = _answer(MATRIX, 1)
    branch = answer["partition"]["branches"][0]
    answer["partition"]["branches"][0] = branch[:-2]
    answer["partition"]["frontier"] = [f for f in answer["partition"]["frontier"]
                                       if not (f["parent"] == 0
                                               and f["branch"] >= len(branch) - 2)]
    assert answer["alternatives"][0]["cell"]["branch"] < len(branch) - 2
    assert _failed(MATRIX, 1, answer)[0] == "partition_cover"


def test_overlapping_cells_are_refused():
    answer = _answer(MATRIX, 3)
    alts = answer["alternatives"]
    # alternative 2 claims alternative 1's cell: two plans in one cell
    alts[1]["cell"] = copy.deepcopy(alts[0]["cell"])
    assert _failed(MATRIX, 3, answer)[0] == "alternatives_cells"


def test_a_frontier_cell_listed_twice_is_refused():
    answer = _answer(MATRIX, 2)
    answer["partition"]["frontier"].append(answer["partition"]["frontier"][0])
    assert _failed(MATRIX, 2, answer)[0] == "partition_cover"


def test_a_plan_that_is_not_the_best_of_its_cell_is_refused():
    answer = _answer(MATRIX, 3)
    first, second = answer["alternatives"][0], answer["alternatives"][2]
    # the third alternative's plan put in the first one's cell, certificate and all
    for key in ("objective", "allocation", "unmet", "unused", "certificate"):
        first[key] = copy.deepcopy(second[key])
    failed = _failed(MATRIX, 3, answer)
    assert failed[0] in ("alternatives_cells", "alternatives_optimal_in_cells")


def test_potentials_that_do_not_prove_an_alternative_are_refused():
    answer = _answer(ARCS, 2)
    pots = answer["alternatives"][0]["certificate"]["potentials"]
    pots["a"] += 1
    assert _failed(ARCS, 2, answer)[0] == "alternatives_optimal_in_cells"


def test_a_wrong_bound_is_refused():
    answer = _answer(MATRIX, 2)
    bound = next(f for f in answer["partition"]["frontier"] if "bound" in f)
    bound["bound"] += 1
    assert _failed(MATRIX, 2, answer)[0] == "partition_bounds"


def test_a_bound_below_the_last_alternative_is_refused():
    answer = _answer(MATRIX, 2)
    # cut the list short: the frontier's bounds were proved for the old last one, and the
    # popped alternative's cell is now claimed by nobody
    answer["alternatives"].pop()
    answer["partition"]["branches"].pop()
    answer["partition"]["requested"] = 1
    assert _failed(MATRIX, None, answer)[0] in ("partition_cover", "partition_bounds")


def test_an_empty_claim_that_does_not_hold_is_refused():
    answer = _answer(MATRIX, 2)
    f = next(f for f in answer["partition"]["frontier"] if "bound" in f)
    for key in ("bound", "shift", "distances", "virtual_distances"):
        f.pop(key, None)
    f["empty"] = {"nodes": ["s0"], "virtual_nodes": []}
    assert _failed(MATRIX, 2, answer)[0] == "partition_bounds"


def test_too_few_alternatives_for_the_request_is_refused():
    answer = _answer(MATRIX, 2)
    assert _failed(MATRIX, 3, answer)[0] == "alternatives_requested"


def test_an_answer_without_alternatives_when_asked_is_refused():
    answer = _answer(MATRIX, 2)
    del answer["alternatives"], answer["partition"]
    assert _failed(MATRIX, 2, answer) == ["alternatives_requested", "alternatives_plans",
                                          "alternatives_cells",
                                          "alternatives_optimal_in_cells",
                                          "alternatives_order", "partition_cover",
                                          "partition_bounds"]


def test_out_of_order_alternatives_are_refused():
    answer = _answer(ARCS, 3)
    alts = answer["alternatives"]
    costs = [a["objective"] for a in alts]
    assert costs != sorted(costs, reverse=True)       # at least two differ
    alts.reverse()
    assert _failed(ARCS, 3, answer)


@pytest.mark.parametrize("seed", range(0, 60, 3))
def test_bounds_in_bulk_are_the_bounds_cell_by_cell(seed, monkeypatch):
    # The verifier sums the frontier's bounds for all cells of a plan at once; with that
    # bulk path declined, cell by cell in exact arithmetic: the verdicts must agree, on
    # honest answers and on ones with a shifted distance. (Internal consistency of the
    # checker; the honest answers themselves are held to networkx in
    # tests/solve/test_alternatives.py.)
    from service.check import frontier
    from tests.solve.test_alternatives import larger_problem

    problem = larger_problem(seed)
    answer = _answer(problem, 4)
    forged = copy.deepcopy(answer)
    entry = next((f for f in forged["partition"]["frontier"] if f.get("distances")), None)
    if entry is not None:
        node = next(iter(entry["distances"]))
        entry["distances"][node] += 1
    bulk = [_failed(problem, 4, answer), _failed(problem, 4, forged)]
    monkeypatch.setattr(frontier, "bounds", lambda *args: None)
    assert [_failed(problem, 4, answer), _failed(problem, 4, forged)] == bulk
    assert bulk[0] == []


@pytest.mark.parametrize(("field", "value"), [("side", "left"), ("parent", True),
                                              ("bound", "7"), ("distances", [1])])
def test_a_malformed_frontier_record_is_named(field, value):
    # The frontier is read in bulk; a record it cannot read goes to the row schema, which
    # names the field by JSON Pointer (RFC 6901) like every other malformed answer.
    from service.errors import InvalidProblem

    answer = _answer(MATRIX, 2)
    answer["partition"]["frontier"][1][field] = value
    with pytest.raises(InvalidProblem) as e:
        verify_body({**MATRIX, "alternatives": 2, "answer": answer}, Settings())
    pointers = [err["pointer"] for err in e.value.errors]
    assert pointers == [f"/answer/partition/frontier/1/{field}"]


def test_a_malformed_branch_pair_is_named():
    from service.errors import InvalidProblem

    answer = _answer(MATRIX, 2)
    answer["partition"]["branches"][0][0]["from"] = 3
    with pytest.raises(InvalidProblem) as e:
        verify_body({**MATRIX, "alternatives": 2, "answer": answer}, Settings())
    assert [err["pointer"] for err in e.value.errors] == \
        ["/answer/partition/branches/0/0/from"]
