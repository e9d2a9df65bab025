"""Tampered override prices and proofs are refused by the independent verifier, over HTTP.

Each forgery changes one claim of an honest answer (or a claim and the proof together, to
look consistent); the verifier must name the price check that fails. Common practice, no
source: a certificate check is only as good as the forgeries it refuses.
"""

from __future__ import annotations

import copy

import pytest

PRICE_CHECKS = {"price_rows", "price_distances", "force_delta", "forbid_delta"}

ASSIGNMENT = {"sources": [{"id": "a"}, {"id": "b"}, {"id": "c"}, {"id": "d"}],
              "sinks": [{"id": "w"}, {"id": "x"}, {"id": "y"}, {"id": "z"}],
              "costs": [[4, 9, 3, 7], [2, 6, None, 5], [8, 1, 7, 6], [5, 3, 6, 2]]}
TRANSPORT = {"sources": [{"id": "p", "supply": 7}, {"id": "q", "supply": 5}],
             "sinks": [{"id": "u", "demand": 4}, {"id": "v", "demand": 6, "penalty": 30},
                       {"id": "w", "demand": 3}],
             "arcs": [{"from": "p", "to": "u", "cost": 3, "capacity": 3},
                      {"from": "p", "to": "v", "cost": 5},
                      {"from": "p", "to": "w", "cost": 40},
                      {"from": "q", "to": "u", "cost": 30, "capacity": 1},
                      {"from": "q", "to": "u", "cost": 4},
                      {"from": "q", "to": "v", "cost": 6, "capacity": 2},
                      {"from": "q", "to": "w", "cost": 2, "capacity": 2}]}


@pytest.fixture(params=["assignment", "transport"])
def honest(request, solve, verify):
    problem = ASSIGNMENT if request.param == "assignment" else TRANSPORT
    status, answer = solve({**problem, "prices": True})
    assert status == 200
    status, verdict = verify(problem, answer)
    assert status == 200 and verdict["valid"], verdict
    names = {c["name"] for c in verdict["checks"]}
    assert PRICE_CHECKS <= names
    return problem, answer


def _refused(verify, problem, answer) -> set[str]:
    status, verdict = verify(problem, answer)
    assert status == 200
    assert not verdict["valid"]
    return {c["name"] for c in verdict["checks"]
            if not c["passed"] and not c["detail"].startswith("not checked")}


def _first(rows, used: bool):
    return next(k for k, r in enumerate(rows) if (r["flow"] > 0) == used
                and r["force_delta" if not used else "forbid_delta"] is not None)


def test_a_force_delta_off_by_one(honest, verify):
    problem, answer = honest
    forged = copy.deepcopy(answer)
    k = _first(forged["prices"], used=False)
    forged["prices"][k]["force_delta"] += 1
    assert _refused(verify, problem, forged) == {"force_delta"}


def test_a_forbid_delta_lowered(honest, verify):
    problem, answer = honest
    forged = copy.deepcopy(answer)
    k = next(k for k, r in enumerate(forged["prices"]) if r["flow"] > 0
             and r["forbid_delta"])
    forged["prices"][k]["forbid_delta"] -= 1
    assert _refused(verify, problem, forged) == {"forbid_delta"}


def test_a_price_said_to_be_impossible(honest, verify):
    problem, answer = honest
    forged = copy.deepcopy(answer)
    k = _first(forged["prices"], used=False)
    forged["prices"][k]["force_delta"] = None
    assert _refused(verify, problem, forged) == {"force_delta"}


@pytest.fixture
def assignment(solve):
    status, answer = solve({**ASSIGNMENT, "prices": True})
    assert status == 200
    return ASSIGNMENT, answer


def test_a_distance_lowered_with_the_price_that_rests_on_it(assignment, verify):
    problem, answer = assignment
    forged = copy.deepcopy(answer)
    proof = forged["certificate"]["prices"]
    rows = forged["prices"]
    k = _first(rows, used=False)
    # the row of the pair's tail gives the distance from its head back to it
    names = [s["id"] for s in problem["sources"]] + [t["id"] for t in problem["sinks"]]
    tail, head = names.index(rows[k]["from"]), names.index(rows[k]["to"])
    r = proof["roots"].index(tail)
    assert proof["distances"][r][head] > 0
    proof["distances"][r][head] -= 1
    rows[k]["force_delta"] -= 1
    assert _refused(verify, problem, forged) == {"price_distances"}


def test_every_distance_of_a_row_lowered_together(assignment, verify):
    problem, answer = assignment
    forged = copy.deepcopy(answer)
    proof = forged["certificate"]["prices"]
    r = max(range(len(proof["roots"])), key=lambda r: max(d or 0 for d in proof["distances"][r]))
    assert max(d or 0 for d in proof["distances"][r]) > 0
    proof["distances"][r] = [d - 1 if d else d for d in proof["distances"][r]]
    assert "price_distances" in _refused(verify, problem, forged)


def test_a_reachable_node_said_unreachable(honest, verify):
    problem, answer = honest
    forged = copy.deepcopy(answer)
    proof = forged["certificate"]["prices"]
    row = proof["distances"][0]
    v = next(v for v, d in enumerate(row) if d is not None and v != proof["roots"][0])
    row[v] = None
    proof["next"][0][v] = -1
    assert "price_distances" in _refused(verify, problem, forged)


def test_next_nodes_that_go_round_a_cycle(honest, verify):
    problem, answer = honest
    forged = copy.deepcopy(answer)
    proof = forged["certificate"]["prices"]
    nxt, dist = proof["next"][0], proof["distances"][0]
    v = next(v for v, w in enumerate(nxt) if w >= 0 and nxt[w] >= 0)
    nxt[nxt[v]] = v          # v -> w -> v
    assert dist is not None
    assert "price_distances" in _refused(verify, problem, forged)


