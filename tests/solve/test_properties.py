"""Property tests: problems of every shape, drawn by hypothesis, against independent checks.

For every drawn problem the service's answer must (1) pass its own /v1/verify, (2) have the
objective and least hard shortfall that networkx finds on the same instance
(``reference.solve_networkx``), (3) be feasible and worth what it says when recomputed from
the request alone (``reference.check_allocation``), and (4) carry potentials whose dual
objective, recomputed here, equals that optimum. A problem the service calls unbounded must
be one networkx calls unbounded, with the named cycle really a negative cycle of unbounded
arcs; a rejected shortfall must be the reference's shortfall.

Tampered answers (a row dropped, a unit shifted to another arc, the objective or one
potential changed) must be refused by /v1/verify.

The runs are derandomized and bounded (``max_examples``) so CI sees the same cases every
time; ``CERTIMATCH_EXTENDED=1`` multiplies the number of examples by 20 (the README's
reliability section has the command).
"""

from __future__ import annotations

import json
import os
from fractions import Fraction
from typing import Any

import networkx as nx
import pytest
import reference as ref
from hypothesis import HealthCheck, assume, given, note, settings
from hypothesis import strategies as st
from servers import clean_app
from strategies import problems

EXTENDED = os.environ.get("CERTIMATCH_EXTENDED") == "1"
#: Examples per property: a few seconds each in CI on two cores; 20 times more when extended.
EXAMPLES = 6000 if EXTENDED else 300

SETTINGS = settings(
    max_examples=EXAMPLES,
    derandomize=True,       # the same cases on every machine and every run
    database=None,          # no example database left behind in the work tree
    deadline=None,          # never a time assertion; a slow first call is not a failure
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                           HealthCheck.filter_too_much],
)

PROBLEM = "urn:certimatch:problem:"


# --------------------------------------------------------------------------------------------
# The app: one per module (hypothesis runs many examples through one test function)
# --------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def client():
    return clean_app().test_client()


def post(client: Any, path: str, body: Any) -> tuple[int, Any]:
    resp = client.post(path, data=json.dumps(body), content_type="application/json")
    return resp.status_code, json.loads(resp.data)


# --------------------------------------------------------------------------------------------
# Independent checks the properties use
# --------------------------------------------------------------------------------------------


def _min_form_arcs(problem: dict[str, Any]) -> dict[tuple[str, str], list[Fraction]]:
    """Min-form cost of every unbounded request arc, by (from, to)."""
    net = ref.read(problem)
    out: dict[tuple[str, str], list[Fraction]] = {}
    for frm, to, cost, cap in net.arcs:
        if cap is None:
            out.setdefault((frm, to), []).append(net.sense * Fraction(cost))
    return out


def assert_negative_cycle(problem: dict[str, Any], cycle: list[str]) -> None:
    """The ids follow unbounded request arcs, close on the first, and cost less than 0."""
    unbounded = _min_form_arcs(problem)
    total = Fraction(0)
    for here, there in zip(cycle, cycle[1:] + cycle[:1], strict=True):
        assert (here, there) in unbounded, f"{here}->{there} is no unbounded arc of the request"
        total += min(unbounded[(here, there)])
    assert total < 0, f"cycle {cycle} costs {total} >= 0 per turn"


def plain(problem: dict[str, Any]) -> dict[str, Any]:
    """The problem with null supplies and demands left out: the same meaning (1), in the
    form the reference module reads."""
    out = dict(problem)
    for side, key in (("sources", "supply"), ("sinks", "demand")):
        out[side] = [{k: v for k, v in x.items() if not (k == key and v is None)}
                     for x in problem[side]]
    return out


def has_unbounded_negative_cycle(problem: dict[str, Any]) -> bool:
    """Whether unbounded arcs close a cycle of negative min-form cost (networkx's
    Bellman-Ford). The extended network always has a feasible flow (unmet demand is one),
    so this is exactly when the least cost has no bound."""
    net = ref.read(plain(problem))
    g = nx.DiGraph()
    for frm, to, cost, cap in net.arcs:
        weight = net.sense * Fraction(cost)
        if cap is None and (not g.has_edge(frm, to) or weight < g[frm][to]["weight"]):
            g.add_edge(frm, to, weight=weight)
    return bool(nx.negative_edge_cycle(g, weight="weight"))


