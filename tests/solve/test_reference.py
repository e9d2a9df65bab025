"""External cross-checks: the service held to reference solvers and published optima.

Every check names where its expected value comes from. The seeded families live in
reference.py; each instance is solved by two references that share no code with the service
(networkx max-flow + network simplex, and two HiGHS linear programs), and the service's answer
is then checked against both and re-checked from the request alone.
"""

from __future__ import annotations

import bz2
import importlib.resources
import json
import pickle
from functools import cache

import numpy as np
import pytest
import reference as ref
from scipy.optimize import linear_sum_assignment

SEEDS = range(200)
CASES = [pytest.param(f, s, id=f"{f}-{s:03d}") for f in ref.FAMILIES for s in SEEDS]
ANSWER_KEYS = ("allocation", "unmet", "unused", "objective", "certificate")


@pytest.fixture(scope="module")
def client():
    # Imported here so the reference-only tests run even where the service does not import.
    from service.app import create_app

    return create_app({"TESTING": True}).test_client()


@cache
def references(family: str, seed: int) -> tuple[ref.Reference, ref.Reference]:
    """(networkx, linprog) answers, computed once per instance for all tests that need them."""
    problem = ref.instance(family, seed)
    return ref.solve_networkx(problem), ref.solve_linprog(problem)


def _show(problem: dict) -> str:
    """The instance as one line of JSON, so a failure can be replayed with curl."""
    return json.dumps(problem, separators=(",", ":"))


def _solve(client, problem: dict) -> dict:
    resp = client.post("/v1/solve", json=problem)
    assert resp.status_code == 200, f"{resp.status_code} {resp.get_data(as_text=True)}\n" + _show(
        problem
    )
    return resp.get_json()


def _verify(client, problem: dict, answer: dict) -> dict:
    body = {**problem, "answer": {k: answer[k] for k in ANSWER_KEYS}}
    resp = client.post("/v1/verify", json=body)
    assert resp.status_code == 200, resp.get_data(as_text=True)
    return resp.get_json()


def _negated(problem: dict) -> dict:
    """The same problem with every cost negated and the other objective."""
    flipped = dict(problem)
    if "costs" in problem:
        flipped["costs"] = [[None if c is None else -c for c in row] for row in problem["costs"]]
    else:
        flipped["arcs"] = [{**a, "cost": -a["cost"]} for a in problem["arcs"]]
    flipped["objective"] = "min" if problem.get("objective", "min") == "max" else "max"
    return flipped


def _as_arcs(problem: dict, capacity: int | None = None) -> dict:
    """A dense-matrix problem restated as arcs, optionally with one capacity on every arc."""
    arcs = []
    for s, row in zip(problem["sources"], problem["costs"], strict=True):
        for t, c in zip(problem["sinks"], row, strict=True):
            if c is not None:
                arc = {"from": s["id"], "to": t["id"], "cost": c}
                if capacity is not None:
                    arc["capacity"] = capacity
                arcs.append(arc)
    out = {k: v for k, v in problem.items() if k != "costs"}
    out["arcs"] = arcs
    return out


# --------------------------------------------------------------------------------------------
# The references against each other (valuable without the service)
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize(("family", "seed"), CASES)
def test_references_agree(family, seed):
    problem = ref.instance(family, seed)
    # reference library: networkx.maximum_flow_value + networkx.network_simplex
    by_nx, by_lp = references(family, seed)
    # reference library: scipy.optimize.linprog (HiGHS)
    assert by_nx.hard_shortfall == by_lp.hard_shortfall, _show(problem)
    integral = ref.read(problem).integral
    assert ref.same_objective(by_nx.objective, by_lp.objective, integral), (
        f"networkx {by_nx.objective} vs linprog {by_lp.objective}\n{_show(problem)}"
    )


@pytest.mark.parametrize("family", ["dense_square", "rectangular", "max"])
def test_references_match_linear_sum_assignment(family):
    # reference library: scipy.optimize.linear_sum_assignment, a third opinion on every dense
    # assignment without forbidden cells (all sinks are hard, so it must cover the smaller side).
    checked = 0
    for seed in SEEDS:
        problem = ref.instance(family, seed)
        if any(c is None for row in problem["costs"] for c in row):
            continue
        costs = np.array(problem["costs"])
        maximize = problem.get("objective") == "max"
        rows, cols = linear_sum_assignment(costs, maximize=maximize)
        by_nx, _ = references(family, seed)
        assert by_nx.objective == int(costs[rows, cols].sum()), _show(problem)
        assert by_nx.hard_shortfall == max(0, costs.shape[1] - costs.shape[0])
        checked += 1
    assert checked >= 100


