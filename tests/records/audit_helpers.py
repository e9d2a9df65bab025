"""Real decisions for the audit tests: small assignment problems solved by the service's
pipeline, their optimum cross-checked with scipy.optimize.linear_sum_assignment, and
recorded as the service records them (RFC 8785 bodies and their SHA-256)."""

from __future__ import annotations

import hashlib
import random
from typing import Any

import numpy as np
from scipy.optimize import linear_sum_assignment

from service.records.canonical import canonical_json
from service.records.model import NewDecision
from service.records.store import DecisionStore
from service.settings import load_settings
from service.solve.pipeline import solve_body


def problem(seed: int, n: int = 3) -> dict[str, Any]:
    """A made-up dispatch: n technicians, n repair tickets, travel minutes as costs."""
    rng = random.Random(seed)
    costs = [[rng.randint(5, 60) for _ in range(n)] for _ in range(n)]
    return {"sources": [{"id": f"tech-{i}"} for i in range(n)],
            "sinks": [{"id": f"ticket-{j}"} for j in range(n)], "costs": costs}


def solved(body: dict[str, Any]) -> dict[str, Any]:
    answer = solve_body(body, load_settings({}, environ={}))
    rows, cols = linear_sum_assignment(np.array(body["costs"]))
    # scipy's Hungarian method gives the optimum the service must match
    assert answer["objective"] == int(np.array(body["costs"])[rows, cols].sum())
    return answer


def new_decision(body: dict[str, Any], answer: dict[str, Any],
                 caller: str | None = "dispatch-desk") -> NewDecision:
    p, a = canonical_json(body), canonical_json(answer)
    return NewDecision(caller, hashlib.sha256(p).hexdigest(), hashlib.sha256(a).hexdigest(),
                       "0.1.0", p, a)


def fill(store: DecisionStore, count: int) -> list[str]:
    """``count`` real decisions appended; their ids in log order."""
    ids = []
    for seed in range(count):
        body = problem(seed)
        done = store.append(new_decision(body, solved(body))).decision
        assert done.id is not None
        ids.append(done.id)
    return ids


def worse_answer(body: dict[str, Any], answer: dict[str, Any]) -> dict[str, Any]:
    """The answer with two tickets' technicians exchanged and the objective made to fit:
    a plan that is feasible but not least-cost (unless the exchange costs nothing)."""
    forged = {**answer, "allocation": [dict(a) for a in answer["allocation"]]}
    first, second = forged["allocation"][0], forged["allocation"][1]
    first["to"], second["to"] = second["to"], first["to"]
    index = {s["id"]: i for i, s in enumerate(body["sources"])}
    sinks = {s["id"]: j for j, s in enumerate(body["sinks"])}
    for a in (first, second):
        a["cost"] = body["costs"][index[a["from"]]][sinks[a["to"]]]
    forged["objective"] = sum(a["cost"] * a["flow"] for a in forged["allocation"])
    return forged
