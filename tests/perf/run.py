"""certimatch benchmark: the service, the bare script and the best bare floor, side by side.

    .venv/bin/python tests/perf/run.py [--families A,B,C,D,E] [--quick] [--out DIR]

For every instance of the seeded families (generators.py) it measures, interleaving the
measurements round by round so that a noisy neighbour hits all of them alike:

1. the service end to end over HTTP through a real gunicorn (deploy/gunicorn.conf.py,
   2 workers), once per wire form (``FORMS``: records, columnar, columnar gzipped);
2. the service's phases in-process on the same bytes (parse, pipeline phases, serialise);
3. the bare script a user would write (floors.py): orjson parse + numpy arrays + the scipy
   or OR-Tools call, no certificate; and on the same arrays every candidate bare floor
   (lapjv, POT's network simplex), the fastest of which is *the* floor;
4. peak memory of an in-process solve in a fresh subprocess, minus a baseline subprocess
   that only imports and parses;
5. for min-cost-flow families, scipy linprog (HiGHS) and networkx network_simplex;
6. throughput of a 10 x 10 solve against a hello-world Flask route, with wrk.

Medians of repeated runs; ratios rather than absolute times; the bars of issue 15 with
met / not met (report.py). tests/perf/README.md says what each column means. Traffic goes
to 127.0.0.1 only, and every loop and wait is bounded.
"""

from __future__ import annotations

import argparse
import datetime
import json
import os
import re
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
import zlib
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
for _p in (str(ROOT), str(HERE.parent), str(HERE)):
    if _p not in sys.path:
        sys.path.insert(0, _p)

import floors  # noqa: E402
import generators as gen  # noqa: E402
import numpy as np  # noqa: E402
import orjson  # noqa: E402
import report  # noqa: E402
import requests  # noqa: E402
from floors import BenchError, timed  # noqa: E402
from report import ALL_PHASES, machine  # noqa: E402
from servers import Gunicorn, ServerFailed  # noqa: E402

from schemas.columns import as_columns  # noqa: E402
from schemas.problem import TABLES  # noqa: E402
from service.cli.transport import GZIP_LEVEL  # noqa: E402

__all__ = ["BenchError", "log", "machine", "serving"]   # what worst.py uses

JSON_HEADERS = {"Content-Type": "application/json"}
HTTP_TIMEOUT = 600.0      # bound on one request (the worker's own timeout is lower)
PROBE_TIMEOUT = 900.0     # bound on one memory/floor subprocess
ALT_TIMEOUT = 240.0       # bound on one linprog / networkx subprocess
NETWORKX_MAX_ARCS = 200_000   # beyond this network_simplex takes minutes: skipped
WRK_ARGS = ["-t2", "-c8", "-d5s", "--timeout", "10s"]
WRK_ROUNDS = 3
SMALL_PHASE_RUNS = 200    # in-process runs of the 10 x 10 problem, for its phase medians
DEFAULT_BODY_LIMIT = 64 * 1024 * 1024   # service.settings default MAX_BODY_BYTES


def log(msg: str) -> None:
    print(f"[{time.strftime('%H:%M:%S')}] {msg}", file=sys.stderr, flush=True)


# --------------------------------------------------------------------------- wire forms


@dataclass(frozen=True)
class Form:
    """One way of sending the same problem over HTTP: its body bytes and headers.

    ``encode`` turns the request dict (record form, as the generators make it) into the
    bytes sent; every form must get the same answer, byte for byte.
    """

    name: str
    encode: Callable[[dict[str, Any]], bytes]
    headers: dict[str, str]


def _columnar(req: dict[str, Any]) -> bytes:
    """The request with its tables as objects of arrays (README, "The columnar form")."""
    return orjson.dumps({k: as_columns(v) if k in TABLES else v for k, v in req.items()})


def _columnar_gzip(req: dict[str, Any]) -> bytes:
    """The columnar body gzip-compressed as the CLI sends it (service.cli.transport)."""
    packer = zlib.compressobj(GZIP_LEVEL, zlib.DEFLATED, 16 + zlib.MAX_WBITS)
    return packer.compress(_columnar(req)) + packer.flush()


#: Plain bytes both ways: requests would otherwise ask for a gzip answer.
PLAIN_HEADERS = {**JSON_HEADERS, "Accept-Encoding": "identity"}

#: The forms measured over HTTP, in table order; "record" is the one the in-process
#: phases, the script and the floors read. "columnar+gzip" sends the columnar body
#: gzip-compressed and takes a gzip answer (requests inflates it, inside the time).
FORMS: tuple[Form, ...] = (
    Form("record", orjson.dumps, PLAIN_HEADERS),
    Form("columnar", _columnar, PLAIN_HEADERS),
    Form("columnar+gzip", _columnar_gzip,
         {**JSON_HEADERS, "Content-Encoding": "gzip", "Accept-Encoding": "gzip"}),
)


