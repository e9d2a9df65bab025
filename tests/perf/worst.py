"""certimatch worst-case benchmark: shapes that are hard for engines and for certificates.

    .venv/bin/python tests/perf/worst.py [--quick] [--only chain,grid] [--out DIR]

Family W (generators.py): long chains (forward, reversed, every arc at a bound), deep
layered networks, grids and many parallel arcs, up to the service's size limits. For each
instance, on the same request bytes:

1. the bare engine: OR-Tools' SimpleMinCostFlow on the same extended network the
   service's engine builds, the library call alone timed, in a subprocess stopped after
   ``--engine-cap`` seconds;
2. the service in-process, phase by phase, under the server's time limit (60 s, so the
   engine runs in its killable child as in a worker): validate + normalise, solve (the
   engine, and stage 1 when needed), certify (and how the potentials were found),
   answer + self-check;
3. over HTTP through gunicorn with ``time_limit_s`` = ``--limit`` (default 2): the time
   to the answer, and its status (a 503 when the engine needs longer).

Medians over ``--repeats`` rounds when a round is short, one round otherwise. Writes
``worst.md`` and ``worst.json`` to the output folder and prints the table.
"""

from __future__ import annotations

import argparse
import datetime
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
for _p in (str(ROOT), str(HERE.parent), str(HERE)):
    if _p not in sys.path:
        sys.path.insert(0, _p)

import generators as gen  # noqa: E402
import orjson  # noqa: E402
import requests  # noqa: E402
import run as bench  # noqa: E402

ENGINE_CAP_S = 120.0
SERVER_LIMIT_S = 60.0


def plan(quick: bool) -> list[tuple[str, Callable[[], dict[str, Any]]]]:
    """(name, request maker) of family W, small to large; the largest at the size limits.
    MAX_BODY_BYTES (64 MiB) binds before MAX_ARCS (2,000,000): an arc record takes about
    60 bytes, so the largest bodies here have about a million arcs."""
    if quick:
        return [("chain 1k", lambda: gen.chain(1000)),
                ("chain 1k saturated", lambda: gen.chain(1000, "saturated")),
                ("layered 10x100", lambda: gen.layered(10)),
                ("grid 30x30", lambda: gen.grid(30, 30)),
                ("parallel 10x10x20", lambda: gen.parallel(10, 10))]
    out: list[tuple[str, Callable[[], dict[str, Any]]]] = []
    for n in (1000, 3000, 12_000):
        for variant in ("forward", "reversed", "saturated"):
            label = "" if variant == "forward" else f" {variant}"
            out.append((f"chain {n // 1000}k{label}", lambda n=n, v=variant: gen.chain(n, v)))
    out += [("chain 100k", lambda: gen.chain(100_000)),
            ("chain 500k (body ~33 MB)", lambda: gen.chain(500_000)),
            ("layered 100x100", lambda: gen.layered(100)),
            ("layered 1000x100", lambda: gen.layered(1000)),
            ("layered 200x1000 (1M arcs)", lambda: gen.layered(200, 1000)),
            ("grid 100x100", lambda: gen.grid(100, 100)),
            ("grid 300x300", lambda: gen.grid(300, 300)),
            ("grid 500x500 (1M arcs)", lambda: gen.grid(500, 500)),
            ("parallel 50x50x20", lambda: gen.parallel(50, 50)),
            ("parallel 100x100x100 (1M arcs)", lambda: gen.parallel(100, 100, 100))]
    return out


def engine_probe(path: str) -> None:
    """Subprocess entry: the bare OR-Tools call on the service's own extended network of
    the body at ``path`` (the arrays its engine builds), timed alone; one JSON line."""
    import numpy as np
    from ortools.graph.python import min_cost_flow

    from schemas import ProblemSchema
    from service.network.build import build_network
    from service.settings import load_settings
    from service.solve.extended import extend

    net = build_network(ProblemSchema().load(orjson.loads(Path(path).read_bytes())),
                        load_settings())
    arcs, ext = net.arcs, extend(net, 0)
    tail = np.concatenate([arcs.tail, ext.tail]).astype(np.int32)
    head = np.concatenate([arcs.head, ext.head]).astype(np.int32)
    capacity = np.concatenate([np.where(arcs.bounded, arcs.capacity,
                                        net.unbounded_capacity()), ext.capacity])
    cost = np.concatenate([arcs.cost, ext.cost])
    supplies = np.zeros(ext.n_nodes, np.int64)
    supplies[ext.S], supplies[ext.T] = net.total_demand, -net.total_demand
    start = time.perf_counter()
    solver = min_cost_flow.SimpleMinCostFlow()
    solver.add_arcs_with_capacity_and_unit_cost(tail, head, capacity, cost)
    solver.set_nodes_supplies(np.arange(ext.n_nodes, dtype=np.int32), supplies)
    status = solver.solve()
    seconds = time.perf_counter() - start
    print(json.dumps({"seconds": seconds, "status": status.name,
                      "objective": int(solver.optimal_cost()) * net.sign}))


