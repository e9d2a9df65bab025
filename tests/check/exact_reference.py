"""An exact reference checker for certimatch answers, written from the definitions alone.

Nothing here is imported from the service (no ``service``, no ``schemas``): the checker reads
the problem and the answer as the standard ``json`` module parses them and decides, in Python
integers and ``fractions.Fraction``, whether the answer is a feasible, optimal answer to the
problem, with every reported number exact.

The mathematics (the project's design notes, sections 1-4a):

* The extended network: every source, node and sink, a super-source S, a super-sink T and a
  hard-shortfall pool P; supply arcs S->s (capacity supply, cost 0), demand arcs t->T
  (capacity demand, cost 0, always full), soft-shortfall arcs S->t (capacity demand, cost
  penalty), the pool arc S->P (capacity H, the reported hard shortfall) and hard-shortfall
  arcs P->t (capacity demand, cost 0). Costs are in the *min form*: the caller's cost for
  ``min``, negated for ``max``; penalties keep their sign.
* Least hard shortfall: a cut (Gale's feasibility theorem, max-flow min-cut: Ford and
  Fulkerson 1956): with Y the ids on the sink side, T' the hard sinks in Y and C the supply of
  the sources in Y plus the capacity of the user arcs entering Y, no flow delivers more than
  C into T', so every flow leaves at least demand(T') - C unmet, which must equal H.
* Least cost among the flows with that shortfall: the potentials pi (Ahuja, Magnanti &
  Orlin, *Network Flows*, 1993, section 9.4). Reduced cost c^pi(i, j) = c(i, j) - pi(i) + pi(j).
  For any pi with no unbounded arc of negative reduced cost,
  ``D (pi(S) - pi(T)) - sum over bounded arcs of u max(0, -c^pi)`` is a lower bound on the
  cost of every flow (weak duality); it equals the answer's cost exactly when complementary
  slackness holds (c^pi > 0 => x = 0, c^pi < 0 => x = u).

Numbers (README, "Numbers"; design notes 4a):

* A JSON integer is that integer. A JSON decimal, parsed by ``json`` into a double, stands for
  ``repr`` of that double: the shortest decimal that reads back as the same double, which is
  what a conforming writer emits. It is taken as an exact ``Fraction``.
* Costs and penalties are taken to 6 decimals, rounded half to even, exactly. When all of
  them are whole the grid is the integers (scale 1), else the 10**-6 grid (scale 10**6).
* A reported cost-like number (objective, dual objective, row cost, potential) stands for a
  grid value: with whole-number data it must be a whole number, which is its value; with
  fractional data its value is its decimal rounded half to even to the grid. It must equal
  the exact value; nothing is compared with a tolerance.
* Counts (flows, amounts, shortfall, cut numbers) are whole numbers from 0 to 2**53, and every
  reported number lies within +-2**53 (the range in which JSON doubles are exact).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from fractions import Fraction
from typing import Any

#: Decimals of the cost grid of fractional data (README, "Numbers").
GRID_DECIMALS = 6
#: Largest magnitude of a reported number: JSON doubles are exact integers up to here.
JSON_EXACT = 2**53

#: The virtual nodes; ints, so that no user id (a string) can collide with them.
S, T, P = 0, 1, 2
VIRTUAL_NAMES = {"super_source": S, "super_sink": T, "hard_pool": P}

Reason = tuple[str, str]


@dataclass(frozen=True)
class Arc:
    """One user arc: ends, min-form cost and the caller's cost in grid units, capacity."""

    tail: str
    head: str
    cost: int
    caller: int
    cap: int | None          # None: unbounded


@dataclass
class Model:
    """A problem read exactly."""

    ids: list[str]
    kind: dict[str, str]                  # id -> "source" | "node" | "sink"
    supply: dict[str, int]
    demand: dict[str, int]
    penalty: dict[str, int]               # soft sinks only, grid units
    arcs: list[Arc]
    matrix: bool
    pairs: dict[tuple[str, str], list[int]] = field(default_factory=dict)
    sigma: int = 1
    scale: int = 1
    reject: bool = False

    @property
    def total_demand(self) -> int:
        return sum(self.demand.values())

    def hard(self, sink: str) -> bool:
        return sink not in self.penalty