def test_a_rerouting_flow_through_the_pair_itself(honest, verify):
    problem, answer = honest
    forged = copy.deepcopy(answer)
    rows = forged["prices"]
    entry = next(e for e in forged["certificate"]["prices"]["reroutes"] if e["flow"])
    p = entry["pair"]
    names = [s["id"] for s in problem["sources"]] + [t["id"] for t in problem["sinks"]]
    tail, head = names.index(rows[p]["from"]), names.index(rows[p]["to"])
    arc = rows[p].get("arc", tail * len(problem["sinks"]) + head - len(problem["sources"]))
    entry["flow"] = [[tail, head, rows[p]["flow"], arc]]
    assert _refused(verify, problem, forged) == {"forbid_delta"}


def test_a_rerouting_flow_that_does_not_arrive(honest, verify):
    problem, answer = honest
    forged = copy.deepcopy(answer)
    entry = next(e for e in forged["certificate"]["prices"]["reroutes"] if len(e["flow"]) > 1)
    entry["flow"].pop()
    assert _refused(verify, problem, forged) == {"forbid_delta"}


def test_a_missing_reroute(honest, verify):
    problem, answer = honest
    forged = copy.deepcopy(answer)
    forged["certificate"]["prices"]["reroutes"].pop()
    assert _refused(verify, problem, forged) == {"forbid_delta"}


def test_labels_raised_to_claim_a_higher_bound(solve, verify):
    status, answer = solve({**TRANSPORT, "prices": True})
    entry = next(e for e in answer["certificate"]["prices"]["reroutes"] if "labels" in e
                 and None not in e["labels"])
    forged = copy.deepcopy(answer)
    p = entry["pair"]
    labels = next(e for e in forged["certificate"]["prices"]["reroutes"]
                  if e["pair"] == p)["labels"]
    names = [s["id"] for s in TRANSPORT["sources"]] + [t["id"] for t in TRANSPORT["sinks"]]
    labels[names.index(forged["prices"][p]["to"])] += 5
    forged["prices"][p]["forbid_delta"] += 5 * forged["prices"][p]["flow"]
    assert _refused(verify, TRANSPORT, forged) == {"forbid_delta"}


def test_rows_out_of_order_and_wrong_flows(honest, verify):
    problem, answer = honest
    forged = copy.deepcopy(answer)
    forged["prices"][0], forged["prices"][1] = forged["prices"][1], forged["prices"][0]
    forged["prices"][0]["flow"], forged["prices"][1]["flow"] = (answer["prices"][0]["flow"],
                                                                answer["prices"][1]["flow"])
    refused = _refused(verify, problem, forged)
    assert refused & PRICE_CHECKS
    forged = copy.deepcopy(answer)
    forged["prices"].pop()
    assert _refused(verify, problem, forged) == {"price_rows"}


def test_prices_of_an_answer_that_is_not_optimal_are_not_checked(honest, verify):
    problem, answer = honest
    forged = copy.deepcopy(answer)
    forged["objective"] += 1
    status, verdict = verify(problem, forged)
    skipped = [c for c in verdict["checks"] if c["name"] in PRICE_CHECKS]
    assert not verdict["valid"] and skipped
    assert all(not c["passed"] and c["detail"].startswith("not checked") for c in skipped)


def test_too_much_work_is_refused_naming_the_field(app):
    from service.app import create_app
    client = create_app({"TESTING": True, "MAX_PRICES_WORK": 10}).test_client()
    resp = client.post("/v1/solve", json={**ASSIGNMENT, "prices": True})
    body = resp.get_json()
    assert resp.status_code == 413
    assert body["type"].endswith("too-large") and "/prices" in body["detail"]
    assert "MAX_PRICES_WORK" in body["detail"]


def test_prices_must_be_a_boolean(solve):
    status, body = solve({**ASSIGNMENT, "prices": "yes"})
    assert status == 422
    assert [e["pointer"] for e in body["errors"]] == ["/prices"]


def test_a_proof_too_large_to_check_is_refused_naming_the_field(solve):
    from service.app import create_app
    status, answer = solve({**ASSIGNMENT, "prices": True})
    client = create_app({"TESTING": True, "MAX_PRICES_WORK": 10}).test_client()
    resp = client.post("/v1/verify", json={**ASSIGNMENT, "answer": answer})
    body = resp.get_json()
    assert resp.status_code == 413
    assert "/answer/certificate/prices" in body["detail"]
    assert "MAX_PRICES_WORK" in body["detail"]


def test_bottleneck_has_no_prices(solve, verify):
    status, body = solve({**ASSIGNMENT, "objective": "bottleneck", "prices": True})
    assert status == 422
    assert [e["pointer"] for e in body["errors"]] == ["/prices"]
    status, answer = solve({**ASSIGNMENT, "objective": "bottleneck"})
    assert status == 200
    _, priced = solve({**ASSIGNMENT, "prices": True})
    forged = {**answer, "prices": priced["prices"]}
    forged["certificate"] = {**answer["certificate"],
                             "prices": priced["certificate"]["prices"]}
    problem = {**ASSIGNMENT, "objective": "bottleneck"}
    assert "price_rows" in _refused(verify, problem, forged)


def test_rows_that_name_other_pairs(honest, verify):
    problem, answer = honest
    forged = copy.deepcopy(answer)
    forged["prices"][0]["to"] = forged["prices"][-1]["to"]
    if forged["prices"][0]["to"] == answer["prices"][0]["to"]:
        forged["prices"][0]["from"] = forged["prices"][-1]["from"]
    assert _refused(verify, problem, forged) == {"price_rows"}
