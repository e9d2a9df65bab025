"""The model of a report: the request and the answer as arrays, in the caller's terms."""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from schemas.columns import as_records
from schemas.problem import TABLES
from service.report.style import _count, _ids

# --- the model: the request and answer as arrays ------------------------------------------

@dataclass
class _Model:
    answer: dict[str, Any]
    verdict: dict[str, Any]
    sources: list[str]
    nodes: list[str]
    sinks: list[str]
    supply: list[int]
    demand: list[int]
    penalty: list[float | None]
    maximize: bool
    from_matrix: bool
    unmet_policy: str
    tail: np.ndarray          # per arc, index into places (sources, nodes, sinks)
    head: np.ndarray
    cost: np.ndarray          # as given (scores for max)
    cap: np.ndarray           # inf where unbounded
    flow: np.ndarray = field(init=False)
    rc: np.ndarray = field(init=False)
    violation: np.ndarray = field(init=False)
    stray: list[dict[str, Any]] = field(default_factory=list)
    unmet: dict[str, int] = field(default_factory=dict)
    #: (reason, reduced cost or None) of each unmet row that gives a reason
    reasons: dict[str, tuple[str, Any]] = field(default_factory=dict)
    unused: dict[str, int] = field(default_factory=dict)
    pi: np.ndarray = field(init=False)
    #: (force_delta, forbid_delta) per arc, nan for null; only when the verifier proved them
    prices: tuple[np.ndarray, np.ndarray] | None = None
    pinned: np.ndarray = field(init=False)    # per arc: fixed by a pin
    body: Mapping[str, Any] = field(default_factory=dict)   # the request, as records

    @property
    def places(self) -> list[str]:
        return self.sources + self.nodes + self.sinks

    @property
    def sink_offset(self) -> int:
        return len(self.sources) + len(self.nodes)

    @property
    def valid(self) -> bool:
        return self.verdict.get("valid") is True

    @property
    def bipartite(self) -> bool:
        """Every arc runs from a source to a sink, at most one per pair: a matrix."""
        if self.from_matrix:
            return True
        if self.nodes or not len(self.tail):
            return bool(not self.nodes and len(self.sources) and len(self.sinks))
        if (self.tail >= len(self.sources)).any() or (self.head < self.sink_offset).any():
            return False
        pairs = self.tail * len(self.sinks) + (self.head - self.sink_offset)
        return len(np.unique(pairs)) == len(pairs)


def _model(body: Mapping[str, Any], verdict: Mapping[str, Any]) -> _Model:
    # a report draws a small problem: a table sent as arrays is read as records
    body = {**body, **{name: as_records(body[name]) for name in TABLES if name in body}}
    answer = body["answer"]
    sources, nodes, sinks = _ids(body["sources"]), _ids(body.get("nodes") or []), _ids(
        body["sinks"])
    index = {pid: i for i, pid in enumerate(sources + nodes + sinks)}
    off = len(sources) + len(nodes)
    if "costs" in body and body["costs"] is not None:
        grid = np.array(body["costs"], dtype=np.float64).reshape(len(sources), len(sinks))
        rows, cols = np.nonzero(~np.isnan(grid))
        tail, head = rows.astype(np.int64), (cols + off).astype(np.int64)
        cost = grid[rows, cols]
        cap = np.full(len(cost), np.inf)
        from_matrix = True
    else:
        arcs = body.get("arcs") or []
        tail = np.array([index.get(a["from"], -1) for a in arcs], np.int64)
        head = np.array([index.get(a["to"], -1) for a in arcs], np.int64)
        cost = np.array([a["cost"] for a in arcs], np.float64)
        cap = np.array([np.inf if a.get("capacity") is None else a["capacity"] for a in arcs],
                       np.float64)
        from_matrix = False
    m = _Model(
        answer=dict(answer), verdict=dict(verdict), sources=sources, nodes=nodes, sinks=sinks,
        supply=[_count(s.get("supply")) for s in body["sources"]],
        demand=[_count(s.get("demand")) for s in body["sinks"]],
        penalty=[s.get("penalty") for s in body["sinks"]],
        maximize=body.get("objective", "min") == "max",
        from_matrix=from_matrix, unmet_policy=str(body.get("unmet_demand", "minimize")),
        tail=tail, head=head, cost=cost, cap=cap)
    m.unmet = _amounts(answer.get("unmet", []))
    m.reasons = {str(r["id"]): (str(r["reason"]), r.get("reduced_cost"))
                 for r in answer.get("unmet", []) if r.get("reason") in _REASONS}
    m.unused = _amounts(answer.get("unused", []))
    m.flow = _flows(m, answer.get("allocation", []), index, len(sinks))
    potentials = answer.get("certificate", {}).get("potentials", {})
    m.pi = np.array([_float(potentials.get(p)) for p in m.places], np.float64)
    # The verifier's min form: scores negated for max, penalties not involved here.
    c = -cost if m.maximize else cost
    if len(tail):
        m.rc = c - m.pi[tail] + m.pi[head]
        eps = 1e-9 * (np.abs(c) + np.abs(m.pi[tail]) + np.abs(m.pi[head])) + 1e-9
        with np.errstate(invalid="ignore"):
            m.violation = ((m.flow > 0) & (m.rc > eps)) | ((m.rc < -eps) & (m.flow < cap))
    else:
        m.rc = np.zeros(0)
        m.violation = np.zeros(0, bool)
    m.prices = _proven_prices(m, answer.get("prices"))
    from service.report.replan import mark_replan  # it reads the model: imported here

    m.body = body
    mark_replan(m, body)
    return m