def test_generators_cover_their_family():
    # The families must hold what their names promise, or the cross-checks test less than
    # they claim.
    def all_of(family):
        return [ref.instance(family, s) for s in SEEDS]

    def shortfall_share(family):
        return np.mean([references(family, s)[0].hard_shortfall > 0 for s in SEEDS])

    assert ref.instance("transshipment", 5) == ref.instance("transshipment", 5)
    assert ref.instance("transshipment", 5) != ref.instance("transshipment", 6)
    shapes = {np.sign(len(p["sources"]) - len(p["sinks"])) for p in all_of("rectangular")}
    assert shapes == {-1, 1}
    assert all(p["objective"] == "max" for p in all_of("max"))
    forbidden = all_of("forbidden")
    assert all(any(c is None for row in p["costs"] for c in row) for p in forbidden)
    assert 0.2 < shortfall_share("forbidden") < 1
    assert all("arcs" in p for p in all_of("sparse_arcs"))
    transport = all_of("transportation")
    assert any(
        len({(a["from"], a["to"]) for a in p.get("arcs", [])}) < len(p.get("arcs", []))
        for p in transport
    ), "no parallel arcs generated"
    assert any("capacity" in a for p in transport for a in p.get("arcs", []))
    penalties = all_of("penalties")
    assert all(any("penalty" in t for t in p["sinks"]) for p in penalties)
    assert any(any("penalty" not in t for t in p["sinks"]) for p in penalties)
    hubs = all_of("transshipment")
    assert all(p["nodes"] for p in hubs)
    hub_to_hub = [
        a for p in hubs for a in p["arcs"] if {a["from"], a["to"]} <= {v["id"] for v in p["nodes"]}
    ]
    assert hub_to_hub, "no hub-to-hub arcs generated"
    floats = all_of("float_costs")
    assert all(not ref.read(p).integral for p in floats)
    assert shortfall_share("unmet_hard") > 0.8


# --------------------------------------------------------------------------------------------
# The service against the references, and its answer re-checked from the request alone
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize(("family", "seed"), CASES)
def test_service_matches_references(client, family, seed):
    problem = ref.instance(family, seed)
    by_nx, by_lp = references(family, seed)
    integral = ref.read(problem).integral
    ans = _solve(client, problem)
    got = ans["objective"]
    ctx = f"got {got}, networkx {by_nx.objective}, linprog {by_lp.objective}\n{_show(problem)}"

    assert ans["status"] == "optimal", ctx
    # reference library: networkx.network_simplex
    assert ref.same_objective(got, by_nx.objective, integral), ctx
    # reference library: scipy.optimize.linprog (HiGHS)
    assert ref.same_objective(got, by_lp.objective, integral), ctx
    cert = ans["certificate"]
    # reference library: networkx.maximum_flow_value and scipy.optimize.linprog (HiGHS)
    assert cert["hard_shortfall"] == by_nx.hard_shortfall == by_lp.hard_shortfall, ctx

    # The answer itself: feasible, whole flows, and worth what it says (recomputed here).
    assert ref.check_allocation(problem, ans) == [], ctx
    # The stage-1 cut: Gale's bound recomputed from the request must equal the shortfall.
    demand, capacity, bad = ref.check_cut(problem, cert["cut"])
    assert bad == [], ctx
    assert (cert["cut"]["demand"], cert["cut"]["capacity"]) == (demand, capacity), ctx
    assert demand - capacity == by_nx.hard_shortfall, ctx
    # The potentials: their dual objective (AMO 1993, section 9.4) equals the reference
    # optimum in min form, which proves the answer optimal without trusting any solver.
    assert cert["negated"] is (problem.get("objective") == "max"), ctx
    dual = ref.min_form_dual(problem, ans)
    sense = ref.read(problem).sense
    assert ref.same_objective(float(dual), sense * by_nx.objective, integral), f"dual {dual}; {ctx}"
    assert ref.same_objective(cert["dual_objective"], got, integral), ctx

    checked = _verify(client, problem, ans)
    failed = [c for c in checked["checks"] if not c["passed"]]
    assert checked["valid"] is True and failed == [], f"{failed}\n{ctx}"


