"""certimatch benchmark: the service against the bare floor, side by side, in one run.

    .venv/bin/python tests/perf/run.py [--families A,B,C,D,E] [--quick] [--out DIR]

For every instance of the seeded families (generators.py) it measures, interleaving the
measurements round by round so that a noisy neighbour hits all of them alike:

1. end to end over HTTP through a real gunicorn (deploy/gunicorn.conf.py, 2 workers);
2. the service's phases in-process on the same bytes (parse, pipeline phases, serialise);
3. peak memory of an in-process solve in a fresh subprocess, minus a baseline subprocess
   that only imports and parses;
4. the bare floor: parse + numpy arrays + the bare library call, no certificate;
5. for min-cost-flow families, scipy linprog (HiGHS) and networkx network_simplex;
6. throughput of a 10 x 10 solve against a hello-world Flask route, with wrk.

Medians of repeated runs; ratios rather than absolute times. tests/perf/README.md says what
each column means. Traffic goes to 127.0.0.1 only, and every loop and wait is bounded.
"""

from __future__ import annotations

import argparse
import datetime
import json
import math
import os
import platform
import re
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from itertools import chain, repeat
from operator import itemgetter
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
for _p in (str(ROOT), str(HERE.parent), str(HERE)):
    if _p not in sys.path:
        sys.path.insert(0, _p)

import generators as gen  # noqa: E402
import numpy as np  # noqa: E402
import orjson  # noqa: E402
import requests  # noqa: E402
from servers import Gunicorn, ServerFailed  # noqa: E402

JSON_HEADERS = {"Content-Type": "application/json"}
HTTP_TIMEOUT = 600.0      # bound on one request (the worker's own timeout is lower)
PROBE_TIMEOUT = 900.0     # bound on one memory/floor subprocess
ALT_TIMEOUT = 240.0       # bound on one linprog / networkx subprocess
NETWORKX_MAX_ARCS = 200_000   # beyond this network_simplex takes minutes: skipped
WRK_ARGS = ["-t2", "-c8", "-d5s", "--timeout", "10s"]
WRK_ROUNDS = 3
SMALL_PHASE_RUNS = 200    # in-process runs of the 10 x 10 problem, for its phase medians
PHASES = ("validate", "normalise", "solve", "certify", "answer", "self_verify")
ALL_PHASES = ("parse", *PHASES, "serialise")
DEFAULT_BODY_LIMIT = 64 * 1024 * 1024   # service.settings default MAX_BODY_BYTES


class BenchError(RuntimeError):
    """A measurement that could not be taken; recorded in the table, the run goes on."""


def log(msg: str) -> None:
    print(f"[{time.strftime('%H:%M:%S')}] {msg}", file=sys.stderr, flush=True)


# --------------------------------------------------------------------------- instances


@dataclass(frozen=True)
class Instance:
    """One benchmark problem; ``series`` instances form the A and D growth curves."""

    key: str
    family: str
    kind: str                 # "dense" | "sparse" | "flow": which floor applies
    make: Callable[[], dict[str, Any]]
    series: bool = True


def plan(families: set[str], quick: bool) -> list[Instance]:
    """The instances of issue 3, or small ones for ``--quick``, in run order."""
    out: list[Instance] = []
    a_sizes = (250, 500) if quick else (250, 500, 1000, 2000, 4000)
    for n in a_sizes:
        out.append(Instance(f"A {n}x{n}", "A", "dense",
                            lambda n=n: gen.dense_assignment(n, seed=1)))
    b_shape = (200, 1000) if quick else (1000, 5000)
    out.append(Instance(f"B {b_shape[0]}x{b_shape[1]}", "B", "dense",
                        lambda: gen.dense_assignment(*b_shape, seed=2)))
    c_n = 2000 if quick else 20_000
    out.append(Instance(f"C {c_n}x{c_n}", "C", "sparse",
                        lambda: gen.sparse_assignment(c_n, seed=3)))
    d_arcs = (10_000, 50_000) if quick else (10_000, 30_000, 100_000, 300_000, 1_000_000)
    for arcs in d_arcs:
        out.append(Instance(f"D {_short(arcs)} arcs", "D", "flow",
                            lambda a=arcs: gen.ticket_routing_scaled(a, seed=5)))
    if not quick:
        # the headline instance: 300 agents, 5,000 tickets; not on the scaled
        # curve (its supply covers 1.8x the demand, the series' 1.2x)
        out.append(Instance("D 150k (300 agents)", "D", "flow",
                            lambda: gen.ticket_routing(5000, 300, seed=4), series=False))
    e_args = (dict(stores=450, warehouses=8, depots=40, wh_per_depot=4, depots_per_store=10)
              if quick else {})
    out.append(Instance("E transshipment", "E", "flow",
                        lambda: gen.transshipment(seed=6, **e_args)))
    return [i for i in out if i.family in families]


def _short(n: int) -> str:
    return f"{n // 1_000_000}M" if n >= 1_000_000 else f"{n // 1000}k"


def size_of(req: dict[str, Any]) -> tuple[int, str, int]:
    """(size, unit, bytes of the input arrays): cells x 8 for a matrix, arcs x 8 per
    numeric column (tail, head, cost, and capacity when given) for an arc list."""
    if "costs" in req:
        cells = len(req["costs"]) * (len(req["costs"][0]) if req["costs"] else 0)
        return cells, "cells", cells * 8
    arcs = req["arcs"]
    columns = 4 if arcs and "capacity" in arcs[0] else 3
    return len(arcs), "arcs", len(arcs) * 8 * columns


# --------------------------------------------------------------------------- the machine


