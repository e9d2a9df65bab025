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
# Strategies: one problem shape each, small enough for the references to answer at once
# --------------------------------------------------------------------------------------------

SIDE = 7           # most sources, sinks or nodes of one kind
QUANTITY = 12      # largest supply, demand or capacity


def _costs(decimals: int, low: int = 0, high: int = 99) -> st.SearchStrategy[int | float]:
    """A cost on the grid 10**-decimals within [low, high]; floats print exactly as drawn."""
    if decimals == 0:
        return st.integers(low, high)
    unit = 10**decimals
    return st.integers(low * unit, high * unit).map(lambda k: k / unit)


def _rarely(one_in: int) -> st.SearchStrategy[bool]:
    """True about once in ``one_in`` draws. (hypothesis favours small integers, so
    ``integers(0, k) == 0`` would come out true far more often than 1 / (k + 1).)"""
    return st.sampled_from([False] * (one_in - 1) + [True])


def _ids(prefix: str, k: int) -> list[str]:
    return [f"{prefix}{i}" for i in range(k)]


def _unit(draw: st.DrawFn, prefix: str, k: int, key: str) -> list[dict[str, Any]]:
    # Supply and demand 1 written out, as null, or left to the default: all three mean 1.
    style = draw(st.sampled_from(["absent", "one", "null"]))
    value = {"absent": {}, "one": {key: 1}, "null": {key: None}}[style]
    return [{"id": i, **value} for i in _ids(prefix, k)]


def _quantities(draw: st.DrawFn, prefix: str, k: int, key: str) -> list[dict[str, Any]]:
    return [{"id": i, key: draw(st.integers(0, QUANTITY))} for i in _ids(prefix, k)]


def _soften(draw: st.DrawFn, sinks: list[dict[str, Any]], decimals: int) -> None:
    """Give some sinks a penalty (soft demand); at least one when asked to at all."""
    chosen = draw(st.lists(st.booleans(), min_size=len(sinks), max_size=len(sinks)))
    chosen[draw(st.integers(0, len(sinks) - 1))] = True
    for sink, soft in zip(sinks, chosen, strict=True):
        if soft:
            sink["penalty"] = draw(_costs(decimals, 0, 150))


def _matrix(draw: st.DrawFn, n: int, m: int, cell: st.SearchStrategy,
            null_share: float) -> list[list[Any]]:
    nulls = st.just(None)
    cells = st.one_of(nulls, cell) if null_share > 0 else cell
    rows = [draw(st.lists(cells, min_size=m, max_size=m)) for _ in range(n)]
    if null_share > 0 and draw(st.booleans()):
        # A whole column or row of null: an eligibility gap no source can fill.
        if draw(st.booleans()):
            j = draw(st.integers(0, m - 1))
            for row in rows:
                row[j] = None
        else:
            rows[draw(st.integers(0, n - 1))] = [None] * m
    return rows


def _sense(draw: st.DrawFn, max_share: bool) -> dict[str, str]:
    if max_share and draw(st.booleans()):
        return {"objective": "max"}
    return draw(st.sampled_from([{}, {"objective": "min"}]))


def _unmet(draw: st.DrawFn) -> dict[str, str]:
    # "reject" a quarter of the time: a rejected shortfall skips the optimum's checks.
    return draw(st.sampled_from([{}, {"unmet_demand": "minimize"}, {},
                                 {"unmet_demand": "reject"}]))


@st.composite
def dense(draw: st.DrawFn) -> dict[str, Any]:
    """Square assignment, unit supply and demand, every pair allowed."""
    n = draw(st.integers(1, SIDE))
    cost = st.integers(-50, 99) if draw(st.booleans()) else st.integers(0, 99)
    return {"sources": _unit(draw, "s", n, "supply"), "sinks": _unit(draw, "t", n, "demand"),
            "costs": _matrix(draw, n, n, cost, 0), **_sense(draw, True)}


@st.composite
def rectangular(draw: st.DrawFn) -> dict[str, Any]:
    """More sources than sinks or the other way round: some idle, or some hard demand unmet."""
    n, m = draw(st.integers(1, SIDE)), draw(st.integers(1, SIDE))
    assume(n != m)
    return {"sources": _unit(draw, "s", n, "supply"), "sinks": _unit(draw, "t", m, "demand"),
            "costs": _matrix(draw, n, m, st.integers(0, 99), 0), **_unmet(draw)}


