"""Hypothesis strategies: small problems of every shape, shared by the property tests and the
contract fuzzing (tests/solve/test_properties.py, tests/http/test_schemathesis.py)."""

from __future__ import annotations

from typing import Any

from hypothesis import assume
from hypothesis import strategies as st

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