def warm_memory(cap_gib: float) -> dict[str, float] | None:
    """Touch most of the free memory once, then free it; None when there is nothing to do.

    On a virtual machine whose memory the host backs on first touch, a page the guest has
    never used costs a host fault the first time (measured here: about 3 s per GiB, against
    0.1-0.3 s once touched). Whichever measurement first allocates fresh memory would pay
    it, at random; touching the memory up front takes that out of every figure.
    """
    if cap_gib <= 0:
        return None
    try:
        with open("/proc/meminfo") as f:
            info = dict(line.split(":", 1) for line in f)
        available = int(info["MemAvailable"].split()[0]) / 2**20     # kB -> GiB
    except (OSError, KeyError, ValueError):
        return None
    gib = int(min(cap_gib, available - 2))
    if gib <= 0:
        return None
    held = []
    start = time.perf_counter()
    for _ in range(gib):
        held.append(np.ones(1 << 27, np.int64))    # 1 GiB, every page written
    first = time.perf_counter() - start
    del held
    return {"gib": float(gib), "seconds": first}


# --------------------------------------------------------------------------- the floor


def _libs() -> None:
    """Import everything any measurement needs, so memory baselines are alike."""
    import ortools.graph.python.min_cost_flow  # noqa: F401
    import scipy.optimize  # noqa: F401
    import scipy.sparse.csgraph  # noqa: F401

    import service.solve.pipeline  # noqa: F401


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


def _timed(fn: Callable[..., Any], *args: Any) -> tuple[Any, float]:
    start = time.perf_counter()
    out = fn(*args)
    return out, time.perf_counter() - start


def floor_once(body: bytes, kind: str) -> dict[str, Any]:
    """parse + arrays + bare library call; ``objective`` to hold the service to account."""
    d, t_parse = _timed(orjson.loads, body)
    out = floor_parsed(d, kind)
    out["parse"] = t_parse
    out["total"] += t_parse
    return out


def floor_parsed(d: dict[str, Any], kind: str) -> dict[str, Any]:
    """The floor after the parse: arrays and the bare library call."""
    if kind == "dense":
        arrays, t_arrays = _timed(_dense_arrays, d)
        (r, c), t_call = _timed(_dense_call, arrays)
        objective = int(arrays[r, c].sum())
    elif kind == "sparse":
        arrays, t_arrays = _timed(_sparse_arrays, d)
        (graph, r, c), t_call = _timed(_sparse_call, *arrays)
        objective = int(np.asarray(graph[r, c]).sum())
    else:
        arrays, t_arrays = _timed(flow_arrays, d)
        objective, t_call = _timed(_flow_call, arrays)
    return {"arrays": t_arrays, "call": t_call, "total": t_arrays + t_call,
            "objective": objective}


def _dense_arrays(d: dict[str, Any]) -> np.ndarray:
    # ids mapped as any service must, even though the dense call only needs positions
    index = {v: i for i, v in enumerate(chain(map(itemgetter("id"), d["sources"]),
                                             map(itemgetter("id"), d["sinks"])))}
    rows = d["costs"]
    n, m = len(rows), len(rows[0])
    assert len(index) == n + m
    # fromiter over the flattened rows measured ~15 % faster than np.array(rows)
    return np.fromiter(chain.from_iterable(rows), np.float64, n * m).reshape(n, m)