@st.composite
def maximising(draw: st.DrawFn) -> dict[str, Any]:
    """Scores, some negative, to be maximised: idling is tempting where demand is hard."""
    n, m = draw(st.integers(1, SIDE)), draw(st.integers(1, SIDE))
    null_share = 0.3 if draw(st.booleans()) else 0
    return {"sources": _unit(draw, "s", n, "supply"), "sinks": _unit(draw, "t", m, "demand"),
            "costs": _matrix(draw, n, m, st.integers(-20, 100), null_share),
            "objective": "max"}


@st.composite
def forbidden(draw: st.DrawFn) -> dict[str, Any]:
    """Pairs forbidden with null, whole rows or columns sometimes: eligibility gaps."""
    n, m = draw(st.integers(1, SIDE)), draw(st.integers(1, SIDE))
    return {"sources": _unit(draw, "s", n, "supply"), "sinks": _unit(draw, "t", m, "demand"),
            "costs": _matrix(draw, n, m, st.integers(0, 99), 0.5),
            **_sense(draw, True), **_unmet(draw)}


def _arc(draw: st.DrawFn, frm: str, to: str, cost: st.SearchStrategy,
         capacity: st.SearchStrategy) -> dict[str, Any]:
    arc: dict[str, Any] = {"from": frm, "to": to, "cost": draw(cost)}
    cap = draw(capacity)
    # Unbounded written three ways: no member, null, or (here) left out by the strategy.
    if cap is not None:
        arc["capacity"] = cap
    elif draw(st.booleans()):
        arc["capacity"] = None
    return arc


def _bipartite(draw: st.DrawFn, src: list[str], snk: list[str], cost: st.SearchStrategy,
               capacity: st.SearchStrategy) -> list[dict[str, Any]]:
    pairs = [(i, j) for i in src for j in snk]
    chosen = draw(st.lists(st.sampled_from(pairs), max_size=3 * len(pairs)))
    # Repeats in `chosen` are parallel arcs: the same pair at another price and capacity.
    return [_arc(draw, i, j, cost, capacity) for i, j in chosen]


@st.composite
def sparse_arcs(draw: st.DrawFn) -> dict[str, Any]:
    """Assignment given as an arc list (capacity 1 or none), in any order."""
    n, m = draw(st.integers(1, SIDE)), draw(st.integers(1, SIDE))
    src, snk = _ids("s", n), _ids("t", m)
    cap = st.sampled_from([1, None])
    arcs = _bipartite(draw, src, snk, st.integers(0, 99), cap)
    return {"sources": _unit(draw, "s", n, "supply"), "sinks": _unit(draw, "t", m, "demand"),
            "arcs": arcs, **_sense(draw, True), **_unmet(draw)}


@st.composite
def capacities(draw: st.DrawFn) -> dict[str, Any]:
    """Transportation: quantities, arcs with capacities (some unbounded), parallel arcs."""
    n, m = draw(st.integers(1, SIDE)), draw(st.integers(1, SIDE))
    cap = st.one_of(st.none(), st.integers(0, QUANTITY))
    arcs = _bipartite(draw, _ids("s", n), _ids("t", m), st.integers(0, 60), cap)
    return {"sources": _quantities(draw, "s", n, "supply"),
            "sinks": _quantities(draw, "t", m, "demand"),
            "arcs": arcs, **_sense(draw, True), **_unmet(draw)}


@st.composite
def penalties(draw: st.DrawFn) -> dict[str, Any]:
    """Soft sinks: each unmet unit costs its penalty; dense or arcs, whole or fractional."""
    n, m = draw(st.integers(1, SIDE)), draw(st.integers(1, SIDE))
    decimals = draw(st.sampled_from([0, 0, 2]))
    sinks = _quantities(draw, "t", m, "demand")
    _soften(draw, sinks, decimals)
    problem: dict[str, Any] = {"sources": _quantities(draw, "s", n, "supply"), "sinks": sinks}
    if draw(st.booleans()):
        problem["costs"] = _matrix(draw, n, m, _costs(decimals, 0, 80), 0.2)
    else:
        cap = st.one_of(st.none(), st.integers(0, QUANTITY))
        problem["arcs"] = _bipartite(draw, _ids("s", n), _ids("t", m), _costs(decimals, 0, 80),
                                     cap)
    return {**problem, **_sense(draw, True)}


