"""Load: several clients at once, for a bounded time, through a real gunicorn (2 workers).

The clients post a mix of problems -- the small seeded families of tests/reference.py,
medium transportation, assignment and transshipment problems, and a few larger ones --
and every answer is checked: status 200, the objective and least hard shortfall that
networkx found beforehand, a certificate that service.solve.pipeline.verify_body accepts
in-process, and the same bytes for the same problem whichever worker answered (README,
Determinism). p50 and p99 latencies are printed, never asserted.

CI: 4 clients for 10 s. ``CERTIMATCH_EXTENDED=1``: 8 clients for 120 s, with larger
problems in the mix; ``CERTIMATCH_LOAD_SECONDS`` sets the duration on its own.
"""

from __future__ import annotations

import json
import os
from collections import defaultdict
from typing import Any

import numpy as np
import pytest
import reference as ref
from servers import Gunicorn, Traffic, percentile

from service.settings import Settings
from service.solve.pipeline import verify_body

EXTENDED = os.environ.get("CERTIMATCH_EXTENDED") == "1"
SECONDS = float(os.environ.get("CERTIMATCH_LOAD_SECONDS", 120 if EXTENDED else 10))
CLIENTS = 8 if EXTENDED else 4


def transportation(rng: np.random.Generator, n: int, m: int) -> dict[str, Any]:
    """Depots with stock, stores with demand (a third soft), some pairs not allowed."""
    sinks = []
    for j in range(m):
        sink: dict[str, Any] = {"id": f"store-{j}", "demand": int(rng.integers(1, 30))}
        if rng.random() < 0.3:
            sink["penalty"] = int(rng.integers(50, 200))
        sinks.append(sink)
    return {
        "sources": [{"id": f"depot-{i}", "supply": int(rng.integers(1, 30))} for i in range(n)],
        "sinks": sinks,
        "costs": [[None if rng.random() < 0.1 else int(rng.integers(0, 100)) for _ in range(m)]
                  for _ in range(n)],
    }


def assignment(rng: np.random.Generator, n: int, *, score: bool = False) -> dict[str, Any]:
    """Technicians to tickets one to one, every pair allowed."""
    return {"sources": [{"id": f"tech-{i}"} for i in range(n)],
            "sinks": [{"id": f"ticket-{j}"} for j in range(n)],
            "costs": rng.integers(0, 1000, size=(n, n)).tolist(),
            **({"objective": "max"} if score else {})}