def decimal(x: Any) -> Fraction | None:
    """The exact value a JSON number stands for; None for anything else (see module notes)."""
    if type(x) is int:
        return Fraction(x)
    if type(x) is float and math.isfinite(x):
        return Fraction(repr(x))
    return None


def count(x: Any) -> int | None:
    """A whole number from 0 to 2**53, or None."""
    d = decimal(x)
    if d is None or d.denominator != 1 or not 0 <= d <= JSON_EXACT:
        return None
    return int(d)


def grid_value(x: Any, scale: int) -> int | None:
    """The grid value a reported cost-like number stands for, or None when it stands for none:
    not a number, beyond 2**53, or not whole with whole-number data."""
    d = decimal(x)
    if d is None or abs(d) > JSON_EXACT:
        return None
    if scale == 1:
        return int(d) if d.denominator == 1 else None
    return round(d * scale)              # Fraction rounds half to even


def reported_ok(x: Any, exact: int, scale: int) -> bool:
    """Whether a reported number stands for exactly ``exact`` grid units."""
    return grid_value(x, scale) == exact


def show(grid: int, scale: int) -> str:
    """A grid value written for a message."""
    return str(grid) if scale == 1 else str(Fraction(grid, scale))


def read_problem(problem: dict[str, Any]) -> Model:
    """The problem as exact numbers; it is assumed to be a valid request."""
    sources = problem["sources"]
    sinks = problem["sinks"]
    nodes = problem.get("nodes") or []
    kind = {s["id"]: "source" for s in sources}
    kind.update({v["id"]: "node" for v in nodes})
    kind.update({t["id"]: "sink" for t in sinks})
    ids = [s["id"] for s in sources] + [v["id"] for v in nodes] + [t["id"] for t in sinks]
    supply = {s["id"]: s.get("supply", 1) for s in sources}
    demand = {t["id"]: t.get("demand", 1) for t in sinks}
    raw_penalty = {t["id"]: decimal(t["penalty"]) for t in sinks
                   if t.get("penalty") is not None}
    sigma = -1 if problem.get("objective", "min") == "max" else 1
    if "costs" in problem:
        cells = [(s["id"], t["id"], c) for s, row in zip(sources, problem["costs"], strict=True)
                 for t, c in zip(sinks, row, strict=True) if c is not None]
        raw = [(a, b, decimal(c), None) for a, b, c in cells]
    else:
        raw = [(a["from"], a["to"], decimal(a["cost"]), a.get("capacity"))
               for a in problem["arcs"]]
    numbers = [c for _, _, c, _ in raw] + list(raw_penalty.values())
    scale = 1 if all(c.denominator == 1 for c in numbers) else 10**GRID_DECIMALS
    arcs = []
    for tail, head, c, cap in raw:
        caller = round(c * scale)
        arcs.append(Arc(tail, head, sigma * caller, caller, cap))
    pairs: dict[tuple[str, str], list[int]] = {}
    for k, a in enumerate(arcs):
        pairs.setdefault((a.tail, a.head), []).append(k)
    return Model(ids=ids, kind=kind, supply=supply, demand=demand,
                 penalty={t: round(p * scale) for t, p in raw_penalty.items()},
                 arcs=arcs, matrix="costs" in problem, pairs=pairs, sigma=sigma, scale=scale,
                 reject=problem.get("unmet_demand") == "reject")


def check_answer(problem: dict[str, Any], answer: Any) -> tuple[bool, list[Reason]]:
    """Decide whether ``answer`` is a feasible, optimal, exactly written answer to ``problem``.

    Parameters
    ----------
    problem : a valid request of ``POST /v1/solve``, as parsed by ``json``.
    answer : the answer to judge, as parsed by ``json`` (any content).

    Returns
    -------
    ``(valid, reasons)``: ``reasons`` lists ``(check, detail)`` for every failed check; the
    answer is valid exactly when it is empty.

    Notes
    -----
    Feasibility, the objective and the reported amounts are checked directly; least hard
    shortfall by the reported cut, least cost by the reported potentials (weak duality and
    complementary slackness, Ahuja, Magnanti & Orlin 1993, section 9.4).
    """
    return _Checker(read_problem(problem), answer).run()