def bare_engine(path: Path, cap: float) -> dict[str, Any]:
    argv = [sys.executable, str(Path(__file__).resolve()), "--engine-probe", str(path)]
    try:
        done = subprocess.run(argv, capture_output=True, text=True, timeout=cap, cwd=ROOT,
                              check=False)
    except subprocess.TimeoutExpired:
        return {"stopped_after": cap}
    if done.returncode != 0:
        return {"error": (done.stderr.strip().splitlines() or ["no output"])[-1]}
    result: dict[str, Any] = json.loads(done.stdout.strip().splitlines()[-1])
    return result


def service_phases(body: bytes) -> dict[str, Any]:
    """The pipeline's steps in-process under the server's limit, each timed."""
    from schemas import ProblemSchema
    from service.errors import ServiceError
    from service.network.build import build_network
    from service.settings import load_settings
    from service.solve import dispatch
    from service.solve.answer import build_answer
    from service.solve.certificate import certify
    from service.solve.deadline import deadline
    from service.solve.pipeline import request_scope, self_check

    t: dict[str, Any] = {}
    clock = time.perf_counter
    data = orjson.loads(body)
    try:
        with request_scope(), deadline(SERVER_LIMIT_S, "benchmark"):
            start = clock()
            net = build_network(ProblemSchema().load(data), load_settings())
            t["validate"] = clock() - start
            start = clock()
            solution = dispatch.solve(net)
            t["solve"] = clock() - start
            start = clock()
            cert = certify(net, solution)
            t["certify"] = clock() - start
            start = clock()
            answer = build_answer(net, solution, cert)
            self_check(net, answer)
            t["check"] = clock() - start
    except ServiceError as e:
        t["error"] = f"{e.status} {e.slug}"
        return t
    t["solver"], t["method"] = solution.solver, cert.method
    t["objective"] = answer["objective"]
    return t


def over_http(url: str, body: bytes, limit: float) -> dict[str, Any]:
    start = time.perf_counter()
    r = requests.post(url, data=body[:-1] + f',"time_limit_s":{limit:g}}}'.encode(),
                      headers={"Content-Type": "application/json"}, timeout=600)
    return {"seconds": time.perf_counter() - start, "status": r.status_code}


def measure(name: str, make: Callable[[], dict[str, Any]], url: str, folder: Path,
            args: argparse.Namespace) -> dict[str, Any]:
    body = orjson.dumps(make())
    path = folder / "body.json"
    path.write_bytes(body)
    res: dict[str, Any] = {"instance": name, "body_mb": len(body) / 1e6}
    bench.log(f"{name}: body {len(body) / 1e6:.1f} MB")
    res["engine"] = bare_engine(path, args.engine_cap)
    rounds: list[dict[str, Any]] = []
    while True:
        rounds.append(service_phases(body))
        slow = sum(v for v in rounds[-1].values() if isinstance(v, float)) > 5
        if slow or "error" in rounds[-1] or len(rounds) >= args.repeats:
            break
    res["service"] = {k: (statistics.median(r[k] for r in rounds)
                          if isinstance(rounds[0][k], float) else rounds[0][k])
                      for k in rounds[0]}
    res["rounds"] = len(rounds)
    res["http"] = over_http(url, body, args.limit)
    objective = res["engine"].get("objective")
    if objective is not None and "objective" in res["service"]:
        res["objective_match"] = objective == res["service"]["objective"]
    bench.log(f"  {json.dumps(res, default=str)}")
    return res


def _s(x: float | None) -> str:
    return "–" if x is None else (f"{x:.2f}" if x < 10 else f"{x:.1f}")