#: The verifier's checks of override prices: all must pass before a price is drawn.
_PRICE_CHECKS = ("price_rows", "price_distances", "force_delta", "forbid_delta")


def _proven_prices(m: _Model, rows: Any) -> tuple[np.ndarray, np.ndarray] | None:
    """Both prices per arc, when the answer has them and every price check passed."""
    passed = {c.get("name") for c in m.verdict.get("checks", []) if c.get("passed") is True}
    if not rows or not set(_PRICE_CHECKS) <= passed or len(rows) != len(m.tail):
        return None
    force = np.array([_float(r.get("force_delta")) for r in rows], np.float64)
    forbid = np.array([_float(r.get("forbid_delta")) for r in rows], np.float64)
    return force, forbid


def _float(x: Any) -> float:
    return float(x) if isinstance(x, int | float) and not isinstance(x, bool) else math.nan


_REASONS = ("no-eligible-source", "capacity", "penalty")


def _amounts(rows: Iterable[Mapping[str, Any]]) -> dict[str, int]:
    found: dict[str, int] = {}
    for row in rows:
        found[str(row["id"])] = found.get(str(row["id"]), 0) + int(row["amount"])
    return found


def _flows(m: _Model, rows: Sequence[Mapping[str, Any]], index: Mapping[str, int],
           n_sinks: int) -> np.ndarray:
    """Flow per arc from the allocation rows; rows that name no arc go to ``m.stray``."""
    flow = np.zeros(len(m.tail), np.int64)
    if m.from_matrix:
        # Arcs are the allowed cells in row-major order, so a cell's arc is found by
        # binary search on its flat index: no dictionary of up to 16 million cells.
        flat = m.tail * n_sinks + (m.head - (len(m.sources) + len(m.nodes)))
        pair_of: dict[tuple[int, int], int] = {}
    else:
        flat = np.zeros(0, np.int64)
        pair_of = {}
        for k, (t, h) in enumerate(zip(m.tail.tolist(), m.head.tolist(), strict=True)):
            pair_of.setdefault((t, h), k)
    for row in rows:
        t, h = index.get(str(row["from"]), -1), index.get(str(row["to"]), -1)
        k = -1
        if t >= 0 and h >= 0:
            arc = row.get("arc")
            if (not m.from_matrix and isinstance(arc, int) and 0 <= arc < len(m.tail)
                    and m.tail[arc] == t and m.head[arc] == h):
                k = arc
            elif m.from_matrix:
                sink = h - (len(m.sources) + len(m.nodes))
                if t < len(m.sources) and 0 <= sink < n_sinks:
                    pos = int(np.searchsorted(flat, t * n_sinks + sink))
                    if pos < len(flat) and flat[pos] == t * n_sinks + sink:
                        k = pos
            else:
                k = pair_of.get((t, h), -1)
        if k < 0:
            m.stray.append(dict(row))
        else:
            flow[k] += int(row["flow"])
    return flow