def _dense_call(matrix: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    from scipy.optimize import linear_sum_assignment

    return linear_sum_assignment(matrix)


def _sparse_arrays(d: dict[str, Any]) -> tuple[np.ndarray, ...]:
    src = {v: i for i, v in enumerate(map(itemgetter("id"), d["sources"]))}
    snk = {v: i for i, v in enumerate(map(itemgetter("id"), d["sinks"]))}
    arcs = d["arcs"]
    m = len(arcs)
    rows = np.fromiter(map(src.__getitem__, map(itemgetter("from"), arcs)), np.int64, m)
    cols = np.fromiter(map(snk.__getitem__, map(itemgetter("to"), arcs)), np.int64, m)
    cost = np.fromiter(map(itemgetter("cost"), arcs), np.float64, m)
    return rows, cols, cost, np.array([len(src), len(snk)])


def _sparse_call(rows: np.ndarray, cols: np.ndarray, cost: np.ndarray,
                 shape: np.ndarray) -> tuple[Any, np.ndarray, np.ndarray]:
    from scipy.sparse import csr_matrix
    from scipy.sparse.csgraph import min_weight_full_bipartite_matching

    # the generator's costs are >= 1, so scipy's dropping of explicit zeros cannot bite
    graph = csr_matrix((cost, (rows, cols)), shape=tuple(shape.tolist()))
    r, c = min_weight_full_bipartite_matching(graph)
    return graph, r, c


def _flow_call(a: FlowArrays) -> int:
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


# --------------------------------------------------------------------------- in-process


def inprocess_once(body: bytes, settings: Any) -> tuple[dict[str, float], bytes]:
    """The service's phases on the same bytes, as a worker would run them."""
    from service.solve.pipeline import solve_body

    t: dict[str, float] = {}
    data, t["parse"] = _timed(orjson.loads, body)
    answer = solve_body(data, settings, timings=t)
    out, t["serialise"] = _timed(orjson.dumps, answer)
    return t, out


def probe_main(mode: str, path: str, kind: str) -> None:
    """Entry of the measuring subprocesses: one JSON line on stdout."""
    if mode in ("linprog", "networkx"):
        body = Path(path).read_bytes()
        print(json.dumps(linprog_once(body) if mode == "linprog" else networkx_once(body)))
        return
    if mode not in ("baseline", "service", "floor"):
        raise SystemExit(f"unknown probe {mode}")
    _libs()
    body = Path(path).read_bytes()
    # the same imports and parse in every mode; the parsed body stays alive throughout
    data = orjson.loads(body)
    out: dict[str, Any] = {"hwm_parse": vm_status("VmHWM"), "rss_parsed": vm_status("VmRSS")}
    reset = mode != "baseline" and reset_hwm()
    if mode == "service":
        from service.settings import load_settings
        from service.solve.pipeline import solve_body

        out["answer_bytes"] = len(orjson.dumps(solve_body(data, load_settings())))
    elif mode == "floor":
        out["objective"] = floor_parsed(data, kind)["objective"]
    out["hwm_reset"] = reset
    out["hwm"] = vm_status("VmHWM")
    # kept for reference only: see vm_status for why it is not the measure
    out["ru_maxrss"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    print(json.dumps(out))


def reset_hwm() -> bool:
    """Set this process's VmHWM back to its current RSS (Linux >= 4.0, clear_refs "5").

    orjson's parse has a transient peak above the parsed objects; without the reset it
    would hide whatever the solve needs below that peak.
    """
    try:
        with open("/proc/self/clear_refs", "w") as f:
            f.write("5")
    except OSError:
        return False
    return True


def vm_status(field: str) -> int:
    """``VmHWM`` (peak) or ``VmRSS`` (now) of this process, in bytes.

    Not ``ru_maxrss``: Linux carries the parent's high-water mark across fork+exec into
    the child's ``ru_maxrss``, so a probe started by this (large) runner would report the
    runner's peak. VmHWM belongs to the child's own address space only.
    """
    with open("/proc/self/status") as f:
        for line in f:
            if line.startswith(field + ":"):
                return int(line.split()[1]) * 1024
    raise BenchError(f"no {field} in /proc/self/status")


def run_probe(mode: str, path: Path, kind: str, timeout: float) -> dict[str, Any]:
    argv = [sys.executable, str(Path(__file__).resolve()), "--probe", mode, "--body",
            str(path), "--kind", kind]
    try:
        done = subprocess.run(argv, capture_output=True, text=True, timeout=timeout,
                              cwd=ROOT, check=False)
    except subprocess.TimeoutExpired:
        # subprocess.run kills the child it started before raising
        raise BenchError(f"{mode}: stopped after {timeout:.0f} s") from None
    if done.returncode != 0:
        tail = done.stderr.strip().splitlines()[-1:] or ["no output"]
        raise BenchError(f"{mode} probe failed: {tail[0]}")
    result: dict[str, Any] = json.loads(done.stdout.strip().splitlines()[-1])
    return result


# --------------------------------------------------------------------------- servers


@contextmanager
def serving(app: str, health: str, folder: Path, extra_env: dict[str, str],
            pythonpath: str | None = None) -> Iterator[Gunicorn]:
    """A gunicorn with the deploy configuration and 2 workers (tests/servers.py), serving."""
    name = app.split(":")[0].replace(".", "-")
    srv = Gunicorn(folder, workers=2, env=extra_env, app=app, pythonpath=pythonpath,
                   health=health, log_name=f"gunicorn-{name}.log")
    try:
        srv.start()
    except ServerFailed as e:
        raise BenchError(str(e)) from None
    try:
        yield srv
    finally:
        srv.stop()


def _tail(text: str, lines: int) -> str:
    return "\n".join(text.splitlines()[-lines:])


def hello_app() -> Any:
    """The hello-world Flask app of the throughput comparison (gunicorn 'run:hello_app()')."""
    from flask import Flask

    app = Flask("hello")

    @app.get("/")
    def hello() -> str:
        return "Hello, world!"

    return app


def http_once(url: str, body: bytes) -> tuple[float, bytes]:
    start = time.perf_counter()
    r = requests.post(url, data=body, headers=JSON_HEADERS, timeout=HTTP_TIMEOUT)
    content = r.content
    elapsed = time.perf_counter() - start
    if r.status_code != 200:
        raise BenchError(f"HTTP {r.status_code}: {content[:200].decode(errors='replace')}")
    return elapsed, content


# --------------------------------------------------------------------------- one instance


def _repeats(first_e2e: float, override: int | None) -> tuple[int, int]:
    """(rounds to keep, warm-up rounds to discard first, the first one included).

    A small request reaches its steady time only after several: each of the 2 workers
    meets the body's code paths and memory for the first time (measured on A 250: 42 and
    48 ms for the first two, 13-14 ms from the tenth on). Small rounds are cheap, so they
    get more warm-up and more kept rounds.
    """
    if override:
        return override, 1 if first_e2e < 0.5 else 0
    if first_e2e < 0.1:
        return 11, 6
    if first_e2e < 0.5:
        return 5, 2
    if first_e2e < 3:
        return 5, 0
    if first_e2e < 15:
        return 3, 0
    return 2, 0              # the largest sizes: keeps the full run within ~25 minutes


def measure(inst: Instance, srv: Gunicorn, folder: Path, override: int | None) -> dict[str, Any]:
    from service.settings import load_settings

    settings = load_settings()
    req, t_gen = _timed(inst.make)
    size, unit, input_bytes = size_of(req)
    body = orjson.dumps(req)
    del req
    path = folder / (re.sub(r"\W+", "_", inst.key) + ".json")
    path.write_bytes(body)
    res: dict[str, Any] = {"key": inst.key, "family": inst.family, "kind": inst.kind,
                           "series": inst.series, "size": size, "unit": unit,
                           "input_bytes": input_bytes, "body_bytes": len(body),
                           "generate_s": t_gen, "samples": {}, "errors": []}
    log(f"{inst.key}: {size:,} {unit}, body {len(body) / 1e6:.1f} MB")
    url = srv.base + "/v1/solve"
    samples: dict[str, list[float]] = {k: [] for k in
                                       ("e2e", *ALL_PHASES, "floor_parse", "floor_arrays",
                                        "floor_call", "floor")}
    rounds, kept, warmup = 0, 1, 0
    answers: set[bytes] = set()
    objective = floor_objective = None
    while rounds < kept + warmup:
        # one round = each measurement once, back to back on the same bytes
        e2e, http_answer = http_once(url, body)
        phases, local_answer = inprocess_once(body, settings)
        floor = floor_once(body, inst.kind)
        if rounds == 0:
            kept, warmup = _repeats(e2e, override)
            objective = orjson.loads(http_answer)["objective"]
            floor_objective = floor["objective"]
        answers.update((http_answer, local_answer))
        rounds += 1
        if rounds <= warmup:
            continue
        samples["e2e"].append(e2e)
        for k in ALL_PHASES:
            samples[k].append(phases[k])
        for k in ("parse", "arrays", "call"):
            samples["floor_" + k].append(floor[k])
        samples["floor"].append(floor["total"])
    res["samples"] = samples
    res["median"] = {k: statistics.median(v) for k, v in samples.items()}
    # ratios are taken within each round and then the median over rounds: on a shared
    # machine the load drifts between rounds far more than within one
    res["paired"] = {
        "e2e_floor": _paired(samples, lambda i: samples["e2e"][i] / samples["floor"][i]),
        "check_solve": _paired(samples, lambda i: (samples["certify"][i]
                                                   + samples["self_verify"][i])
                               / samples["solve"][i]),
        "rest": _paired(samples, lambda i: samples["e2e"][i]
                        - sum(samples[k][i] for k in ALL_PHASES)),
    }
    res["repeats"] = kept
    res["objective"] = objective
    res["floor_objective"] = floor_objective
    res["objective_match"] = objective == floor_objective
    res["deterministic"] = len(answers) == 1
    if not res["objective_match"]:
        res["errors"].append(f"objective {objective} != floor {floor_objective}")
    if not res["deterministic"]:
        res["errors"].append("HTTP and in-process answers differ byte for byte")
    med = res["median"]
    log(f"  e2e {med['e2e']:.3f} s, floor {med['floor']:.3f} s, "
        f"ratio {res['paired']['e2e_floor']:.2f} ({kept} rounds)")

    # peak memory: fresh interpreters, so one request's heap does not hide another's
    try:
        base = run_probe("baseline", path, inst.kind, PROBE_TIMEOUT)
        svc = run_probe("service", path, inst.kind, PROBE_TIMEOUT)
        flo = run_probe("floor", path, inst.kind, PROBE_TIMEOUT)
        res["memory"] = mem = {"baseline": base, "service": svc, "floor": flo}
        for name, got in (("service", svc), ("floor", flo)):
            # what the solve adds to the parsed body: its own peak over the RSS before it
            # (HWM reset after the parse), and, the other way, the whole process's peak
            # over the baseline process's (imports + parse, no solve)
            if got["hwm_reset"]:
                mem[name + "_peak"] = got["hwm"] - got["rss_parsed"]
            mem[name + "_over_baseline"] = max(got["hwm"], got["hwm_parse"]) - base["hwm"]
        peak = _peak(mem, "service")
        log(f"  peak {peak / 2**20:.0f} MiB = {peak / input_bytes:.1f}x input")
    except BenchError as e:
        res["errors"].append(str(e))

    if inst.kind == "flow":
        res["linprog"] = _alternative("linprog", path, inst, res, min(kept, 3))
        if size > NETWORKX_MAX_ARCS:
            res["networkx"] = {"skipped": f"over {NETWORKX_MAX_ARCS:,} arcs"}
        else:
            res["networkx"] = _alternative("networkx", path, inst, res, min(kept, 3))
    path.unlink()
    return res


def _paired(samples: dict[str, list[float]], of_round: Callable[[int], float]) -> float:
    return statistics.median(of_round(i) for i in range(len(samples["e2e"])))


def _alternative(mode: str, path: Path, inst: Instance, res: dict[str, Any],
                 runs: int) -> dict[str, Any]:
    times: list[float] = []
    out: dict[str, Any] = {}
    for _ in range(runs):
        try:
            got = run_probe(mode, path, inst.kind, ALT_TIMEOUT)
        except BenchError as e:
            out["error"] = str(e)
            break
        times.append(got["seconds"])
        out["objective"] = got["objective"]
        if got["seconds"] > 30:   # a slow alternative: one run says enough
            break
    if times:
        out["samples"] = times
        out["median"] = statistics.median(times)
        if out["objective"] != res["objective"]:
            res["errors"].append(f"{mode} objective {out['objective']} != {res['objective']}")
        log(f"  {mode} {out['median']:.2f} s")
    else:
        log(f"  {mode}: {out.get('error')}")
    return out


# --------------------------------------------------------------------------- throughput


def wrk(url: str, script: Path | None) -> dict[str, Any]:
    argv = ["wrk", *WRK_ARGS]
    if script:
        argv += ["-s", str(script)]
    try:
        done = subprocess.run([*argv, url], capture_output=True, text=True, timeout=60,
                              check=False)
    except subprocess.TimeoutExpired:
        raise BenchError("wrk did not finish within 60 s") from None
    text = done.stdout
    rate = re.search(r"Requests/sec:\s+([\d.]+)", text)
    if done.returncode != 0 or not rate:
        raise BenchError(f"wrk failed: {done.stderr.strip() or text.strip()}")
    bad = re.search(r"Non-2xx or 3xx responses:\s+(\d+)", text)
    errors = re.search(r"Socket errors:(.*)", text)
    return {"rps": float(rate.group(1)), "non_2xx": int(bad.group(1)) if bad else 0,
            "socket_errors": errors.group(1).strip() if errors else ""}


def _start_cost(code: str) -> float:
    """Median seconds for a fresh interpreter to run ``code`` (a worker's imports)."""
    times = []
    for _ in range(3):
        start = time.perf_counter()
        subprocess.run([sys.executable, "-c", code], cwd=ROOT, check=True, timeout=120)
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def throughput(srv: Gunicorn, folder: Path, env: dict[str, str]) -> dict[str, Any]:
    """A 10 x 10 solve against a hello-world route, alternating, WRK_ROUNDS each."""
    if not shutil.which("wrk"):
        return {"error": "wrk not installed (apt-get install -y wrk)"}
    body = orjson.dumps(gen.dense_assignment(10, seed=10))
    http_once(srv.base + "/v1/solve", body)
    body_path = folder / "small.json"
    body_path.write_bytes(body)
    script = folder / "post.lua"
    script.write_text('wrk.method = "POST"\n'
                      'wrk.headers["Content-Type"] = "application/json"\n'
                      f'local f = assert(io.open("{body_path}", "rb"))\n'
                      'wrk.body = f:read("*a")\nf:close()\n')
    out: dict[str, Any] = {"solve": [], "hello": [], "wrk": " ".join(WRK_ARGS)}
    # where a small request's time goes, for whoever chases the ratio
    from service.settings import load_settings

    settings = load_settings()
    runs = [inprocess_once(body, settings)[0] for _ in range(SMALL_PHASE_RUNS)]
    out["phases"] = {k: statistics.median(t[k] for t in runs) for k in ALL_PHASES}
    with serving("run:hello_app()", "/", folder, env, pythonpath=str(HERE)) as hello:
        booted = srv.restarts(), hello.restarts()
        targets = (("solve", srv, "/v1/solve", script), ("hello", hello, "/", None))
        out["errors"] = []
        for _ in range(WRK_ROUNDS):
            for name, server, route, lua in targets:
                try:
                    out[name].append(wrk(server.base + route, lua))
                except BenchError as e:
                    # one failed run should not cost the others; say whether the
                    # server is still there, which is the first thing to ask
                    state = ("running" if server.proc.poll() is None
                             else f"exited with {server.proc.returncode}")
                    out["errors"].append(f"{name}: {e} (gunicorn {state}; log tail: "
                                         f"{_tail(server.output(), 3)!r})")
                    log(out["errors"][-1])
            if srv.proc.poll() is not None or hello.proc.poll() is not None:
                break
        # max_requests recycles workers every ~1000 requests; a new worker pays its
        # imports again, which is cheap for hello world and not for the service
        out["workers_booted"] = {"solve": srv.restarts() - booted[0],
                                 "hello": hello.restarts() - booted[1]}
    out["worker_start_s"] = {"solve": _start_cost("import service.app; "
                                                  "service.app.create_app()"),
                             "hello": _start_cost("import flask; flask.Flask('hello')")}
    if not (out["solve"] and out["hello"]):
        raise BenchError("; ".join(out["errors"]))
    for k in ("solve", "hello"):
        out[k + "_rps"] = statistics.median(r["rps"] for r in out[k])
    out["ratio"] = out["solve_rps"] / out["hello_rps"]
    log(f"throughput: solve {out['solve_rps']:.0f}/s, hello {out['hello_rps']:.0f}/s, "
        f"ratio {out['ratio']:.2f}")
    return out


# --------------------------------------------------------------------------- report


def machine() -> dict[str, Any]:
    from importlib.metadata import version

    cpu = "unknown"
    with open("/proc/cpuinfo") as f:
        for line in f:
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    mem = 0
    with open("/proc/meminfo") as f:
        for line in f:
            if line.startswith("MemTotal:"):
                mem = int(line.split()[1]) * 1024
    wrk_version = ""
    if shutil.which("wrk"):
        done = subprocess.run(["wrk", "-v"], capture_output=True, text=True, timeout=10,
                              check=False)
        wrk_version = (done.stdout or done.stderr).split("[")[0].strip()
    return {"cpu": cpu, "cores": os.cpu_count(), "memory_gib": round(mem / 2**30, 1),
            "os": platform.platform(), "python": platform.python_version(),
            **{name: version(name) for name in
               ("numpy", "scipy", "ortools", "networkx", "orjson", "flask", "gunicorn")},
            "wrk": wrk_version}


def ms(seconds: float | None) -> str:
    """Milliseconds to three significant figures."""
    if seconds is None or not math.isfinite(seconds):
        return "–"
    v = seconds * 1000
    if abs(v) >= 100:
        return f"{v:,.0f}"
    if abs(v) >= 10:
        return f"{v:.1f}"
    return f"{v:.2f}"


def ratio(a: float | None, b: float | None, digits: int = 2) -> str:
    if a is None or b is None or b == 0:
        return "–"
    return f"{a / b:.{digits}f}"


def _alt_cells(r: dict[str, Any], mode: str) -> tuple[str, str]:
    alt = r.get(mode)
    if alt is None:
        return "–", "–"
    if "median" in alt:
        return ms(alt["median"]), ratio(alt["median"], r["median"]["e2e"], 1)
    return ("skipped" if "skipped" in alt else "failed"), "–"


def _peak(mem: dict[str, Any] | None, name: str) -> int | None:
    """The solve's own peak over the parsed body, or the two-process difference when the
    kernel would not reset the high-water mark; None when memory was not measured."""
    if not mem:
        return None
    value: int = mem.get(name + "_peak", mem[name + "_over_baseline"])
    return value


def main_table(results: list[dict[str, Any]]) -> str:
    head = ["instance", "size", "e2e HTTP", *ALL_PHASES, "HTTP & rest", "floor",
            "e2e/floor", "(cert+sv)/solve", "peak MiB", "peak/input",
            "linprog", "linprog/e2e", "networkx", "networkx/e2e"]
    lines = ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
    for r in results:
        if "median" not in r:
            lines.append(f"| {r['key']} | " + " | ".join(
                ["error: " + "; ".join(r["errors"])] + [""] * (len(head) - 2)) + " |")
            continue
        med, paired = r["median"], r["paired"]
        peak = _peak(r.get("memory"), "service")
        lp, lp_r = _alt_cells(r, "linprog")
        nx_, nx_r = _alt_cells(r, "networkx")
        cells = [r["key"], f"{r['size']:,} {r['unit']}", ms(med["e2e"]),
                 *(ms(med[k]) for k in ALL_PHASES), ms(paired["rest"]), ms(med["floor"]),
                 f"{paired['e2e_floor']:.2f}", f"{paired['check_solve']:.2f}",
                 f"{max(peak, 0) / 2**20:,.0f}" if peak is not None else "–",
                 ratio(peak, r["input_bytes"], 1) if peak is not None else "–",
                 lp, lp_r, nx_, nx_r]
        lines.append("| " + " | ".join(cells) + " |")
    return "\n".join(lines)


def detail_table(results: list[dict[str, Any]]) -> str:
    head = ["instance", "body MB", "floor parse", "floor arrays", "floor call",
            "service solve / floor call", "input arrays MiB", "peak over baseline MiB",
            "floor peak MiB",
            "rounds", "objective", "checks"]
    lines = ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
    for r in results:
        if "median" not in r:
            continue
        med, mem = r["median"], r.get("memory", {})
        fp = _peak(mem, "floor")
        over = mem.get("service_over_baseline")
        checks = "; ".join(r["errors"]) or "objective = floor's, answers identical"
        lines.append("| " + " | ".join([
            r["key"], f"{r['body_bytes'] / 1e6:.1f}", ms(med["floor_parse"]),
            ms(med["floor_arrays"]), ms(med["floor_call"]),
            ratio(med["solve"], med["floor_call"]), f"{r['input_bytes'] / 2**20:,.1f}",
            f"{max(over, 0) / 2**20:,.0f}" if over is not None else "–",
            f"{max(fp, 0) / 2**20:,.0f}" if fp is not None else "–", str(r["repeats"]),
            str(r["objective"]), checks]) + " |")
    return "\n".join(lines)


GROWTH_COLUMNS = ("e2e", *ALL_PHASES, "floor", "floor_call")


def growth(results: list[dict[str, Any]]) -> dict[str, dict[str, float]]:
    """Slope of log(time) against log(size) per phase, over the A and D series."""
    out: dict[str, dict[str, float]] = {}
    for fam in ("A", "D"):
        pts = [r for r in results if r["family"] == fam and r["series"] and "median" in r]
        if len(pts) < 2:
            continue
        x = np.log([r["size"] for r in pts])
        out[fam] = {}
        for k in GROWTH_COLUMNS:
            y = np.log([max(r["median"][k], 1e-6) for r in pts])
            out[fam][k] = float(np.polyfit(x, y, 1)[0])
    return out


def growth_table(g: dict[str, dict[str, float]], results: list[dict[str, Any]]) -> str:
    fams = [f for f in ("A", "D") if f in g]
    if not fams:
        return "(growth needs at least two sizes of A or D)"
    def span(f: str) -> str:
        sizes = [r["size"] for r in results if r["family"] == f and r["series"]
                 and "median" in r]
        unit = "cells" if f == "A" else "arcs"
        return f"{f}: time ∝ {unit}^k ({min(sizes):,}–{max(sizes):,})"
    lines = ["| phase | " + " | ".join(span(f) for f in fams) + " |",
             "|---|" + "---|" * len(fams)]
    for k in GROWTH_COLUMNS:
        lines.append(f"| {k} | " + " | ".join(f"{g[f][k]:.2f}" for f in fams) + " |")
    return "\n".join(lines)


def bars(results: list[dict[str, Any]], tput: dict[str, Any] | None) -> str:
    """Issue 3's bars, instance by instance: PASS or FAIL with the measured value."""
    rows: list[tuple[str, str, str, bool]] = []
    for r in results:
        if "median" not in r:
            continue
        med, paired = r["median"], r["paired"]
        e2e_floor = paired["e2e_floor"]
        limit = 1.5 if r["family"] in "ABC" else 2.0
        rows.append((r["key"], f"e2e/floor ≤ {limit}", f"{e2e_floor:.2f}",
                     e2e_floor <= limit))
        share = paired["check_solve"]
        rows.append((r["key"], "(certify+self_verify)/solve ≤ 0.30", f"{share:.2f}",
                     share <= 0.30))
        lp = r.get("linprog", {})
        if "median" in lp:
            speedup = lp["median"] / med["e2e"]
            rows.append((r["key"], "linprog/e2e ≥ 10", f"{speedup:.1f}", speedup >= 10))
        peak = _peak(r.get("memory"), "service")
        if r["family"] in "AD" and peak is not None:
            m = peak / r["input_bytes"]
            rows.append((r["key"], "peak/input arrays ≤ 3", f"{m:.1f}", m <= 3))
    if tput and "ratio" in tput:
        rows.append(("10x10", "solve/hello throughput ≥ 0.50", f"{tput['ratio']:.2f}",
                     tput["ratio"] >= 0.5))
    lines = ["| instance | bar | measured | |", "|---|---|---|---|"]
    lines += [f"| {k} | {b} | {v} | {'PASS' if ok else '**FAIL**'} |" for k, b, v, ok in rows]
    return "\n".join(lines)


def _time_tick(seconds: float, _pos: int) -> str:
    """Log-axis ticks in plain units (10 ms, 1 s) instead of powers of ten."""
    if seconds >= 1:
        return f"{seconds:g} s"
    return f"{seconds * 1000:g} ms"


def plot(results: list[dict[str, Any]], path: Path) -> bool:
    try:
        import matplotlib
    except ImportError:
        log("matplotlib missing (pip install -e '.[bench]'): no plot")
        return False
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.ticker import FuncFormatter, NullFormatter

    fams = [(f, t, lim) for f, t, lim in
            (("A", "A: dense n×n assignment", 1.5), ("D", "D: ticket routing", 2.0))
            if any(r["family"] == f and r["series"] and "median" in r for r in results)]
    if not fams:
        return False
    fig, axes = plt.subplots(1, len(fams), figsize=(6.2 * len(fams), 4.6), squeeze=False)
    for ax, (fam, title, limit) in zip(axes[0], fams, strict=True):
        pts = sorted((r for r in results if r["family"] == fam and r["series"]
                      and "median" in r), key=lambda r: r["size"])
        x = np.array([r["size"] for r in pts], float)
        e2e = np.array([r["median"]["e2e"] for r in pts])
        floor = np.array([r["median"]["floor"] for r in pts])
        ax.loglog(x, e2e, "o-", color="tab:blue", label="service, end to end over HTTP")
        ax.loglog(x, floor, "s-", color="tab:green", label="bare floor (parse+arrays+call)")
        ax.loglog(x, limit * floor, ":", color="tab:green", alpha=0.7,
                  label=f"{limit}× floor (the bar)")
        ax.loglog(x, [r["median"]["solve"] for r in pts], "^--", color="tab:orange",
                  alpha=0.8, label="service: solve phase")
        if fam == "D":
            extra = [r for r in results if r["family"] == "D" and not r["series"]
                     and "median" in r]
            for r in extra:
                ax.loglog([r["size"]], [r["median"]["e2e"]], "D", color="tab:purple",
                          label=f"{r['key']}, end to end")
        if fam == "A":
            labels = [f"n={round(math.sqrt(v)):,}" for v in x]
            for xi, yi, lab in zip(x, floor, labels, strict=True):
                ax.annotate(lab, (xi, yi), textcoords="offset points", xytext=(4, -12),
                            fontsize=8)
        ax.set_title(title)
        ax.set_xlabel("cells (n²)" if fam == "A" else "arcs")
        ax.set_ylabel("time (median)")
        ax.yaxis.set_major_formatter(FuncFormatter(_time_tick))
        ax.yaxis.set_minor_formatter(NullFormatter())
        ax.grid(True, which="both", alpha=0.3)
        ax.legend(fontsize=8, loc="upper left")
    fig.suptitle("certimatch: time against size (log-log)", fontsize=11)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return True


def write_report(out: Path, doc: dict[str, Any]) -> str:
    m = doc["machine"]
    results = doc["instances"]
    tput = doc.get("throughput")
    parts = [
        "# certimatch benchmark results",
        "",
        f"Run {doc['date']} with `{doc['command']}` ({doc['wall_s'] / 60:.1f} min).",
        "",
        f"Machine: {m['cpu']}, {m['cores']} cores, {m['memory_gib']} GiB; {m['os']}; "
        f"Python {m['python']}, numpy {m['numpy']}, scipy {m['scipy']}, "
        f"OR-Tools {m['ortools']}, networkx {m['networkx']}, orjson {m['orjson']}, "
        f"Flask {m['flask']}, gunicorn {m['gunicorn']}, {m['wrk'] or 'no wrk'}. "
        "Load average (1, 5, 15 min) at the start "
        + ", ".join(f"{v:.1f}" for v in doc["load_start"]) + ", at the end "
        + ", ".join(f"{v:.1f}" for v in doc["load_end"])
        + f": the machine is shared, so {m['cores']} cores may not all be ours.",
        "",
        "Times in milliseconds, medians of the rounds given below; tests/perf/README.md "
        "explains every column.",
        "",
        main_table(results),
        "",
        "## Floor, memory and checks",
        "",
        detail_table(results),
        "",
        "## Throughput, 10×10 solve against hello world",
        "",
    ]
    if tput and "ratio" in tput:
        parts += [f"wrk {tput['wrk']} on loopback, {WRK_ROUNDS} alternating runs each "
                  f"({len(tput['solve'])} and {len(tput['hello'])} succeeded), "
                  f"median: solve **{tput['solve_rps']:,.0f} req/s**, hello world "
                  f"**{tput['hello_rps']:,.0f} req/s**, ratio **{tput['ratio']:.2f}**."]
        phases = tput["phases"]
        parts += ["", f"The 10×10 solve in-process (median of {SMALL_PHASE_RUNS} runs, "
                  "ms): " + ", ".join(f"{k} {phases[k] * 1000:.3f}" for k in ALL_PHASES)
                  + f"; total {sum(phases.values()) * 1000:.2f} ms. At the measured rates "
                  f"one request costs the 2 workers about {2000 / tput['solve_rps']:.2f} ms "
                  f"(solve) and {2000 / tput['hello_rps']:.2f} ms (hello world) of a core "
                  "each, wrk sharing the cores."]
        booted, start = tput["workers_booted"], tput["worker_start_s"]
        parts += ["", f"Workers booted during the wrk runs (max_requests recycling): solve "
                  f"{booted['solve']}, hello world {booted['hello']}. A fresh interpreter "
                  f"takes {start['solve']:.2f} s to import the service and create its app, "
                  f"{start['hello']:.2f} s for the hello-world app."]
        bad = [r for k in ("solve", "hello") for r in tput[k]
               if r["non_2xx"] or r["socket_errors"]]
        if bad:
            parts.append(f"wrk reported errors: {bad}")
        if tput["errors"]:
            parts.append("Failed wrk runs (left out of the medians): "
                         + "; ".join(tput["errors"]))
    else:
        parts.append(f"not measured: {(tput or {}).get('error', 'skipped')}")
    parts += ["", "## Growth exponents", "",
              "Slope of log(median time) against log(size) over the A series (size = "
              "cells = n², so double it for n) and the scaled D series (size = arcs). 1 is "
              "linear; phases under a millisecond at the small sizes mostly fit noise.", "",
              growth_table(doc["growth"], results), "",
              "## Issue 3's bars", "", bars(results, tput), ""]
    if doc["notes"]:
        parts += ["## Notes", "", *(f"- {n}" for n in doc["notes"]), ""]
    if doc.get("plot"):
        parts += ["![time against size](scaling.png)", ""]
    text = "\n".join(parts)
    (out / "results.md").write_text(text)
    return text


# --------------------------------------------------------------------------- main


def parse_args(argv: list[str] | None) -> argparse.Namespace:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--families", default="A,B,C,D,E",
                   help="comma-separated subset of A,B,C,D,E (default all)")
    p.add_argument("--quick", action="store_true", help="small sizes only, for iterating")
    p.add_argument("--out", default=str(HERE / "results"), help="results folder")
    p.add_argument("--repeats", type=int, default=None,
                   help="rounds per instance (default: 5, fewer for slow instances)")
    p.add_argument("--no-throughput", action="store_true", help="skip the wrk comparison")
    p.add_argument("--warm-gib", type=float, default=16,
                   help="GiB of memory to touch once before measuring (0: none; default 16)")
    p.add_argument("--probe", help=argparse.SUPPRESS)
    p.add_argument("--body", help=argparse.SUPPRESS)
    p.add_argument("--kind", help=argparse.SUPPRESS)
    return p.parse_args(argv)


def main(argv: list[str] | None = None) -> int:
    args = parse_args(argv)
    if args.probe:
        probe_main(args.probe, args.body, args.kind)
        return 0
    families = {f.strip().upper() for f in args.families.split(",") if f.strip()}
    unknown = families - set("ABCDE")
    if unknown:
        raise SystemExit(f"unknown families: {', '.join(sorted(unknown))}")
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    started = time.monotonic()
    instances = plan(families, args.quick)
    notes: list[str] = []
    # the largest A body (~78 MB at n = 4000) is over the default 64 MiB limit: raise the
    # limit for this server only, and say so, instead of measuring a 413
    env: dict[str, str] = {}
    if "A" in families and not args.quick:
        limit = 256 * 1024 * 1024
        env["CERTIMATCH_MAX_BODY_BYTES"] = str(limit)
        notes.append(f"The benchmark's gunicorn runs with CERTIMATCH_MAX_BODY_BYTES={limit}: "
                     "the A 4000×4000 body is over the default limit of 64 MiB "
                     f"({DEFAULT_BODY_LIMIT} bytes) and would get 413.")
    for k, v in env.items():
        os.environ[k] = v       # the in-process runs use the same settings
    _libs()
    warmed = warm_memory(args.warm_gib)
    if warmed:
        log(f"touched {warmed['gib']:.0f} GiB of memory in {warmed['seconds']:.1f} s")
        notes.append(f"Before measuring, the run wrote {warmed['gib']:.0f} GiB of memory once "
                     f"({warmed['seconds']:.1f} s) and freed it: this machine's host backs "
                     "guest memory on first touch, which costs about 3 s per GiB on a "
                     "never-used page (0.1-0.3 s per GiB after), and would otherwise fall on "
                     "whichever measurement first allocates fresh memory.")
    doc: dict[str, Any] = {
        "date": datetime.datetime.now(datetime.UTC).strftime("%Y-%m-%d %H:%M UTC"),
        "command": "python tests/perf/run.py" + "".join(
            f" {a}" for a in (argv if argv is not None else sys.argv[1:])),
        "machine": machine(), "instances": [], "notes": notes, "throughput": None,
        "load_start": os.getloadavg()}
    results: list[dict[str, Any]] = doc["instances"]
    with tempfile.TemporaryDirectory(prefix="certimatch-bench-") as tmp:
        folder = Path(tmp)
        with serving("service.app:create_app()", "/healthz", folder, env) as srv:
            small = orjson.dumps(gen.dense_assignment(10, seed=10))
            for _ in range(4):   # both workers import lazily on their first solves
                http_once(srv.base + "/v1/solve", small)
            for inst in instances:
                try:
                    results.append(measure(inst, srv, folder, args.repeats))
                except (BenchError, requests.RequestException) as e:
                    log(f"{inst.key}: {e}")
                    results.append({"key": inst.key, "family": inst.family,
                                    "series": inst.series, "errors": [str(e)]})
                    if srv.proc.poll() is not None:
                        raise
            if not args.no_throughput:
                try:
                    doc["throughput"] = throughput(srv, folder, env)
                except BenchError as e:
                    doc["throughput"] = {"error": str(e)}
    if any(r.get("networkx", {}).get("skipped") for r in results):
        notes.append(f"networkx.network_simplex is skipped above {NETWORKX_MAX_ARCS:,} arcs "
                     "(minutes per run); networkx and slow linprog runs are single runs, "
                     f"each stopped after {ALT_TIMEOUT:.0f} s.")
    doc["growth"] = growth(results)
    doc["plot"] = plot(results, out / "scaling.png")
    doc["wall_s"] = time.monotonic() - started
    doc["load_end"] = os.getloadavg()
    (out / "results.json").write_bytes(orjson.dumps(doc, option=orjson.OPT_INDENT_2
                                                    | orjson.OPT_SERIALIZE_NUMPY))
    print(write_report(out, doc))
    return 0


if __name__ == "__main__":
    sys.exit(main())
