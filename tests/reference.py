"""Seeded instance generators and two independent reference solvers for cross-checks.

The generators emit problems in the wire format of ``POST /v1/solve`` (see the contract), one
family per shape the service must handle. The reference solvers answer the same
lexicographic question as the service -- first route as much hard demand as possible, then
least total cost (arc cost times flow plus penalty times unmet demand of soft sinks; for
``"max"`` the largest score minus penalties) -- without sharing a line with it:

- :func:`solve_networkx` runs a max-flow for stage 1 and ``networkx.network_simplex`` on the
  extended network (super-source, super-sink, hard-shortfall pool) for stage 2;
- :func:`solve_linprog` states both stages as linear programs over arc flows and unmet
  amounts and hands them to ``scipy.optimize.linprog(method="highs")``.

Both report the objective in the caller's sense, as the service does, and the least hard
shortfall. The ``check_*`` helpers recompute, from the request and an answer alone, what an
answer claims (feasibility, objective, the stage-1 cut and the dual objective of the
potentials), so the tests do not have to trust the service's own verifier.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from fractions import Fraction
from typing import Any

import networkx as nx
import numpy as np
from scipy.optimize import linprog
from scipy.sparse import coo_matrix

Problem = dict[str, Any]

# Costs are taken to 6 decimals by the service; the network-simplex reference needs integer
# weights, so fractional data is scaled by the same factor.
COST_SCALE = 10**6

# Relative tolerance for fractional data: the service is exact after scaling, the LP is not.
REL_TOL = 1e-6
ABS_TOL = 1e-6


# --------------------------------------------------------------------------------------------
# Instance generators
# --------------------------------------------------------------------------------------------


def _ids(prefix: str, k: int) -> list[str]:
    return [f"{prefix}-{i}" for i in range(k)]


def _unit_sides(rng: np.random.Generator, n: int, m: int) -> tuple[list[dict], list[dict]]:
    """Sources and sinks of an assignment: supply and demand 1, written out or left to default."""
    explicit = bool(rng.integers(2))
    sources = [{"id": i, "supply": 1} if explicit else {"id": i} for i in _ids("src", n)]
    sinks = [{"id": j, "demand": 1} if explicit else {"id": j} for j in _ids("snk", m)]
    return sources, sinks


def _value(rng: np.random.Generator, low: int, high: int, decimals: int) -> int | float:
    """One cost drawn from [low, high]; with decimals > 0 it carries that many places."""
    if decimals == 0:
        return int(rng.integers(low, high + 1))
    unit = 10**decimals
    return int(rng.integers(low * unit, high * unit + 1)) / unit


def _matrix(
    rng: np.random.Generator,
    n: int,
    m: int,
    low: int,
    high: int,
    *,
    null_p: float = 0.0,
    decimals: int = 0,
) -> list[list[int | float | None]]:
    return [
        [None if rng.random() < null_p else _value(rng, low, high, decimals) for _ in range(m)]
        for _ in range(n)
    ]


def _capacity(rng: np.random.Generator, unbounded_p: float, high: int) -> int | None:
    return None if rng.random() < unbounded_p else int(rng.integers(0, high + 1))


def _arc(frm: str, to: str, cost: int | float, capacity: int | None) -> dict:
    # An unbounded arc omits "capacity" here; instance() writes null into some families' arcs,
    # since absent and null must mean the same.
    arc: dict[str, Any] = {"from": frm, "to": to, "cost": cost}
    if capacity is not None:
        arc["capacity"] = capacity
    return arc


def _shuffled(rng: np.random.Generator, arcs: list[dict]) -> list[dict]:
    # The service must not rely on arcs arriving grouped by source.
    return [arcs[k] for k in rng.permutation(len(arcs))]


def _sense(rng: np.random.Generator, max_p: float) -> dict:
    return {"objective": "max"} if rng.random() < max_p else {}


def gen_dense_square(rng: np.random.Generator) -> Problem:
    n = int(rng.integers(3, 13))
    sources, sinks = _unit_sides(rng, n, n)
    # A quarter carry negative costs so sign handling is exercised without a max objective.
    low = -50 if rng.random() < 0.25 else 0
    return {"sources": sources, "sinks": sinks, "costs": _matrix(rng, n, n, low, 99)}


def gen_rectangular(rng: np.random.Generator, seed: int) -> Problem:
    a, b = sorted(int(x) for x in rng.choice(np.arange(3, 13), size=2, replace=False))
    # Alternate by seed so both n < m (short supply) and n > m (idle sources) are covered.
    n, m = (a, b) if seed % 2 == 0 else (b, a)
    sources, sinks = _unit_sides(rng, n, m)
    return {"sources": sources, "sinks": sinks, "costs": _matrix(rng, n, m, 0, 99)}


def gen_max(rng: np.random.Generator) -> Problem:
    n, m = (int(x) for x in rng.integers(3, 13, size=2))
    sources, sinks = _unit_sides(rng, n, m)
    null_p = 0.2 if rng.random() < 0.25 else 0.0
    # Negative scores make "leave it idle" tempting where hard demand forbids it.
    costs = _matrix(rng, n, m, -20, 100, null_p=null_p)
    return {"sources": sources, "sinks": sinks, "costs": costs, "objective": "max"}


def gen_forbidden(rng: np.random.Generator) -> Problem:
    n, m = (int(x) for x in rng.integers(3, 13, size=2))
    sources, sinks = _unit_sides(rng, n, m)
    costs = _matrix(rng, n, m, 0, 99, null_p=float(rng.uniform(0.1, 0.6)))
    # Whole rows or columns of null make eligibility gaps that leave hard demand unmet.
    if rng.random() < 0.3:
        j = int(rng.integers(m))
        for row in costs:
            row[j] = None
    if rng.random() < 0.3:
        costs[int(rng.integers(n))] = [None] * m
    return {"sources": sources, "sinks": sinks, "costs": costs, **_sense(rng, 0.3)}


def gen_sparse(rng: np.random.Generator) -> Problem:
    n, m = (int(x) for x in rng.integers(3, 13, size=2))
    sources, sinks = _unit_sides(rng, n, m)
    src, snk = _ids("src", n), _ids("snk", m)
    # Capacity 1 keeps the assignment shape; half the instances write it, half leave it out.
    cap = 1 if rng.random() < 0.5 else None
    arcs = []
    for i in range(n):
        k = int(rng.integers(1, min(m, 4) + 1))
        for j in rng.choice(m, size=k, replace=False):
            arcs.append(_arc(src[i], snk[int(j)], int(rng.integers(0, 100)), cap))
    problem = {"sources": sources, "sinks": sinks, "arcs": _shuffled(rng, arcs)}
    return {**problem, **_sense(rng, 0.25)}


def _transport_sides(
    rng: np.random.Generator, n: int, m: int, *, soft_p: float, decimals: int = 0
) -> tuple[list[dict], list[dict]]:
    sources = [{"id": i, "supply": int(rng.integers(0, 16))} for i in _ids("src", n)]
    sinks: list[dict] = []
    for j in _ids("snk", m):
        sink: dict[str, Any] = {"id": j, "demand": int(rng.integers(0, 16))}
        if rng.random() < soft_p:
            sink["penalty"] = _value(rng, 0, 150, decimals)
        sinks.append(sink)
    return sources, sinks


def _bipartite_arcs(
    rng: np.random.Generator,
    src: list[str],
    snk: list[str],
    *,
    edge_p: float,
    decimals: int = 0,
    high_cost: int = 60,
) -> list[dict]:
    arcs = []
    for i in src:
        for j in snk:
            if rng.random() < edge_p:
                cost = _value(rng, 0, high_cost, decimals)
                arcs.append(_arc(i, j, cost, _capacity(rng, 0.4, 12)))
                # Parallel arcs: same pair, another price and capacity.
                if rng.random() < 0.1:
                    cost = _value(rng, 0, high_cost, decimals)
                    arcs.append(_arc(i, j, cost, _capacity(rng, 0.4, 12)))
    return _shuffled(rng, arcs)


def _transport(rng: np.random.Generator, seed: int, *, soft_p: float, decimals: int = 0) -> Problem:
    n, m = (int(x) for x in rng.integers(3, 13, size=2))
    sources, sinks = _transport_sides(rng, n, m, soft_p=soft_p, decimals=decimals)
    problem: Problem = {"sources": sources, "sinks": sinks}
    # Alternate dense matrix (no capacities) and arcs (capacities, parallel arcs) by seed.
    if seed % 2 == 0:
        problem["costs"] = _matrix(rng, n, m, 0, 60, null_p=0.1, decimals=decimals)
    else:
        problem["arcs"] = _bipartite_arcs(
            rng,
            _ids("src", n),
            _ids("snk", m),
            edge_p=float(rng.uniform(0.4, 0.9)),
            decimals=decimals,
        )
    return {**problem, **_sense(rng, 0.25)}


def gen_transport(rng: np.random.Generator, seed: int) -> Problem:
    return _transport(rng, seed, soft_p=0.0)


def gen_penalties(rng: np.random.Generator, seed: int) -> Problem:
    problem = _transport(rng, seed, soft_p=0.5)
    # At least one soft sink, or the family would not be about penalties.
    if all("penalty" not in t for t in problem["sinks"]):
        problem["sinks"][0]["penalty"] = int(rng.integers(0, 151))
    return problem


def _transship(rng: np.random.Generator, *, decimals: int = 0) -> Problem:
    n, k, m = int(rng.integers(3, 9)), int(rng.integers(1, 6)), int(rng.integers(3, 9))
    src, hub, snk = _ids("src", n), _ids("hub", k), _ids("snk", m)
    sources, sinks = _transport_sides(rng, n, m, soft_p=0.3, decimals=decimals)
    arcs = []

    def add(frm: str, to: str, low: int, high: int, capacity: int | None) -> None:
        arcs.append(_arc(frm, to, _value(rng, low, high, decimals), capacity))

    for i in src:
        for h in rng.choice(hub, size=int(rng.integers(1, k + 1)), replace=False):
            add(i, str(h), 0, 30, _capacity(rng, 0.5, 15))
        if rng.random() < 0.15:
            add(i, snk[int(rng.integers(m))], 0, 80, _capacity(rng, 0.5, 15))
    for h in hub:
        for j in rng.choice(snk, size=int(rng.integers(1, m + 1)), replace=False):
            add(h, str(j), 0, 30, _capacity(rng, 0.5, 15))
    for a in hub:
        for b in hub:
            # Hub-to-hub arcs always have a capacity: cycles among hubs may then have negative
            # cost (or positive score) without making the problem unbounded.
            if a != b and rng.random() < 0.3:
                add(a, b, -10, 30, int(rng.integers(1, 11)))
    for _ in range(int(rng.integers(0, 3))):
        dup = dict(arcs[int(rng.integers(len(arcs)))])
        dup["cost"] = _value(rng, 0, 30, decimals)
        arcs.append(dup)
    problem = {
        "sources": sources,
        "sinks": sinks,
        "nodes": [{"id": h} for h in hub],
        "arcs": _shuffled(rng, arcs),
    }
    return {**problem, **_sense(rng, 0.3)}


def gen_transship(rng: np.random.Generator) -> Problem:
    return _transship(rng)


def gen_float(rng: np.random.Generator, seed: int) -> Problem:
    # Three shapes in turn, each with 3-decimal costs (and penalties where there are any).
    if seed % 3 == 0:
        n, m = (int(x) for x in rng.integers(3, 13, size=2))
        sources, sinks = _unit_sides(rng, n, m)
        costs = _matrix(rng, n, m, 0, 99, decimals=3)
        return {"sources": sources, "sinks": sinks, "costs": costs, **_sense(rng, 0.3)}
    if seed % 3 == 1:
        return _transport(rng, seed, soft_p=0.4, decimals=3)
    return _transship(rng, decimals=3)


def gen_unmet(rng: np.random.Generator, seed: int) -> Problem:
    n, m = int(rng.integers(3, 11)), int(rng.integers(3, 13))
    src, snk = _ids("src", n), _ids("snk", m)
    demand = [int(rng.integers(1, 11)) for _ in range(m)]
    # Supply short of demand by design: a random share of it, spread over the sources.
    total = max(1, int(sum(demand) * rng.uniform(0.3, 0.9)))
    supply = np.bincount(rng.integers(0, n, size=total), minlength=n)
    sources = [{"id": i, "supply": int(s)} for i, s in zip(src, supply, strict=True)]
    sinks: list[dict] = []
    for j, d in zip(snk, demand, strict=True):
        sink: dict[str, Any] = {"id": j, "demand": d}
        if rng.random() < 0.2:
            sink["penalty"] = int(rng.integers(0, 101))
        sinks.append(sink)
    problem: Problem = {"sources": sources, "sinks": sinks}
    if rng.random() < 0.5:
        problem["unmet_demand"] = "minimize"
    if seed % 3 == 0:
        problem["costs"] = _matrix(rng, n, m, 0, 60, null_p=float(rng.uniform(0.5, 0.8)))
    else:
        # Eligibility gaps: each sink is reachable from at most three sources, some from none.
        arcs = []
        for j in snk:
            for i in rng.choice(src, size=int(rng.integers(0, min(n, 3) + 1)), replace=False):
                arcs.append(_arc(str(i), j, int(rng.integers(0, 61)), _capacity(rng, 0.5, 8)))
        problem["arcs"] = _shuffled(rng, arcs)
    return {**problem, **_sense(rng, 0.2)}


_GENERATORS: dict[str, tuple[int, Callable[..., Problem], bool]] = {
    # name: (salt mixed into the seed, generator, whether it takes the seed)
    "dense_square": (1, gen_dense_square, False),
    "rectangular": (2, gen_rectangular, True),
    "max": (3, gen_max, False),
    "forbidden": (4, gen_forbidden, False),
    "sparse_arcs": (5, gen_sparse, False),
    "transportation": (6, gen_transport, True),
    "penalties": (7, gen_penalties, True),
    "transshipment": (8, gen_transship, False),
    "float_costs": (9, gen_float, True),
    "unmet_hard": (10, gen_unmet, True),
}

FAMILIES: tuple[str, ...] = tuple(_GENERATORS)
INTEGER_FAMILIES: tuple[str, ...] = tuple(f for f in FAMILIES if f != "float_costs")


def instance(family: str, seed: int) -> Problem:
    """The problem of ``family`` for ``seed``: the same dict on every machine and every run."""
    salt, gen, takes_seed = _GENERATORS[family]
    # The family's salt keeps seed 7 of one family unrelated to seed 7 of another.
    rng = np.random.default_rng([seed, salt])
    problem = gen(rng, seed) if takes_seed else gen(rng)
    if seed % 4 == 0:
        for arc in problem.get("arcs", []):
            arc.setdefault("capacity", None)
    return problem


# --------------------------------------------------------------------------------------------
# The request, read once into plain lists (the only code both references share)
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Net:
    sense: int  # +1 for "min", -1 for "max"
    sources: list[tuple[str, int]]  # (id, supply)
    sinks: list[tuple[str, int, int | float | None]]  # (id, demand, penalty or None if hard)
    nodes: list[str]
    arcs: list[tuple[str, str, int | float, int | None]]  # (from, to, cost, capacity)
    integral: bool  # every cost and penalty is a whole number

    @property
    def hard_demand(self) -> int:
        return sum(d for _, d, p in self.sinks if p is None)


def _is_whole(x: int | float) -> bool:
    return isinstance(x, int) or float(x).is_integer()


def read(problem: Problem) -> Net:
    """Normalise a wire-format problem: defaults applied, a dense matrix turned into arcs."""
    sources = [(s["id"], int(s.get("supply", 1))) for s in problem["sources"]]
    sinks = [(t["id"], int(t.get("demand", 1)), t.get("penalty")) for t in problem["sinks"]]
    nodes = [v["id"] for v in problem.get("nodes", [])]
    arcs: list[tuple[str, str, int | float, int | None]] = []
    if "costs" in problem:
        for (sid, _), row in zip(sources, problem["costs"], strict=True):
            for (tid, _, _), c in zip(sinks, row, strict=True):
                if c is not None:
                    arcs.append((sid, tid, c, None))
    else:
        for a in problem["arcs"]:
            arcs.append((a["from"], a["to"], a["cost"], a.get("capacity")))
    numbers = [c for _, _, c, _ in arcs] + [p for _, _, p in sinks if p is not None]
    integral = all(_is_whole(x) for x in numbers)
    if integral:
        arcs = [(f, t, int(c), u) for f, t, c, u in arcs]
        sinks = [(t, d, None if p is None else int(p)) for t, d, p in sinks]
    sense = -1 if problem.get("objective", "min") == "max" else 1
    return Net(sense, sources, sinks, nodes, arcs, integral)


@dataclass(frozen=True)
class Reference:
    objective: int | float  # caller's sense, as the service reports it
    hard_shortfall: int


def _whole(x: float, what: str) -> int:
    """An LP optimum that integer data makes integral, checked rather than trusted."""
    r = round(x)
    if abs(x - r) > 1e-6 * max(1.0, abs(x)):
        raise AssertionError(f"{what} {x!r} is not integral although the data are")
    return int(r)


# --------------------------------------------------------------------------------------------
# Reference 1: networkx max-flow + network simplex on the extended network
# --------------------------------------------------------------------------------------------

_S, _T, _POOL = ("*", "super_source"), ("*", "super_sink"), ("*", "hard_pool")


def _v(node_id: str) -> tuple[str, str]:
    # Request ids live in their own namespace so no id can collide with a virtual node.
    return ("id", node_id)


def solve_networkx(problem: Problem) -> Reference:
    """Lexicographic optimum by ``networkx.maximum_flow_value`` then ``network_simplex``."""
    net = read(problem)
    scale = 1 if net.integral else COST_SCALE

    # Stage 1: max-flow into hard sinks only. maximum_flow does not take multigraphs, and for
    # a max-flow parallel arcs are one arc with the summed capacity (unbounded if any is).
    g = nx.DiGraph()
    g.add_nodes_from([_S, _T])
    for sid, supply in net.sources:
        g.add_edge(_S, _v(sid), capacity=supply)
    for frm, to, _, cap in net.arcs:
        u, v = _v(frm), _v(to)
        if not g.has_edge(u, v):
            g.add_edge(u, v)
            if cap is not None:
                g[u][v]["capacity"] = cap
        elif cap is None:
            g[u][v].pop("capacity", None)  # no capacity attribute = unbounded in networkx
        elif "capacity" in g[u][v]:
            g[u][v]["capacity"] += cap
    for tid, demand, penalty in net.sinks:
        if penalty is None:
            g.add_edge(_v(tid), _T, capacity=demand)
    hard_shortfall = net.hard_demand - int(nx.maximum_flow_value(g, _S, _T))

    # Stage 2: min-cost flow of every unit of demand, real or short, with the hard pool capped
    # at the stage-1 shortfall. A MultiDiGraph keeps parallel arcs apart, each with its price.
    total = sum(d for _, d, _ in net.sinks)
    h = nx.MultiDiGraph()
    h.add_node(_S, demand=-total)
    h.add_node(_T, demand=total)
    h.add_node(_POOL, demand=0)
    for sid, supply in net.sources:
        h.add_edge(_S, _v(sid), capacity=supply, weight=0)
    for v in net.nodes:
        h.add_node(_v(v), demand=0)
    for k, (frm, to, cost, cap) in enumerate(net.arcs):
        weight = round(net.sense * cost * scale)
        if cap is None:
            h.add_edge(_v(frm), _v(to), key=k, weight=weight)
        else:
            h.add_edge(_v(frm), _v(to), key=k, weight=weight, capacity=cap)
    h.add_edge(_S, _POOL, capacity=hard_shortfall, weight=0)
    for tid, demand, penalty in net.sinks:
        h.add_edge(_v(tid), _T, capacity=demand, weight=0)
        if penalty is None:
            h.add_edge(_POOL, _v(tid), capacity=demand, weight=0)
        else:
            h.add_edge(_S, _v(tid), capacity=demand, weight=round(penalty * scale))
    cost, _ = nx.network_simplex(h)
    objective: int | float = net.sense * cost if scale == 1 else net.sense * cost / scale
    return Reference(objective, hard_shortfall)


# --------------------------------------------------------------------------------------------
# Reference 2: two linear programs solved by HiGHS
# --------------------------------------------------------------------------------------------


def _dense(terms: list[tuple[int, int, float]], shape: tuple[int, int]) -> np.ndarray:
    """Constraint matrix from (row, column, coefficient) terms; repeated cells add up."""
    if not terms:
        return np.zeros(shape)
    r, c, v = zip(*terms, strict=True)
    return coo_matrix((v, (r, c)), shape=shape).toarray()


def solve_linprog(problem: Problem) -> Reference:
    """Lexicographic optimum as LP1 (least hard unmet) then LP2 (least cost given LP1).

    Variables: one flow per arc (in request order), then one unmet amount per sink.
    """
    net = read(problem)
    n_arcs, n_sinks = len(net.arcs), len(net.sinks)
    n_var = n_arcs + n_sinks
    src_row = {sid: r for r, (sid, _) in enumerate(net.sources)}
    eq_ids = list(net.nodes) + [t for t, _, _ in net.sinks]
    eq_row = {v: r for r, v in enumerate(eq_ids)}

    # Net outflow of each source (0 <= out - in <= supply, as two blocks of <= rows), and net
    # inflow at nodes (= 0) and sinks (= demand - unmet), as (row, column, coefficient).
    out_terms: list[tuple[int, int, float]] = []
    eq_terms: list[tuple[int, int, float]] = []
    for k, (frm, to, _, _) in enumerate(net.arcs):
        if frm in src_row:
            out_terms.append((src_row[frm], k, 1.0))
        if to in src_row:
            out_terms.append((src_row[to], k, -1.0))
        if to in eq_row:
            eq_terms.append((eq_row[to], k, 1.0))
        if frm in eq_row:
            eq_terms.append((eq_row[frm], k, -1.0))
    for j, (tid, _, _) in enumerate(net.sinks):
        eq_terms.append((eq_row[tid], n_arcs + j, 1.0))
    n_src = len(net.sources)
    out = _dense(out_terms, (n_src, n_var))
    hard = np.array([0.0] * n_arcs + [1.0 if p is None else 0.0 for _, _, p in net.sinks])
    a_ub = np.vstack([out, -out])
    b_ub = np.array([float(s) for _, s in net.sources] + [0.0] * n_src)
    a_eq = _dense(eq_terms, (len(eq_ids), n_var))
    b_eq = np.array([0.0] * len(net.nodes) + [float(d) for _, d, _ in net.sinks])
    bounds = [(0, None if cap is None else cap) for _, _, _, cap in net.arcs]
    bounds += [(0, d) for _, d, _ in net.sinks]

    def lp(c: np.ndarray, a: np.ndarray, b: np.ndarray) -> float:
        res = linprog(c, A_ub=a, b_ub=b, A_eq=a_eq, b_eq=b_eq, bounds=bounds, method="highs")
        if res.status != 0:
            raise AssertionError(f"linprog did not reach an optimum: {res.message}")
        return float(res.fun)

    # LP1: least total unmet hard demand (= hard demand - max hard flow).
    hard_shortfall = _whole(lp(hard, a_ub, b_ub), "hard shortfall")
    # LP2: least cost with hard unmet capped at the LP1 optimum.
    c = np.array(
        [net.sense * float(cost) for _, _, cost, _ in net.arcs]
        + [0.0 if p is None else float(p) for _, _, p in net.sinks]
    )
    cost = lp(c, np.vstack([a_ub, hard]), np.append(b_ub, hard_shortfall))
    objective: int | float = net.sense * cost
    if net.integral:
        objective = _whole(objective, "objective")
    return Reference(objective, hard_shortfall)


def same_objective(a: int | float, b: int | float, integral: bool) -> bool:
    """Exact for integer data; one relative tolerance (REL_TOL) for fractional data."""
    if integral:
        return a == b
    return math.isclose(a, b, rel_tol=REL_TOL, abs_tol=ABS_TOL)


# --------------------------------------------------------------------------------------------
# Independent checks of an answer against its request
# --------------------------------------------------------------------------------------------


def check_allocation(problem: Problem, answer: dict) -> list[str]:
    """Feasibility and objective of an answer, recomputed from the request alone.

    Returns the violations found (empty when the answer is consistent).
    """
    net = read(problem)
    bad: list[str] = []
    by_arc = "arcs" in problem
    allowed = {(f, t): c for f, t, c, _ in net.arcs} if not by_arc else {}
    net_out: dict[str, int | float] = {}
    score = Fraction(0)
    for row in answer["allocation"]:
        frm, to, flow = row["from"], row["to"], row["flow"]
        if type(flow) is not int or flow < 0:
            bad.append(f"flow {flow!r} on {frm}->{to} is not a whole number >= 0")
            continue
        if by_arc:
            k = row.get("arc")
            if type(k) is not int or not 0 <= k < len(net.arcs):
                bad.append(f"row {frm}->{to} names no request arc ({k!r})")
                continue
            afrm, ato, cost, cap = net.arcs[k]
            if (afrm, ato) != (frm, to):
                bad.append(f"arc {k} is {afrm}->{ato}, row says {frm}->{to}")
            if cap is not None and flow > cap:
                bad.append(f"arc {k} carries {flow} > capacity {cap}")
        else:
            if (frm, to) not in allowed:
                bad.append(f"pair {frm}->{to} is not allowed")
                continue
            cost = allowed[(frm, to)]
        if not math.isclose(row["cost"], flow * cost, rel_tol=1e-9, abs_tol=1e-9):
            bad.append(f"row {frm}->{to} cost {row['cost']} != {flow} * {cost}")
        score += Fraction(cost) * flow
        net_out[frm] = net_out.get(frm, 0) + flow
        net_out[to] = net_out.get(to, 0) - flow
    unmet = {u["id"]: u["amount"] for u in answer["unmet"]}
    unused = {u["id"]: u["amount"] for u in answer["unused"]}
    for sid, supply in net.sources:
        out = net_out.get(sid, 0)
        if not 0 <= out <= supply:
            bad.append(f"source {sid} sends {out}, supply {supply}")
        if unused.get(sid, 0) != supply - out:
            bad.append(f"source {sid} unused {unused.get(sid, 0)} != {supply - out}")
    for v in net.nodes:
        if net_out.get(v, 0) != 0:
            bad.append(f"node {v} does not conserve flow ({net_out[v]})")
    penalties = Fraction(0)
    hard_unmet = 0
    for tid, demand, penalty in net.sinks:
        got = -net_out.get(tid, 0)
        if not 0 <= got <= demand:
            bad.append(f"sink {tid} receives {got}, demand {demand}")
        short = demand - got
        if unmet.get(tid, 0) != short:
            bad.append(f"sink {tid} unmet {unmet.get(tid, 0)} != {short}")
        if penalty is None:
            hard_unmet += short
        else:
            penalties += Fraction(penalty) * short
    if hard_unmet != answer["certificate"]["hard_shortfall"]:
        bad.append(f"hard unmet {hard_unmet} != hard_shortfall")
    # Caller's sense: min reports cost + penalties, max reports score - penalties.
    objective = score + penalties if net.sense == 1 else score - penalties
    if not same_objective(float(objective), answer["objective"], net.integral):
        bad.append(f"objective recomputed {float(objective)} != reported {answer['objective']}")
    return bad


def check_cut(problem: Problem, cut: dict) -> tuple[int, int | float, list[str]]:
    """Demand of the cut's hard sinks and capacity into its sink side, from the request alone.

    For any set Y of request nodes holding hard sinks T', no flow delivers into T' more than
    the supply of the sources in Y plus the capacity of the arcs entering Y, so
    demand(T') - capacity is a lower bound on the hard shortfall (Gale's condition).
    """
    net = read(problem)
    bad: list[str] = []
    side = set(cut["sink_side"])
    known = {s for s, _ in net.sources} | set(net.nodes) | {t for t, _, _ in net.sinks}
    if side - known:
        bad.append(f"cut names unknown ids {sorted(side - known)[:3]}")
    hard = {t: d for t, d, p in net.sinks if p is None}
    demand = 0
    for t in cut["sinks"]:
        if t not in hard:
            bad.append(f"cut sink {t} is not a hard sink")
        elif t not in side:
            bad.append(f"cut sink {t} is not on the sink side")
        else:
            demand += hard[t]
    capacity: int | float = sum(s for sid, s in net.sources if sid in side)
    for frm, to, _, cap in net.arcs:
        if frm not in side and to in side:
            capacity += math.inf if cap is None else cap
    return demand, capacity, bad


def min_form_dual(problem: Problem, answer: dict) -> Fraction | float:
    """Dual objective of the answer's potentials on the extended network, in min form.

    dual = D * (pi(s*) - pi(t*)) - sum over arcs of u * max(0, -reduced cost), with reduced
    cost c - pi(i) + pi(j) (AMO 1993, section 9.4). Weak duality makes it a lower bound on
    every stage-2 flow's cost, so equality with the reference optimum proves the potentials
    optimal. An arc of unbounded capacity with negative reduced cost gives -inf.

    Fractional data is taken back to the 6-decimal grid the service works on (costs and
    potentials times COST_SCALE, rounded): potentials printed as decimals carry roundoff that
    would otherwise show as reduced costs of -1e-14 on unbounded arcs.
    """
    net = read(problem)
    cert = answer["certificate"]
    scale = 1 if net.integral else COST_SCALE

    def grid(x: int | float) -> Fraction:
        return Fraction(x) if scale == 1 else Fraction(round(Fraction(x) * scale))

    pi = {k: grid(v) for k, v in cert["potentials"].items()}
    vp = {k: grid(v) for k, v in cert["virtual_potentials"].items()}
    s, t, pool = vp["super_source"], vp["super_sink"], vp["hard_pool"]
    total = sum(d for _, d, _ in net.sinks)
    arcs: list[tuple[Fraction, Fraction, Fraction, int | None]] = []  # (c, pi_i, pi_j, u)
    for frm, to, cost, cap in net.arcs:
        arcs.append((net.sense * grid(cost), pi[frm], pi[to], cap))
    for sid, supply in net.sources:
        arcs.append((Fraction(0), s, pi[sid], supply))
    arcs.append((Fraction(0), s, pool, cert["hard_shortfall"]))
    for tid, demand, penalty in net.sinks:
        arcs.append((Fraction(0), pi[tid], t, demand))
        if penalty is None:
            arcs.append((Fraction(0), pool, pi[tid], demand))
        else:
            arcs.append((grid(penalty), s, pi[tid], demand))
    dual = total * (s - t)
    for c, pi_i, pi_j, cap in arcs:
        reduced = c - pi_i + pi_j
        if reduced < 0:
            if cap is None:
                return -math.inf
            dual += cap * reduced
    return dual / scale