def transshipment(rng: np.random.Generator, n: int, k: int, m: int) -> dict[str, Any]:
    """Vans through hubs to sites: capacities, hub-to-hub links, fractional costs."""
    src = [f"van-{i}" for i in range(n)]
    hub = [f"hub-{h}" for h in range(k)]
    snk = [f"site-{j}" for j in range(m)]
    arcs = []
    for i in src:
        for h in rng.choice(hub, size=min(k, 3), replace=False):
            arcs.append({"from": i, "to": str(h), "cost": round(float(rng.uniform(0, 20)), 2),
                         "capacity": int(rng.integers(2, 15))})
    for h in hub:
        for j in rng.choice(snk, size=min(m, m // 2 + 1), replace=False):
            arcs.append({"from": h, "to": str(j), "cost": round(float(rng.uniform(0, 30)), 2)})
        for g in hub:
            if g != h and rng.random() < 0.3:
                arcs.append({"from": h, "to": g, "cost": round(float(rng.uniform(0, 5)), 2),
                             "capacity": int(rng.integers(1, 20))})
    return {"sources": [{"id": i, "supply": int(rng.integers(1, 20))} for i in src],
            "nodes": [{"id": h} for h in hub],
            "sinks": [{"id": j, "demand": int(rng.integers(1, 15)), "penalty": 100}
                      for j in snk],
            "arcs": arcs}


def mix() -> list[tuple[str, dict[str, Any], int]]:
    """(name, problem, weight): how often a client sends it per round of the schedule."""
    out: list[tuple[str, dict[str, Any], int]] = []
    for family in ref.FAMILIES:
        for seed in (11, 12, 13):
            out.append((f"small/{family}/{seed}", ref.instance(family, seed), 1))
    rng = np.random.default_rng(20240601)
    out += [
        ("medium/transportation-40x40", transportation(rng, 40, 40), 3),
        ("medium/transportation-60x50", transportation(rng, 60, 50), 3),
        ("medium/assignment-60", assignment(rng, 60), 3),
        ("medium/scores-50", assignment(rng, 50, score=True), 3),
        ("medium/transshipment-30-8-30", transshipment(rng, 30, 8, 30), 3),
        ("large/assignment-120", assignment(rng, 120), 2),
        ("large/transportation-150x150", transportation(rng, 150, 150), 2),
    ]
    if EXTENDED:
        out += [("large/transportation-300x250", transportation(rng, 300, 250), 1),
                ("large/transshipment-200-40-200", transshipment(rng, 200, 40, 200), 1)]
    return out


@pytest.fixture(scope="module")
def problems() -> list[tuple[str, dict[str, Any], int, ref.Reference]]:
    # References first, outside the timed run: networkx on each problem once.
    return [(name, p, w, ref.solve_networkx(p)) for name, p, w in mix()]


def _settings() -> Settings:
    # The dataclass' own defaults (not the environment's): the settings the servers here run.
    return Settings()


def test_concurrent_clients_get_only_correct_certified_answers(problems, tmp_path, capsys):
    bodies = [json.dumps(p).encode() for _, p, _, _ in problems]
    schedule = [i for i, (_, _, w, _) in enumerate(problems) for _ in range(w)]
    # Spread the heavy ones through the round instead of bunching them at its end.
    schedule = [schedule[k] for k in np.random.default_rng(5).permutation(len(schedule))]
    with Gunicorn(tmp_path, workers=2) as server:
        traffic = Traffic(server, bodies, clients=CLIENTS, seconds=SECONDS,
                          schedule=schedule).start()
        traffic.join()
        workers_after = server.worker_pids()
        log = server.output()
    outcomes = traffic.outcomes
    failures = traffic.failures()
    assert failures == [], [(problems[o.problem][0], o.status, o.error) for o in failures[:5]]
    assert len(outcomes) >= CLIENTS, "the clients hardly sent anything"
    assert len(workers_after) == 2, log

    # Every answer checked: the same problem gave the same bytes every time, and those
    # bytes are the optimum (networkx) with a certificate the verifier accepts.
    by_problem: dict[int, set[bytes]] = defaultdict(set)
    for o in outcomes:
        assert o.digest is not None
        by_problem[o.problem].add(o.digest)
    settings = _settings()
    for index, digests in sorted(by_problem.items()):
        name, problem, _, expected = problems[index]
        assert len(digests) == 1, f"{name}: {len(digests)} different answers to one request"
        answer = json.loads(traffic.answers[(index, next(iter(digests)))])
        integral = ref.read(problem).integral
        assert ref.same_objective(answer["objective"], expected.objective, integral), (
            name, answer["objective"], expected)
        assert answer["certificate"]["hard_shortfall"] == expected.hard_shortfall, name
        verdict = verify_body({**problem, "answer": answer}, settings)
        assert verdict["valid"] is True, (name, [c for c in verdict["checks"]
                                                 if not c["passed"]])

    seconds = traffic.ended - traffic.started
    lat = [o.seconds * 1000 for o in outcomes]
    lines = [f"\nload: {CLIENTS} clients x {seconds:.1f} s through gunicorn (2 workers): "
             f"{len(outcomes)} requests, {len(outcomes) / seconds:.1f}/s, 0 errors, "
             f"{len(by_problem)} distinct problems all checked; "
             f"p50 {percentile(lat, 0.5):.1f} ms, p99 {percentile(lat, 0.99):.1f} ms, "
             f"max {max(lat):.0f} ms"]
    for size in ("small", "medium", "large"):
        part = [o.seconds * 1000 for o in outcomes if problems[o.problem][0].startswith(size)]
        lines.append(f"  {size:6} {len(part):6} requests  p50 {percentile(part, 0.5):8.1f} ms"
                     f"  p99 {percentile(part, 0.99):8.1f} ms")
    with capsys.disabled():
        print("\n".join(lines))
    # Every size was sent, so the mix is what the figures claim.
    assert all(any(problems[o.problem][0].startswith(s) for o in outcomes)
               for s in ("small", "medium", "large"))