@pytest.mark.parametrize("family", ["unmet_hard", "forbidden"])
def test_reject_reports_the_reference_shortfall(client, family):
    # reference library: networkx.maximum_flow_value (stage 1 alone decides reject vs solve)
    rejected = 0
    for seed in range(40):
        problem = {**ref.instance(family, seed), "unmet_demand": "reject"}
        shortfall = references(family, seed)[0].hard_shortfall
        resp = client.post("/v1/solve", json=problem)
        if shortfall == 0:
            assert resp.status_code == 200, _show(problem)
            continue
        rejected += 1
        body = resp.get_json()
        assert resp.status_code == 422, _show(problem)
        assert resp.mimetype == "application/problem+json"
        assert body["type"].endswith("infeasible"), body
        witness = body["witness"]
        assert witness["shortfall"] == shortfall, f"{witness}\n{_show(problem)}"
        assert witness["demand"] - witness["capacity"] == shortfall, witness
    assert rejected >= 10


# --------------------------------------------------------------------------------------------
# Published optima
# --------------------------------------------------------------------------------------------

ASSIGNMENT_TABLE = [
    # source: scipy.optimize.linear_sum_assignment docstring example (min); max by scipy
    # its stated columns (1, 0, 2) are the unique minimum
    pytest.param(
        [[4, 1, 3], [2, 0, 5], [3, 2, 2]], 5, 11, [1, 0, 2], id="scipy-linear_sum_assignment"
    ),
    # source: scipy.sparse.csgraph.min_weight_full_bipartite_matching docstring example
    pytest.param(
        [[3, 3, 6], [4, 3, 5], [10, 1, 8]], 9, 19, None, id="scipy-min_weight_full_bipartite"
    ),
    # source: Wikipedia, "Hungarian algorithm", worked example (past revision); max by scipy
    pytest.param([[8, 4, 7], [5, 2, 3], [9, 4, 8]], 15, 18, None, id="wikipedia-hungarian"),
]


@pytest.mark.parametrize(("costs", "least", "most", "columns"), ASSIGNMENT_TABLE)
@pytest.mark.parametrize("form", ["costs", "arcs"])
def test_published_assignments(client, costs, least, most, columns, form):
    for objective, expected in (("min", least), ("max", most)):
        problem = {
            "sources": [{"id": f"w{i}"} for i in range(3)],
            "sinks": [{"id": f"j{j}"} for j in range(3)],
            "costs": costs,
            "objective": objective,
        }
        if form == "arcs":
            problem = _as_arcs(problem)
        assert ref.solve_networkx(problem).objective == expected
        assert ref.solve_linprog(problem).objective == expected
        ans = _solve(client, problem)
        assert ans["objective"] == expected, _show(problem)
        assert ans["certificate"]["hard_shortfall"] == 0
        assert _verify(client, problem, ans)["valid"] is True, _show(problem)
        if columns is not None and objective == "min":
            pairs = sorted((a["from"], a["to"]) for a in ans["allocation"] if a["flow"])
            assert pairs == [(f"w{i}", f"j{j}") for i, j in enumerate(columns)], _show(problem)


def _netgen_problem() -> dict:
    """networkx's netgen-2 graph as a request: demand < 0 a source, > 0 a sink, 0 a node."""
    path = importlib.resources.files("networkx.algorithms.flow.tests") / "netgen-2.gpickle.bz2"
    with path.open("rb") as raw, bz2.open(raw) as f:
        graph = pickle.load(f)
    sources, sinks, nodes = [], [], []
    for v, data in graph.nodes(data=True):
        demand = data.get("demand", 0)
        if demand < 0:
            sources.append({"id": str(v), "supply": -demand})
        elif demand > 0:
            sinks.append({"id": str(v), "demand": demand})
        else:
            nodes.append({"id": str(v)})
    arcs = []
    for u, v, data in graph.edges(data=True):
        arc = {"from": str(u), "to": str(v), "cost": data.get("weight", 0)}
        if "capacity" in data:  # no capacity attribute means unbounded in networkx
            arc["capacity"] = data["capacity"]
        arcs.append(arc)
    return {"sources": sources, "sinks": sinks, "nodes": nodes, "arcs": arcs}


