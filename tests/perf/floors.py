"""What a user could run instead of the service, on the same request bytes.

* the **bare script**: what a user would write in a few lines: parse the
  body with orjson, build numpy arrays (ids mapped to indices with one dict), call the
  library everybody knows for the shape: scipy's ``linear_sum_assignment`` (A, B), scipy's
  ``min_weight_full_bipartite_matching`` (C), OR-Tools' ``SimpleMinCostFlow`` (D, E). No
  shortfall stage, no certificate, no checks.
* the **bare floors** (``floor_candidates``): the same parse and arrays, then the fastest
  engine found for the shape: lapjv (square dense), POT's network simplex (transportation
  shape without capacities), besides the script's own call. The run takes, per instance,
  the candidate with the least median as *the* floor. ``bare_once`` parses and builds
  the arrays once and times every candidate's call on them, the script's included.
* the **alternatives** (``linprog_once``, ``networkx_once``): the LP formulation through
  HiGHS, and networkx's network simplex, for the min-cost-flow families.

Every function returns the objective, so the run can hold the service to account.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass
from itertools import chain, repeat
from operator import itemgetter
from typing import Any

import numpy as np
import orjson


class BenchError(RuntimeError):
    """A measurement that could not be taken; recorded in the table, the run goes on."""


def timed(fn: Callable[..., Any], *args: Any) -> tuple[Any, float]:
    start = time.perf_counter()
    out = fn(*args)
    return out, time.perf_counter() - start


def libs() -> None:
    """Import everything any measurement needs, so memory baselines are alike."""
    import lapjv  # noqa: F401
    import ortools.graph.python.min_cost_flow  # noqa: F401
    import scipy.optimize  # noqa: F401
    import scipy.sparse.csgraph  # noqa: F401
    from ot.lp.emd_wrap import emd_c_sparse  # noqa: F401

    import service.solve.pipeline  # noqa: F401


# --------------------------------------------------------------------------- arrays


@dataclass
class FlowArrays:
    """A min-cost-flow request as plain arrays: nodes sources, then nodes, then sinks."""

    n_nodes: int
    n_sources: int
    sink_offset: int
    tail: np.ndarray
    head: np.ndarray
    cost: np.ndarray
    capacity: np.ndarray       # total demand where unbounded
    bounded: np.ndarray
    supply: np.ndarray
    demand: np.ndarray


def flow_arrays(d: dict[str, Any]) -> FlowArrays:
    """Ids to indices with one dict; columns with C-level map/fromiter (no Python loop
    body per arc), which is the cheapest way we know from parsed JSON to numpy."""
    sources, sinks, nodes = d["sources"], d["sinks"], d.get("nodes") or []
    ids = list(chain(map(itemgetter("id"), sources), map(itemgetter("id"), nodes),
                     map(itemgetter("id"), sinks)))
    index = dict(zip(ids, range(len(ids)), strict=True))
    arcs = d["arcs"]
    m = len(arcs)
    tail = np.fromiter(map(index.__getitem__, map(itemgetter("from"), arcs)), np.int64, m)
    head = np.fromiter(map(index.__getitem__, map(itemgetter("to"), arcs)), np.int64, m)
    cost = np.fromiter(map(itemgetter("cost"), arcs), np.int64, m)
    supply = np.fromiter(map(dict.get, sources, repeat("supply"), repeat(1)), np.int64,
                         len(sources))
    demand = np.fromiter(map(dict.get, sinks, repeat("demand"), repeat(1)), np.int64,
                         len(sinks))
    raw = np.fromiter(map(dict.get, arcs, repeat("capacity"), repeat(-1)), np.int64, m)
    bounded = raw >= 0
    capacity = np.where(bounded, raw, int(demand.sum()))
    return FlowArrays(len(ids), len(sources), len(sources) + len(nodes), tail, head, cost,
                      capacity, bounded, supply, demand)


def dense_arrays(d: dict[str, Any]) -> np.ndarray:
    # ids mapped as any service must, even though the dense call only needs positions
    index = {v: i for i, v in enumerate(chain(map(itemgetter("id"), d["sources"]),
                                             map(itemgetter("id"), d["sinks"])))}
    rows = d["costs"]
    n, m = len(rows), len(rows[0])
    assert len(index) == n + m
    # fromiter over the flattened rows measured ~15 % faster than np.array(rows)
    return np.fromiter(chain.from_iterable(rows), np.float64, n * m).reshape(n, m)


def sparse_arrays(d: dict[str, Any]) -> tuple[np.ndarray, ...]:
    src = {v: i for i, v in enumerate(map(itemgetter("id"), d["sources"]))}
    snk = {v: i for i, v in enumerate(map(itemgetter("id"), d["sinks"]))}
    arcs = d["arcs"]
    m = len(arcs)
    rows = np.fromiter(map(src.__getitem__, map(itemgetter("from"), arcs)), np.int64, m)
    cols = np.fromiter(map(snk.__getitem__, map(itemgetter("to"), arcs)), np.int64, m)
    cost = np.fromiter(map(itemgetter("cost"), arcs), np.float64, m)
    return rows, cols, cost, np.array([len(src), len(snk)])


ARRAYS: dict[str, Callable[[dict[str, Any]], Any]] = {
    "dense": dense_arrays, "sparse": sparse_arrays, "flow": flow_arrays}


# --------------------------------------------------------------------------- engine calls
# each takes the arrays of its kind and returns the objective


def scipy_dense(matrix: np.ndarray) -> int:
    from scipy.optimize import linear_sum_assignment

    r, c = linear_sum_assignment(matrix)
    return int(matrix[r, c].sum())


def lapjv_dense(matrix: np.ndarray) -> int:
    """lapjv in float64 (its float32 default is not exact beyond 2**24)."""
    import lapjv

    col, _, _ = lapjv.lapjv(matrix, force_doubles=True)
    return int(matrix[np.arange(len(col)), col].sum())


def scipy_sparse(rows: np.ndarray, cols: np.ndarray, cost: np.ndarray,
                 shape: np.ndarray) -> int:
    from scipy.sparse import csr_matrix
    from scipy.sparse.csgraph import min_weight_full_bipartite_matching

    # the generator's costs are >= 1, so scipy's dropping of explicit zeros cannot bite
    graph = csr_matrix((cost, (rows, cols)), shape=tuple(shape.tolist()))
    r, c = min_weight_full_bipartite_matching(graph)
    return int(np.asarray(graph[r, c]).sum())


def ortools_flow(a: FlowArrays) -> int:
    """OR-Tools on the plain network: a super-source feeds each source up to its supply
    and holds the total demand; sinks take exactly their demand (the families are
    feasible by construction, so no shortfall stage is needed)."""
    from ortools.graph.python import min_cost_flow

    s = a.n_nodes
    src = np.arange(a.n_sources, dtype=np.int64)
    solver = min_cost_flow.SimpleMinCostFlow()
    solver.add_arcs_with_capacity_and_unit_cost(
        np.concatenate([a.tail, np.full(a.n_sources, s)]).astype(np.int32),
        np.concatenate([a.head, src]).astype(np.int32),
        np.concatenate([a.capacity, a.supply]),
        np.concatenate([a.cost, np.zeros(a.n_sources, np.int64)]))
    supplies = np.zeros(a.n_nodes + 1, np.int64)
    supplies[a.sink_offset:a.n_nodes] = -a.demand
    supplies[s] = a.demand.sum()
    solver.set_nodes_supplies(np.arange(a.n_nodes + 1, dtype=np.int32), supplies)
    status = solver.solve()
    if status != solver.OPTIMAL:
        raise BenchError(f"floor min-cost flow: {status}")
    return int(solver.optimal_cost())


def pot_transport(a: FlowArrays) -> int:
    """POT's network simplex on the transportation form: sources are rows, sinks columns,
    plus a slack column that takes the supply nobody needs (0-cost arc from every
    source), so the marginals balance. The sparse entry point, no iteration cap."""
    from ot.lp.emd_wrap import emd_c_sparse

    ns, nt = a.n_sources, len(a.demand)
    slack = int(a.supply.sum() - a.demand.sum())
    rows = np.concatenate([a.tail, np.arange(ns)]).astype(np.uint64)
    cols = np.concatenate([a.head - a.sink_offset, np.full(ns, nt)]).astype(np.uint64)
    cost = np.concatenate([a.cost, np.zeros(ns, np.int64)]).astype(np.float64)
    _, _, values, total, _, _, code = emd_c_sparse(
        a.supply.astype(np.float64), np.append(a.demand, slack).astype(np.float64),
        rows, cols, cost, 0)
    if code != 1:
        raise BenchError(f"floor network simplex: code {code}")
    return round(float(total))


def transportation_shape(a: FlowArrays) -> bool:
    """Source-to-sink arcs only, no capacities, supply above demand: POT applies."""
    return (a.n_sources == a.sink_offset and not bool(a.bounded.any())
            and int(a.supply.sum()) > int(a.demand.sum()))


#: the bare script's call per kind: the library a user reaches for first
SCRIPT: dict[str, tuple[str, Callable[..., int]]] = {
    "dense": ("scipy linear_sum_assignment", scipy_dense),
    "sparse": ("scipy min_weight_full_bipartite_matching", scipy_sparse),
    "flow": ("OR-Tools SimpleMinCostFlow", ortools_flow),
}


def floor_candidates(kind: str, arrays: Any) -> dict[str, Callable[..., int]]:
    """Engines that may be the fastest for these arrays (the script's call included)."""
    name, call = SCRIPT[kind]
    out = {name: call}
    if kind == "dense" and arrays.shape[0] == arrays.shape[1]:
        out["lapjv"] = lapjv_dense
    if kind == "flow" and transportation_shape(arrays):
        out["POT network simplex"] = pot_transport
    return out


def _call(call: Callable[..., int], arrays: Any) -> int:
    return call(*arrays) if isinstance(arrays, tuple) else call(arrays)


def bare_once(body: bytes, kind: str) -> dict[str, Any]:
    """parse + arrays once, then every candidate engine's call on the same arrays.

    ``script`` and ``floors`` are totals (parse + arrays + the call): the script's with
    its library call, one per candidate engine under ``floors``.
    """
    d, t_parse = timed(orjson.loads, body)
    arrays, t_arrays = timed(ARRAYS[kind], d)
    del d
    calls: dict[str, float] = {}
    objectives: dict[str, int] = {}
    for name, call in floor_candidates(kind, arrays).items():
        objectives[name], calls[name] = timed(_call, call, arrays)
    script = SCRIPT[kind][0]
    return {"parse": t_parse, "arrays": t_arrays, "calls": calls,
            "script": t_parse + t_arrays + calls[script],
            "floors": {k: t_parse + t_arrays + v for k, v in calls.items()},
            "objectives": objectives}


def script_parsed(d: dict[str, Any], kind: str) -> int:
    """The script after the parse (for the memory probe): the objective."""
    return _call(SCRIPT[kind][1], ARRAYS[kind](d))


# --------------------------------------------------------------------------- alternatives


def linprog_once(body: bytes) -> dict[str, Any]:
    """The LP a user might write: min c.x, out - in <= supply at sources, = 0 at nodes,
    = -demand at sinks, 0 <= x <= capacity; HiGHS through scipy."""
    from scipy.optimize import linprog
    from scipy.sparse import coo_matrix

    start = time.perf_counter()
    a = flow_arrays(orjson.loads(body))
    m = len(a.tail)
    k = np.arange(m)
    incidence = coo_matrix(
        (np.concatenate([np.ones(m), -np.ones(m)]),
         (np.concatenate([a.tail, a.head]), np.concatenate([k, k]))),
        shape=(a.n_nodes, m)).tocsr()
    b_eq = np.zeros(a.n_nodes - a.n_sources)
    b_eq[a.sink_offset - a.n_sources:] = -a.demand
    upper = np.where(a.bounded, a.capacity, np.inf)
    res = linprog(a.cost, A_ub=incidence[: a.n_sources], b_ub=a.supply,
                  A_eq=incidence[a.n_sources:], b_eq=b_eq,
                  bounds=np.column_stack([np.zeros(m), upper]), method="highs")
    seconds = time.perf_counter() - start
    if res.status != 0:
        raise BenchError(f"linprog: {res.message}")
    return {"seconds": seconds, "objective": round(float(res.fun))}


def networkx_once(body: bytes) -> dict[str, Any]:
    """networkx.network_simplex on the same network (graph building included)."""
    import networkx as nx

    start = time.perf_counter()
    a = flow_arrays(orjson.loads(body))
    g = nx.DiGraph()
    s = a.n_nodes
    g.add_node(s, demand=-int(a.demand.sum()))
    g.add_nodes_from(range(a.n_nodes))
    g.add_nodes_from((a.sink_offset + j, {"demand": q}) for j, q in enumerate(a.demand.tolist()))
    g.add_edges_from((s, i, {"weight": 0, "capacity": u})
                     for i, u in enumerate(a.supply.tolist()))
    g.add_edges_from(
        (t, h, {"weight": c, "capacity": u} if b else {"weight": c})
        for t, h, c, u, b in zip(a.tail.tolist(), a.head.tolist(), a.cost.tolist(),
                                 a.capacity.tolist(), a.bounded.tolist(), strict=True))
    cost, _ = nx.network_simplex(g)
    return {"seconds": time.perf_counter() - start, "objective": int(cost)}