# --------------------------------------------------------------------------- instances


@dataclass(frozen=True)
class Instance:
    """One benchmark problem; ``series`` instances form the A and D growth curves;
    ``bars``: issue 15's instance bars it belongs to ("big": D 150k, D 1M, E; "assign":
    A 2000, A 4000; "mid": A 500, D 10k-50k, C at 60k arcs). The "every family from
    1000 x 1000 or 30k arcs" bar is decided by size (report.large)."""

    key: str
    family: str
    kind: str                 # "dense" | "sparse" | "flow": which floors apply
    make: Callable[[], dict[str, Any]]
    series: bool = True
    bars: tuple[str, ...] = ()


def plan(families: set[str], quick: bool) -> list[Instance]:
    """The instances of issue 15, or the mid-size ones for ``--quick``, in run order."""
    out: list[Instance] = []
    a_sizes = (250, 500) if quick else (250, 500, 1000, 2000, 4000)
    for n in a_sizes:
        groups = ("mid",) if n == 500 else ("assign",) if n >= 2000 else ()
        out.append(Instance(f"A {n}x{n}", "A", "dense",
                            lambda n=n: gen.dense_assignment(n, seed=1), bars=groups))
    b_shape = (200, 1000) if quick else (1000, 5000)
    out.append(Instance(f"B {b_shape[0]}x{b_shape[1]}", "B", "dense",
                        lambda: gen.dense_assignment(*b_shape, seed=2)))
    for c_n in (2000,) if quick else (2000, 20_000):
        # 2000 x 2000 with 30 pairs a row: the "C at 60k arcs"
        out.append(Instance(f"C {c_n}x{c_n}", "C", "sparse",
                            lambda c_n=c_n: gen.sparse_assignment(c_n, seed=3),
                            bars=("mid",) if c_n == 2000 else ()))
    d_arcs = (10_000, 50_000) if quick else (10_000, 30_000, 50_000, 100_000, 300_000,
                                             1_000_000)
    for arcs in d_arcs:
        groups = ("mid",) if arcs <= 50_000 else ("big",) if arcs == 1_000_000 else ()
        out.append(Instance(f"D {_short(arcs)} arcs", "D", "flow",
                            lambda a=arcs: gen.ticket_routing_scaled(a, seed=5), bars=groups))
    if not quick:
        # the headline instance: 300 agents, 5,000 tickets; not on the scaled
        # curve (its supply covers 1.8x the demand, the series' 1.2x)
        out.append(Instance("D 150k (300 agents)", "D", "flow",
                            lambda: gen.ticket_routing(5000, 300, seed=4), series=False,
                            bars=("big",)))
    e_args = (dict(stores=450, warehouses=8, depots=40, wh_per_depot=4, depots_per_store=10)
              if quick else {})
    out.append(Instance("E transshipment", "E", "flow",
                        lambda: gen.transshipment(seed=6, **e_args),
                        bars=() if quick else ("big",)))
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


# --------------------------------------------------------------------------- in-process


def inprocess_once(body: bytes, settings: Any) -> tuple[dict[str, float], bytes]:
    """The service's phases on the same bytes, as a worker would run them."""
    from service.solve.pipeline import solve_body

    t: dict[str, float] = {}
    data, t["parse"] = timed(orjson.loads, body)
    answer = solve_body(data, settings, timings=t)
    out, t["serialise"] = timed(orjson.dumps, answer)
    return t, out


def probe_main(mode: str, path: str, kind: str) -> None:
    """Entry of the measuring subprocesses: one JSON line on stdout."""
    if mode in ("linprog", "networkx"):
        body = Path(path).read_bytes()
        once = floors.linprog_once if mode == "linprog" else floors.networkx_once
        print(json.dumps(once(body)))
        return
    if mode not in ("baseline", "service", "script"):
        raise SystemExit(f"unknown probe {mode}")
    floors.libs()
    body = Path(path).read_bytes()
    # the same imports and parse in every mode; the parsed body stays alive throughout
    data = orjson.loads(body)
    out: dict[str, Any] = {"hwm_parse": vm_status("VmHWM"), "rss_parsed": vm_status("VmRSS")}
    reset = mode != "baseline" and reset_hwm()
    if mode == "service":
        from service.settings import load_settings
        from service.solve import isolation
        from service.solve.pipeline import solve_body

        # every engine call in this process, so that its memory is in this peak (a worker
        # makes them in its engine host, another process, which VmHWM would not see)
        isolation.IN_PROCESS_WORK = 2**62

        out["answer_bytes"] = len(orjson.dumps(solve_body(data, load_settings())))
    elif mode == "script":
        out["objective"] = floors.script_parsed(data, kind)
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