class _Checker:
    def __init__(self, m: Model, answer: Any) -> None:
        self.m = m
        self.a = answer
        self.reasons: list[Reason] = []

    def fail(self, name: str, detail: str) -> None:
        self.reasons.append((name, detail))

    def run(self) -> tuple[bool, list[Reason]]:
        a = self.a
        keys = ("objective", "allocation", "unmet", "unused", "certificate")
        if not isinstance(a, dict) or any(k not in a for k in keys) or not isinstance(
                a["certificate"], dict):
            self.fail("answer_format", f"the answer needs the members {keys}")
            return False, self.reasons
        cert = a["certificate"]
        if cert.get("negated") is not (self.m.sigma < 0):
            self.fail("sense", f"negated must be {self.m.sigma < 0}")
        x = self._allocation(a["allocation"])
        if x is None:
            return False, self.reasons
        sent, received = self._feasibility(x)
        unused = {s: self.m.supply[s] - sent[s] for s in self.m.supply}
        unmet = {t: self.m.demand[t] - received[t] for t in self.m.demand}
        self._amounts("unused", a["unused"], unused)
        self._amounts("unmet", a["unmet"], unmet)
        if "flow_value" in a and count(a["flow_value"]) != sum(sent.values()):
            self.fail("flow_value", f"flow_value {a['flow_value']!r}, routed "
                      f"{sum(sent.values())}")
        primal = (sum(arc.cost * x[k] for k, arc in enumerate(self.m.arcs))
                  + sum(p * unmet[t] for t, p in self.m.penalty.items()))
        if not reported_ok(a["objective"], self.m.sigma * primal, self.m.scale):
            self.fail("objective", f"objective {a['objective']!r}, exact "
                      f"{show(self.m.sigma * primal, self.m.scale)}")
        hard_unmet = sum(u for t, u in unmet.items() if self.m.hard(t))
        shortfall = count(cert.get("hard_shortfall"))
        if shortfall is None or shortfall != hard_unmet:
            self.fail("hard_shortfall", f"hard_shortfall {cert.get('hard_shortfall')!r}, hard "
                      f"demand left unmet {hard_unmet}")
        if self.m.reject and (hard_unmet > 0 or (shortfall or 0) > 0):
            self.fail("unmet_demand_policy", f"unmet_demand is reject but {hard_unmet} units "
                      "of hard demand are unmet")
        if shortfall is not None:
            self._cut(cert.get("cut"), shortfall)
        pi = self._potentials(cert)
        if pi is not None and shortfall is not None:
            self._duality(cert, pi, x, sent, unmet, shortfall, primal)
        return not self.reasons, self.reasons

    # -- the flow -------------------------------------------------------------------------

    def _allocation(self, rows: Any) -> list[int] | None:
        """Flow per user arc named by the rows, or None when the rows name no arcs."""
        m = self.m
        if not isinstance(rows, list):
            self.fail("allocation_arcs", "allocation must be a list")
            return None
        x = [0] * len(m.arcs)
        seen: set[int] = set()
        for r, row in enumerate(rows):
            k = self._arc_of(r, row)
            if k is None:
                return None
            if k in seen:
                self.fail("allocation_arcs", f"allocation row {r}: a second row for arc "
                          f"{m.arcs[k].tail} -> {m.arcs[k].head}")
                return None
            seen.add(k)
            flow = count(row.get("flow"))
            if flow is None:
                self.fail("allocation_arcs", f"allocation row {r}: flow {row.get('flow')!r} "
                          "is no whole number from 0 to 2**53")
                return None
            x[k] = flow
            if row.get("cost") is not None and not reported_ok(
                    row["cost"], flow * m.arcs[k].caller, m.scale):
                self.fail("allocation_costs", f"allocation row {r}: cost {row['cost']!r}, "
                          f"exact {show(flow * m.arcs[k].caller, m.scale)}")
        return x

    def _arc_of(self, r: int, row: Any) -> int | None:
        m = self.m
        if not isinstance(row, dict):
            self.fail("allocation_arcs", f"allocation row {r} is no object")
            return None
        pair = (row.get("from"), row.get("to"))
        given = row.get("arc")
        if m.matrix and given is not None:
            self.fail("allocation_arcs", f"allocation row {r}: 'arc' on a matrix problem")
            return None
        if given is not None:
            if type(given) is not int or not 0 <= given < len(m.arcs) or (
                    m.arcs[given].tail, m.arcs[given].head) != pair:
                self.fail("allocation_arcs", f"allocation row {r}: arc {given!r} does not "
                          f"join {pair[0]!r} to {pair[1]!r}")
                return None
            return given
        found = m.pairs.get(pair, []) if all(type(v) is str for v in pair) else []
        if len(found) != 1:
            self.fail("allocation_arcs", f"allocation row {r}: {len(found)} allowed arcs "
                      f"join {pair[0]!r} to {pair[1]!r}")
            return None
        return found[0]

    def _feasibility(self, x: list[int]) -> tuple[dict[str, int], dict[str, int]]:
        """(net outflow of each source, net inflow of each sink), exact; failures recorded."""
        m = self.m
        out = dict.fromkeys(m.ids, 0)
        for k, arc in enumerate(m.arcs):
            if arc.cap is not None and x[k] > arc.cap:
                self.fail("capacity", f"arc {arc.tail} -> {arc.head} carries {x[k]} over its "
                          f"capacity {arc.cap}")
            out[arc.tail] += x[k]
            out[arc.head] -= x[k]
        for v in m.ids:
            if m.kind[v] == "node" and out[v] != 0:
                self.fail("conservation", f"node {v} has net outflow {out[v]}")
        sent = {s: out[s] for s in m.supply}
        received = {t: -out[t] for t in m.demand}
        for s, q in sent.items():
            if not 0 <= q <= m.supply[s]:
                self.fail("supply", f"source {s} sends {q}, allowed 0 to {m.supply[s]}")
        for t, q in received.items():
            if not 0 <= q <= m.demand[t]:
                self.fail("demand", f"sink {t} receives {q}, allowed 0 to {m.demand[t]}")
        return sent, received

    def _amounts(self, name: str, rows: Any, actual: dict[str, int]) -> None:
        """Reported unmet or unused amounts against the actual ones; unlisted means 0. An
        unmet entry's optional ``hard`` says whether the sink's demand is hard."""
        if not isinstance(rows, list):
            self.fail(name, f"{name} must be a list")
            return
        listed: dict[str, int] = {}
        for row in rows:
            key = row.get("id") if isinstance(row, dict) else None
            amount = count(row.get("amount")) if isinstance(row, dict) else None
            if key not in actual or key in listed or amount is None:
                self.fail(name, f"entry {row!r} names no {name} amount of its own")
                return
            if name == "unmet" and "hard" in row and row["hard"] is not self.m.hard(key):
                # optional; when given it must say whether the sink has a penalty
                self.fail(name, f"entry {row!r}: the sink is "
                          f"{'hard' if self.m.hard(key) else 'soft'}")
                return
            listed[key] = amount
        for key, q in actual.items():
            if listed.get(key, 0) != q:
                self.fail(name, f"{key}: reported {listed.get(key, 0)}, actual {q}")
                return

    # -- the certificate ------------------------------------------------------------------

    def _cut(self, cut: Any, shortfall: int) -> None:
        m = self.m
        if not isinstance(cut, dict) or not isinstance(cut.get("sink_side"), list):
            self.fail("shortfall_cut", "the cut needs a sink_side list")
            return
        side = cut["sink_side"]
        if any(v not in m.kind for v in side if type(v) is str) or any(
                type(v) is not str for v in side):
            self.fail("shortfall_cut", "the cut names an unknown id")
            return
        y = set(side)
        hard_in = [t for t in m.demand if t in y and m.hard(t)]
        demand = sum(m.demand[t] for t in hard_in)
        capacity = sum(q for s, q in m.supply.items() if s in y)
        for arc in m.arcs:
            if arc.tail not in y and arc.head in y:
                if arc.cap is None:
                    self.fail("shortfall_cut", f"unbounded arc {arc.tail} -> {arc.head} "
                              "crosses the cut")
                    return
                capacity += arc.cap
        if demand - capacity != shortfall:
            self.fail("shortfall_cut", f"the cut proves {demand} - {capacity} short, the "
                      f"certificate says {shortfall}")
        sinks = cut.get("sinks", [])
        if not isinstance(sinks, list) or sorted(map(str, sinks)) != sorted(hard_in):
            self.fail("shortfall_cut", "the cut's sinks are not the hard sinks on its side")
        if (count(cut.get("demand", 0)), count(cut.get("capacity", 0))) != (demand, capacity):
            self.fail("shortfall_cut", f"the cut reports {cut.get('demand')!r} and "
                      f"{cut.get('capacity')!r}, exact {demand} and {capacity}")

    def _potentials(self, cert: dict[str, Any]) -> dict[Any, int] | None:
        m = self.m
        given, virtual = cert.get("potentials"), cert.get("virtual_potentials")
        if not isinstance(given, dict) or not isinstance(virtual, dict):
            self.fail("potentials", "potentials and virtual_potentials must be objects")
            return None
        if set(given) != set(m.ids) or set(virtual) != set(VIRTUAL_NAMES):
            self.fail("potentials", "one potential per id and per virtual node, no other")
            return None
        pi: dict[Any, int] = {}
        named = list(given.items()) + [(VIRTUAL_NAMES[k], v) for k, v in virtual.items()]
        for key, value in named:
            g = grid_value(value, m.scale)
            if g is None:
                self.fail("potentials", f"potential of {key!r} is {value!r}: not a "
                          + ("whole number" if m.scale == 1 else "number") + " within 2**53")
                return None
            pi[key] = g
        return pi

    def _duality(self, cert: dict[str, Any], pi: dict[Any, int], x: list[int],
                 sent: dict[str, int], unmet: dict[str, int], shortfall: int,
                 primal: int) -> None:
        m = self.m
        ext = [(arc.tail, arc.head, arc.cost, arc.cap, x[k]) for k, arc in enumerate(m.arcs)]
        ext += [(S, s, 0, m.supply[s], sent[s]) for s in m.supply]
        ext += [(t, T, 0, m.demand[t], m.demand[t]) for t in m.demand]
        ext += [(S, t, p, m.demand[t], unmet[t]) for t, p in m.penalty.items()]
        hard = [t for t in m.demand if m.hard(t)]
        ext.append((S, P, 0, shortfall, sum(unmet[t] for t in hard)))
        ext += [(P, t, 0, m.demand[t], unmet[t]) for t in hard]
        dual = m.total_demand * (pi[S] - pi[T])
        infeasible = slack = None
        for tail, head, cost, cap, flow in ext:
            reduced = cost - pi[tail] + pi[head]
            if cap is None:
                if reduced < 0 and infeasible is None:
                    infeasible = (tail, head, reduced)
            else:
                dual -= cap * max(0, -reduced)
            if slack is None and ((reduced > 0 and flow != 0) or (
                    reduced < 0 and cap is not None and flow != cap)):
                slack = (tail, head, reduced, flow, cap)
        if infeasible is not None:
            self.fail("dual_feasibility", f"unbounded arc {infeasible[0]} -> {infeasible[1]} "
                      f"has reduced cost {show(infeasible[2], m.scale)}")
        if slack is not None:
            self.fail("complementary_slackness", "arc {} -> {} has reduced cost {} and flow "
                      "{} of capacity {}".format(*slack[:2], show(slack[2], m.scale),
                                                 *slack[3:]))
        if dual != primal:
            self.fail("dual_objective", f"dual objective {show(m.sigma * dual, m.scale)} "
                      f"differs from the cost {show(m.sigma * primal, m.scale)}")
        if not reported_ok(cert.get("dual_objective"), m.sigma * dual, m.scale):
            self.fail("dual_objective", f"dual_objective {cert.get('dual_objective')!r}, "
                      f"exact {show(m.sigma * dual, m.scale)}")