@st.composite
def transshipment(draw: st.DrawFn, decimals: int = 0) -> dict[str, Any]:
    """Depots and hubs: arcs between any two distinct ids, negative costs, cycles.

    Some negative-cost arcs have no capacity, so some problems are unbounded: the property
    test then holds the service's 422 against networkx's verdict.
    """
    n, k, m = draw(st.integers(1, 5)), draw(st.integers(1, 4)), draw(st.integers(1, 5))
    src, hub, snk = _ids("s", n), _ids("h", k), _ids("t", m)
    everyone = src + hub + snk
    pairs = [(a, b) for a in everyone for b in everyone if a != b]
    # Mostly arcs that go forward (source -> hub -> sink), some anywhere at all.
    forward = [(a, b) for a, b in pairs
               if (a in src and b not in src) or (a in hub and b in snk) or
               (a in hub and b in hub)]
    chosen = draw(st.lists(st.sampled_from(forward), min_size=1, max_size=3 * len(forward)))
    chosen += draw(st.lists(st.sampled_from(pairs), max_size=4))
    bounded = st.integers(0, QUANTITY)
    arcs = []
    for a, b in chosen:
        cost = draw(_costs(decimals, -10, 40))
        # A negative cost on an unbounded arc only now and then, or most problems would be
        # unbounded and the optimum would rarely be tested.
        unbounded_ok = cost >= 0 or draw(_rarely(12))
        cap = draw(st.one_of(st.none(), bounded)) if unbounded_ok else draw(bounded)
        arc: dict[str, Any] = {"from": a, "to": b, "cost": cost}
        if cap is not None:
            arc["capacity"] = cap
        arcs.append(arc)
    sense = _sense(draw, True)
    if draw(st.booleans()) and draw(st.booleans()):
        # A loop of two unbounded arcs that gains per turn (in the min form, so a score
        # loop when maximising): the problem is unbounded.
        a, b = draw(st.sampled_from(pairs))
        unit = 10**decimals
        gain = draw(st.integers(unit, 10 * unit))           # |cost there| on the grid
        back_k = draw(st.integers(0, gain - 1))              # cost back, less than the gain
        there = -gain // unit if decimals == 0 else -gain / unit
        back = back_k if decimals == 0 else back_k / unit
        flip = -1 if sense.get("objective") == "max" else 1
        arcs += [{"from": a, "to": b, "cost": flip * there},
                 {"from": b, "to": a, "cost": flip * back}]
    sinks = _quantities(draw, "t", m, "demand")
    if draw(st.booleans()):
        _soften(draw, sinks, decimals)
    return {"sources": _quantities(draw, "s", n, "supply"), "nodes": [{"id": h} for h in hub],
            "sinks": sinks, "arcs": arcs, **sense, **_unmet(draw)}


@st.composite
def fractional(draw: st.DrawFn) -> dict[str, Any]:
    """Costs and penalties with up to 6 decimals, the grid the service keeps."""
    decimals = draw(st.integers(1, 6))
    if draw(st.booleans()):
        return draw(transshipment(decimals))
    n, m = draw(st.integers(1, SIDE)), draw(st.integers(1, SIDE))
    sinks = _quantities(draw, "t", m, "demand")
    if draw(st.booleans()):
        _soften(draw, sinks, decimals)
    return {"sources": _quantities(draw, "s", n, "supply"), "sinks": sinks,
            "costs": _matrix(draw, n, m, _costs(decimals, -20, 80), 0.2), **_sense(draw, True)}


SHAPES: dict[str, st.SearchStrategy[dict[str, Any]]] = {
    "dense": dense(),
    "rectangular": rectangular(),
    "max": maximising(),
    "forbidden": forbidden(),
    "arcs": sparse_arcs(),
    "capacities": capacities(),
    "penalties": penalties(),
    "transshipment": transshipment(),
    "fractional": fractional(),
}


def problems() -> st.SearchStrategy[dict[str, Any]]:
    """A problem of any shape. Four shapes are assignments to the engines; transshipment,
    the shape with the most ways to go wrong, is drawn twice as often as the others."""
    return st.one_of(*SHAPES.values(), SHAPES["transshipment"])


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