def http_once(url: str, body: bytes, headers: dict[str, str] | None = None
              ) -> tuple[float, bytes]:
    start = time.perf_counter()
    r = requests.post(url, data=body, headers=headers or JSON_HEADERS, timeout=HTTP_TIMEOUT)
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



def measure(inst: Instance, srv: Gunicorn, folder: Path, override: int | None,
            alternatives: bool = True) -> dict[str, Any]:
    from service.settings import load_settings

    settings = load_settings()
    req, t_gen = timed(inst.make)
    size, unit, input_bytes = size_of(req)
    bodies = {form.name: form.encode(req) for form in FORMS}
    del req
    body = bodies["record"]
    path = folder / (re.sub(r"\W+", "_", inst.key) + ".json")
    path.write_bytes(body)
    res: dict[str, Any] = {"key": inst.key, "family": inst.family, "kind": inst.kind,
                           "series": inst.series, "bars": inst.bars, "size": size,
                           "unit": unit, "input_bytes": input_bytes, "body_bytes": len(body),
                           "form_bytes": {k: len(v) for k, v in bodies.items()},
                           "forms": [f.name for f in FORMS], "generate_s": t_gen,
                           "script": floors.SCRIPT[inst.kind][0], "errors": []}
    log(f"{inst.key}: {size:,} {unit}, body {len(body) / 1e6:.1f} MB")
    url = srv.base + "/v1/solve"
    samples: dict[str, list[float]] = {}
    rounds, kept, warmup = 0, 1, 0
    answers: set[bytes] = set()
    objectives: dict[str, set[int]] = {}
    while rounds < kept + warmup:
        # one round = each measurement once, back to back on the same problem
        e2e: dict[str, float] = {}
        for form in FORMS:
            e2e[form.name], http_answer = http_once(url, bodies[form.name], form.headers)
            answers.add(http_answer)
            objectives.setdefault(f"service ({form.name})", set()).add(
                orjson.loads(http_answer)["objective"])
        phases, local_answer = inprocess_once(body, settings)
        answers.add(local_answer)
        bare = floors.bare_once(body, inst.kind)
        for name, value in bare["objectives"].items():
            objectives.setdefault(name, set()).add(value)
        if rounds == 0:
            kept, warmup = _repeats(e2e["record"], override)
        rounds += 1
        if rounds <= warmup:
            continue
        got = {**{f"e2e:{k}": v for k, v in e2e.items()}, **phases,
               "bare_parse": bare["parse"], "bare_arrays": bare["arrays"],
               "script": bare["script"],
               **{f"call:{k}": v for k, v in bare["calls"].items()},
               **{f"floor:{k}": v for k, v in bare["floors"].items()}}
        for k, v in got.items():
            samples.setdefault(k, []).append(v)
    res["engines"] = list(bare["calls"])
    # the floor: the candidate engine with the least median, its samples round by round
    best = min(res["engines"], key=lambda k: statistics.median(samples[f"floor:{k}"]))
    res["floor_engine"] = best
    samples["floor"] = samples[f"floor:{best}"]
    res["samples"] = samples
    res["median"] = {k: statistics.median(v) for k, v in samples.items()}
    # ratios are taken within each round and then the median over rounds: on a shared
    # machine the load drifts between rounds far more than within one
    paired = res["paired"] = {
        "check_solve": _paired(samples, lambda i: (samples["certify"][i]
                                                   + samples["self_verify"][i])
                               / samples["solve"][i]),
        "rest": _paired(samples, lambda i: samples["e2e:record"][i]
                        - sum(samples[k][i] for k in ALL_PHASES)),
    }
    for form in FORMS:
        e = samples[f"e2e:{form.name}"]
        paired[f"script:{form.name}"] = _paired(samples, lambda i, e=e: e[i] / samples["script"][i])
        paired[f"floor:{form.name}"] = _paired(samples, lambda i, e=e: e[i] / samples["floor"][i])
    res["repeats"] = kept
    res["objectives"] = {k: sorted(v) for k, v in objectives.items()}
    values = set().union(*objectives.values())
    res["objective"] = min(values)
    if len(values) != 1:
        res["errors"].append(f"objectives differ: {res['objectives']}")
    res["deterministic"] = len(answers) == 1
    if not res["deterministic"]:
        res["errors"].append("the answers over HTTP and in-process differ byte for byte")
    med = res["median"]
    log(f"  e2e {med['e2e:record']:.3f} s, script {med['script']:.3f} s, floor "
        f"{med['floor']:.3f} s ({best}), e2e/script {paired['script:record']:.2f}, "
        f"e2e/floor {paired['floor:record']:.2f} ({kept} rounds)")

    # peak memory: fresh interpreters, so one request's heap does not hide another's
    try:
        base = run_probe("baseline", path, inst.kind, PROBE_TIMEOUT)
        svc = run_probe("service", path, inst.kind, PROBE_TIMEOUT)
        scr = run_probe("script", path, inst.kind, PROBE_TIMEOUT)
        res["memory"] = mem = {"baseline": base, "service": svc, "script": scr}
        for name, got_ in (("service", svc), ("script", scr)):
            # what the solve adds to the parsed body: its own peak over the RSS before it
            # (HWM reset after the parse), and, the other way, the whole process's peak
            # over the baseline process's (imports + parse, no solve)
            if got_["hwm_reset"]:
                mem[name + "_peak"] = got_["hwm"] - got_["rss_parsed"]
            mem[name + "_over_baseline"] = max(got_["hwm"], got_["hwm_parse"]) - base["hwm"]
        peak = report.peak(mem, "service")
        assert peak is not None
        log(f"  peak {peak / 2**20:.0f} MiB = {peak / input_bytes:.1f}x input")
    except BenchError as e:
        res["errors"].append(str(e))

    if inst.kind == "flow" and alternatives:
        res["linprog"] = _alternative("linprog", path, inst, res, min(kept, 3))
        if size > NETWORKX_MAX_ARCS:
            res["networkx"] = {"skipped": f"over {NETWORKX_MAX_ARCS:,} arcs"}
        else:
            res["networkx"] = _alternative("networkx", path, inst, res, min(kept, 3))
    path.unlink()
    return res