def table(results: list[dict[str, Any]], limit: float) -> str:
    head = ["instance", "body MB", "bare engine s", "service: validate s", "solve s",
            "certify s", "answer + self-check s", "potentials from", "(certify + check) / "
            "bare engine", f"HTTP with time_limit_s {limit:g}: status, s"]
    lines = ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
    for r in results:
        e, s, h = r["engine"], r["service"], r["http"]
        eng = (_s(e["seconds"]) if "seconds" in e
               else f"> {e['stopped_after']:.0f}" if "stopped_after" in e else "error")
        ratio = (f"{(s['certify'] + s['check']) / e['seconds']:.2f}"
                 if "seconds" in e and "certify" in s else "–")
        if "error" in s:
            cells = [_s(s.get("validate")), f"{s['error']} (server limit {SERVER_LIMIT_S:g} s)",
                     "–", "–", "–"]
        else:
            cells = [_s(s["validate"]), _s(s["solve"]), _s(s["certify"]), _s(s["check"]),
                     f"{s['method']} ({s['solver']})"]
        lines.append("| " + " | ".join([r["instance"], f"{r['body_mb']:.1f}", eng, *cells,
                                        ratio, f"{h['status']}, {_s(h['seconds'])}"]) + " |")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--quick", action="store_true")
    p.add_argument("--only", default="", help="comma-separated name prefixes to run")
    p.add_argument("--out", default=str(HERE / "results"))
    p.add_argument("--repeats", type=int, default=3)
    p.add_argument("--limit", type=float, default=2.0, help="time_limit_s over HTTP")
    p.add_argument("--engine-cap", type=float, default=ENGINE_CAP_S)
    p.add_argument("--engine-probe", help=argparse.SUPPRESS)
    args = p.parse_args(argv)
    if args.engine_probe:
        engine_probe(args.engine_probe)
        return 0
    prefixes = [x.strip() for x in args.only.split(",") if x.strip()]
    instances = [(n, m) for n, m in plan(args.quick)
                 if not prefixes or any(n.startswith(x) for x in prefixes)]
    doc: dict[str, Any] = {
        "date": datetime.datetime.now(datetime.UTC).strftime("%Y-%m-%d %H:%M UTC"),
        "command": "python tests/perf/worst.py" + "".join(
            f" {a}" for a in (argv if argv is not None else sys.argv[1:])),
        "machine": bench.machine(), "load_start": os.getloadavg(), "results": []}
    with tempfile.TemporaryDirectory(prefix="certimatch-worst-") as tmp, \
            bench.serving("service.app:create_app()", "/healthz", Path(tmp),
                          {"CERTIMATCH_DATA_DIR": str(Path(tmp) / "data")}) as srv:
        for name, make in instances:
            doc["results"].append(measure(name, make, srv.base + "/v1/solve", Path(tmp), args))
    doc["load_end"] = os.getloadavg()
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    if prefixes and (out / "worst.json").exists():
        # a partial run replaces its own instances in the last full run's results
        old = orjson.loads((out / "worst.json").read_bytes())
        new = {r["instance"]: r for r in doc["results"]}
        doc["results"] = [new.pop(r["instance"], r) for r in old["results"]] + list(new.values())
        doc["partial_runs"] = [*old.get("partial_runs", []),
                               {"date": doc["date"], "command": doc["command"],
                                "load_start": doc["load_start"], "load_end": doc["load_end"]}]
        doc["date"], doc["command"] = old["date"], old["command"]
        doc["load_start"] = old["load_start"]
    (out / "worst.json").write_bytes(orjson.dumps(doc, option=orjson.OPT_INDENT_2))
    m = doc["machine"]
    text = "\n".join([
        "# certimatch worst-case family W", "",
        f"{doc['date']}, `{doc['command']}`; {m['cpu']}, {m['cores']} cores (shared), "
        f"Python {m['python']}, numpy {m['numpy']}, scipy {m['scipy']}, "
        f"OR-Tools {m['ortools']}; load average "
        f"{doc['load_start'][0]:.1f} at the start, {doc['load_end'][0]:.1f} at the end.", "",
        table(doc["results"], args.limit), "",
        *(f"Instances re-run by `{p['command']}` on {p['date']} (load average "
          f"{p['load_start'][0]:.1f}-{p['load_end'][0]:.1f})."
          for p in doc.get("partial_runs", [])),
        ""])
    (out / "worst.md").write_text(text)
    print(text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