# source: networkx/algorithms/flow/tests/test_mincost.py asserts this optimum for netgen-2
NETGEN_2_OPTIMUM = 6749969302


def test_references_reproduce_netgen():
    problem = _netgen_problem()
    assert (len(problem["nodes"]) + len(problem["sources"]) + len(problem["sinks"])) == 400
    assert len(problem["arcs"]) == 1416
    # reference library: networkx.network_simplex
    assert ref.solve_networkx(problem) == ref.Reference(NETGEN_2_OPTIMUM, 0)
    # reference library: scipy.optimize.linprog (HiGHS)
    assert ref.solve_linprog(problem) == ref.Reference(NETGEN_2_OPTIMUM, 0)


def test_service_solves_netgen(client):
    problem = _netgen_problem()
    ans = _solve(client, problem)
    # source: networkx's own test_mincost.py (test_large), as CHECKS.md records
    assert ans["objective"] == NETGEN_2_OPTIMUM
    assert ans["certificate"]["hard_shortfall"] == 0
    assert ref.check_allocation(problem, ans) == []
    assert ref.min_form_dual(problem, ans) == NETGEN_2_OPTIMUM
    checked = _verify(client, problem, ans)
    assert checked["valid"] is True, [c for c in checked["checks"] if not c["passed"]]


# --------------------------------------------------------------------------------------------
# Facts of the trade
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("family", ["dense_square", "rectangular", "max"])
def test_every_engine_finds_the_one_assignment_optimum(client, family):
    # common practice, no source: assignment is a special case of transportation, so the
    # assignment engines and the min-cost-flow engine must agree on the optimum.
    checked = 0
    for seed in range(40):
        problem = ref.instance(family, seed)
        if any(c is None for row in problem["costs"] for c in row):
            continue
        square = len(problem["sources"]) == len(problem["sinks"])
        posed = {
            "lapjv" if square else "linear_sum_assignment": problem,
            "min_weight_full_bipartite_matching": _as_arcs(problem),
            # Capacity 2 changes nothing (supply is 1) but leaves the assignment shape.
            "network_simplex": _as_arcs(problem, capacity=2),
            # A node with no arcs changes nothing but makes it a transshipment problem.
            "min_cost_flow": {**_as_arcs(problem), "nodes": [{"id": "idle-hub"}]},
        }
        objectives = {}
        for solver, variant in posed.items():
            ans = _solve(client, variant)
            assert ans["solver"] == solver, _show(variant)
            objectives[solver] = ans["objective"]
        expected = references(family, seed)[0].objective
        assert set(objectives.values()) == {expected}, f"{objectives}\n{_show(problem)}"
        checked += 1
    assert checked >= 20


@pytest.mark.parametrize("family", ["transportation", "penalties", "transshipment", "unmet_hard"])
def test_integer_data_gives_integral_flows(client, family):
    # common practice, no source: a network LP with whole supplies, demands and capacities has
    # an integral optimal vertex, so every reported quantity must be a whole number.
    for seed in range(25):
        problem = ref.instance(family, seed)
        ans = _solve(client, problem)
        quantities = [a["flow"] for a in ans["allocation"]]
        quantities += [u["amount"] for u in ans["unmet"] + ans["unused"]]
        assert all(type(q) is int for q in quantities), _show(problem)
        assert type(ans["flow_value"]) is int
        demand = sum(t.get("demand", 1) for t in problem["sinks"])
        assert ans["flow_value"] == demand - sum(u["amount"] for u in ans["unmet"])


@pytest.mark.parametrize("family", ["max", "transportation", "penalties", "transshipment"])
def test_maximising_is_minimising_negated_costs(client, family):
    # common practice, no source: max of score - penalties = -(min of -score + penalties).
    for seed in range(25):
        problem = ref.instance(family, seed)
        flipped = _negated(problem)
        a, b = _solve(client, problem), _solve(client, flipped)
        assert a["objective"] == -b["objective"], f"{_show(problem)}\n{_show(flipped)}"
        assert a["certificate"]["hard_shortfall"] == b["certificate"]["hard_shortfall"]
        assert a["certificate"]["negated"] is not b["certificate"]["negated"]