def _paired(samples: dict[str, list[float]], of_round: Callable[[int], float]) -> float:
    return statistics.median(of_round(i) for i in range(len(samples["e2e:record"])))


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


# --------------------------------------------------------------------------- main


def parse_args(argv: list[str] | None) -> argparse.Namespace:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--families", default="A,B,C,D,E",
                   help="comma-separated subset of A,B,C,D,E (default all)")
    p.add_argument("--quick", action="store_true", help="small sizes only, for iterating")
    p.add_argument("--instances", default="",
                   help="comma-separated instance names to keep, each the start of a name "
                   "(\"D 150k,D 1M,E\"; default all of the families)")
    p.add_argument("--out", default=str(HERE / "results"), help="results folder")
    p.add_argument("--repeats", type=int, default=None,
                   help="rounds per instance (default: 5, fewer for slow instances)")
    p.add_argument("--no-throughput", action="store_true", help="skip the wrk comparison")
    p.add_argument("--record", default="full", choices=("full", "digest", "off"),
                   help="the server's CERTIMATCH_RECORD (default full, as deployed)")
    p.add_argument("--no-alternatives", action="store_true",
                   help="skip scipy linprog and networkx (minutes on the large instances)")
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
    wanted = [w.strip() for w in args.instances.split(",") if w.strip()]
    if wanted:
        instances = [i for i in instances if any(i.key.startswith(w) for w in wanted)]
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
    floors.libs()
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
        # the decision store of the server (every 200 is recorded, as deployed) goes to
        # the run's temporary folder, never into ./certimatch-data of the repository
        env = {**env, "CERTIMATCH_DATA_DIR": str(folder / "data"),
               "CERTIMATCH_RECORD": args.record}
        with serving("service.app:create_app()", "/healthz", folder, env) as srv:
            small = orjson.dumps(gen.dense_assignment(10, seed=10))
            for _ in range(4):   # both workers import lazily on their first solves
                http_once(srv.base + "/v1/solve", small)
            for inst in instances:
                try:
                    results.append(measure(inst, srv, folder, args.repeats,
                                           not args.no_alternatives))
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
    doc["growth"] = report.growth(results)
    doc["plot"] = report.plot(results, out / "scaling.png")
    doc["wall_s"] = time.monotonic() - started
    doc["load_end"] = os.getloadavg()
    (out / "results.json").write_bytes(orjson.dumps(doc, option=orjson.OPT_INDENT_2
                                                    | orjson.OPT_SERIALIZE_NUMPY))
    print(report.write_report(out, doc, WRK_ROUNDS, SMALL_PHASE_RUNS))
    return 0


if __name__ == "__main__":
    sys.exit(main())
