"""Small hand-checked problems, and builders of small problems, shared by several test files."""

from __future__ import annotations

from typing import Any

from schemas import ProblemSchema
from service.network.build import build_network
from service.settings import Settings

#: Hard sinks X and Y need 6 + 4 = 10. Only A (supply 5, unbounded arcs to X and Y) and the
#: arc B -> X (capacity 2) reach them: 7 at most, so 3 short. Z is served by B alone.
#: Worked by hand (max-flow min-cut), common practice, no source.
SHORT = {
    "sources": [{"id": "A", "supply": 5}, {"id": "B", "supply": 10}],
    "sinks": [{"id": "X", "demand": 6}, {"id": "Y", "demand": 4}, {"id": "Z", "demand": 3}],
    "arcs": [{"from": "A", "to": "X", "cost": 1}, {"from": "A", "to": "Y", "cost": 2},
             {"from": "B", "to": "X", "cost": 3, "capacity": 2},
             {"from": "B", "to": "Z", "cost": 1}],
}


def net_of(problem: dict[str, Any], **limits: int):
    return build_network(ProblemSchema().load(problem), Settings(**limits))


def unit(prefix: str, k: int) -> list[dict[str, str]]:
    return [{"id": f"{prefix}{i}"} for i in range(k)]


def matrix(costs: list[list[Any]]) -> dict[str, Any]:
    return {"sources": unit("s", len(costs)), "sinks": unit("t", len(costs[0])), "costs": costs}


def arcs(pairs: list[tuple[str, str, float]], n: int, m: int, **extra: Any) -> dict[str, Any]:
    return {"sources": unit("s", n), "sinks": unit("t", m),
            "arcs": [{"from": a, "to": b, "cost": c} for a, b, c in pairs], **extra}