def reference_or_unbounded(problem: dict[str, Any]) -> ref.Reference | None:
    """networkx's optimum, or None when the problem is unbounded.

    Unboundedness is settled first, by Bellman-Ford: networkx.network_simplex does not
    always raise NetworkXUnbounded but can pivot forever instead (seen with an unbounded
    cycle through a source, s0 -> h2 -> s0 at cost -1, beside parallel arcs).
    """
    if has_unbounded_negative_cycle(problem):
        return None
    try:
        return ref.solve_networkx(plain(problem))
    except nx.NetworkXUnbounded:
        raise AssertionError("network simplex calls unbounded what has no negative "
                             "cycle of unbounded arcs") from None


def assert_optimal(client: Any, problem: dict[str, Any], answer: dict[str, Any],
                   expected: ref.Reference) -> None:
    net = ref.read(plain(problem))
    integral = net.integral
    got = answer["objective"]
    assert ref.same_objective(got, expected.objective, integral), (got, expected)
    assert answer["certificate"]["hard_shortfall"] == expected.hard_shortfall
    assert ref.check_allocation(plain(problem), answer) == []
    sense = net.sense
    dual = ref.min_form_dual(plain(problem), answer)
    assert ref.same_objective(float(dual), sense * expected.objective, integral), dual
    status, verdict = post(client, "/v1/verify", {**problem, "answer": answer})
    failed = [c for c in verdict.get("checks", []) if not c["passed"]]
    assert status == 200 and verdict["valid"] is True, failed or verdict


# --------------------------------------------------------------------------------------------
# Properties
# --------------------------------------------------------------------------------------------


@SETTINGS
@given(problem=problems())
def test_every_answer_is_certified_and_matches_networkx(client, problem):
    note(json.dumps(problem))
    status, doc = post(client, "/v1/solve", problem)
    expected = reference_or_unbounded(problem)
    if expected is None:
        assert status == 422 and doc["type"] == PROBLEM + "unbounded", doc
        assert_negative_cycle(problem, doc["cycle"])
        return
    if status == 422 and doc["type"] == PROBLEM + "infeasible":
        assert problem.get("unmet_demand") == "reject"
        assert doc["witness"]["shortfall"] == expected.hard_shortfall > 0, doc
        w = doc["witness"]
        assert w["demand"] - w["capacity"] == w["shortfall"]
        return
    assert status == 200, doc
    if problem.get("unmet_demand") == "reject":
        assert expected.hard_shortfall == 0
    assert_optimal(client, problem, doc, expected)


def test_the_shapes_reach_every_engine_and_verdict(client):
    """Control for the property above: the strategies really produce every kind of case."""
    seen: set[str] = set()

    @settings(SETTINGS, max_examples=200)
    @given(problem=problems())
    def collect(problem: dict[str, Any]) -> None:
        status, doc = post(client, "/v1/solve", problem)
        if status == 200:
            seen.add(f"{doc['shape']}/{doc['solver']}")
            seen.add("shortfall" if doc["certificate"]["hard_shortfall"] else "no-shortfall")
            seen.add("fractional" if not ref.read(plain(problem)).integral else "whole")
        else:
            seen.add(doc["type"].rsplit(":", 1)[-1])

    collect()
    for kind in ("assignment/linear_sum_assignment", "transportation/min_cost_flow",
                 "transshipment/min_cost_flow", "shortfall", "no-shortfall", "fractional",
                 "whole", "unbounded", "infeasible"):
        assert kind in seen, (kind, sorted(seen))


# -- tampered answers -------------------------------------------------------------------------


def _allowed_arcs(problem: dict[str, Any]) -> list[tuple[str, str, Any, int | None]]:
    """(from, to, cost, arc index or None) of every arc an allocation row may use."""
    if "arcs" in problem:
        return [(a["from"], a["to"], a["cost"], k) for k, a in enumerate(problem["arcs"])]
    out = []
    for s, row in zip(problem["sources"], problem["costs"], strict=True):
        for t, c in zip(problem["sinks"], row, strict=True):
            if c is not None:
                out.append((s["id"], t["id"], c, None))
    return out


def _row_key(row: dict[str, Any]) -> tuple[str, str, Any]:
    return row["from"], row["to"], row.get("arc")


def _times(flow: int, cost: Any) -> Any:
    # Row costs as the service writes them: whole numbers stay whole.
    value = Fraction(cost) * flow
    return int(value) if value.denominator == 1 and isinstance(cost, int) else float(value)


def drop_row(answer: dict[str, Any], problem: dict[str, Any], data: Any) -> str:
    rows = answer["allocation"]
    assume(rows)
    k = data.draw(st.integers(0, len(rows) - 1), label="row")
    del rows[k]
    return f"dropped row {k}"


def shift_unit(answer: dict[str, Any], problem: dict[str, Any], data: Any) -> str:
    rows = answer["allocation"]
    assume(rows)
    k = data.draw(st.integers(0, len(rows) - 1), label="row")
    row = rows[k]
    # Another arc with other ends: moving a unit between parallel arcs of the same price
    # could leave an answer that is still optimal, so it would not be a tampering.
    others = [a for a in _allowed_arcs(problem) if (a[0], a[1]) != (row["from"], row["to"])]
    assume(others)
    frm, to, cost, arc = data.draw(st.sampled_from(others), label="to arc")
    own = next(a[2] for a in _allowed_arcs(problem) if (a[0], a[1], a[3]) == _row_key(row))
    row["flow"] -= 1
    row["cost"] = _times(row["flow"], own)
    if row["flow"] == 0:
        del rows[k]
    target = next((r for r in rows if _row_key(r) == (frm, to, arc)), None)
    if target is None:
        target = {"from": frm, "to": to, "flow": 0, "cost": 0}
        if arc is not None:
            target["arc"] = arc
        rows.append(target)
    target["flow"] += 1
    target["cost"] = _times(target["flow"], cost)
    return f"moved one unit of row {k} to {frm}->{to} (arc {arc})"


def change_objective(answer: dict[str, Any], problem: dict[str, Any], data: Any) -> str:
    step = data.draw(st.sampled_from([1, -1, 0.5, -0.5]), label="step")
    answer["objective"] += step
    return f"objective {step:+}"


def change_potential(answer: dict[str, Any], problem: dict[str, Any], data: Any) -> str:
    # A sink with demand > 0: its potential is pinned by the always-full arc to the
    # super-sink and by what feeds it. (With demand 0 a change may leave a valid proof.)
    demand = {t["id"]: 1 if t.get("demand") is None else t["demand"] for t in problem["sinks"]}
    candidates = [t for t, d in demand.items() if d > 0]
    assume(candidates)
    sink = data.draw(st.sampled_from(candidates), label="sink")
    step = data.draw(st.sampled_from([10**6, -(10**6)]), label="step")
    answer["certificate"]["potentials"][sink] += step
    return f"potential of {sink} {step:+}"


TAMPERS = {"drop_row": drop_row, "shift_unit": shift_unit,
           "objective": change_objective, "potential": change_potential}


@SETTINGS
@given(problem=problems(), how=st.sampled_from(sorted(TAMPERS)), data=st.data())
def test_tampered_answers_are_rejected(client, problem, how, data):
    status, answer = post(client, "/v1/solve", problem)
    assume(status == 200)
    note(json.dumps(problem))
    what = TAMPERS[how](answer, problem, data)
    note(what)
    status, verdict = post(client, "/v1/verify", {**problem, "answer": answer})
    assert status == 200, verdict
    assert verdict["valid"] is False, (what, verdict)
    assert any(not c["passed"] for c in verdict["checks"])


@SETTINGS
@given(problem=problems())
def test_an_untouched_answer_is_accepted(client, problem):
    """Control for the tampering test: the same round trip without a change says valid."""
    status, answer = post(client, "/v1/solve", problem)
    assume(status == 200)
    # Through JSON and back, as a caller would keep it: no precision may be lost.
    answer = json.loads(json.dumps(answer))
    status, verdict = post(client, "/v1/verify", {**problem, "answer": answer})
    assert status == 200 and verdict["valid"] is True, verdict
