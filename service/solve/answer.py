"""The 200 answer of /v1/solve, built from the network, the flows and the certificate.

Numbers leave as exact integers when the request's costs were whole; otherwise costs,
potentials and objectives are divided back by the network's ``cost_scale``.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from schemas.numbers import MAX_ANSWER_VALUE
from service.errors import OutOfRange
from service.network.model import Flow, Network
from service.solve.certificate import Certificate
from service.solve.dispatch import Solution
from service.solve.feasibility import cut_capacity
from service.solve.reasons import PENALTY, waiting_reasons

#: Fractional numbers of an answer stay below this magnitude (see ``_values``).
FRACTIONAL_LIMIT = 2**33
#: The bound of answer numbers, as error details name it.
ANSWER_BOUND = ("|value| below 2**33 (8,589,934,592) for fractional costs; 2**53 for "
                "whole-number costs")


def _values(net: Network, scaled: np.ndarray) -> list:
    """Grid values as the numbers of the answer; OutOfRange when one cannot be written exactly.

    Whole-number data leaves as integers, exact in JSON below 2**53. Fractional data leaves
    as the double nearest to the decimal, which prints as that decimal (so reads back onto
    the same grid value) only below 2**33: from there on doubles are spaced 2**-19 or more
    apart, wider than the grid (IEEE 754 binary64).
    """
    if len(scaled):
        _within_range(net, int(np.abs(scaled).max()))
    if net.cost_scale == 1:
        return scaled.tolist()
    return (scaled / net.cost_scale).tolist()


def _value(net: Network, scaled: int) -> int | float:
    _within_range(net, abs(scaled))
    return scaled if net.cost_scale == 1 else scaled / net.cost_scale


def _products(net: Network, amount: np.ndarray, cost: np.ndarray) -> np.ndarray:
    """Row costs flow x cost in int64, refused first where the product could wrap."""
    if len(amount):
        top = float(np.abs(amount.astype(np.float64) * cost.astype(np.float64)).max())
        if top >= 2.0**62:
            _within_range(net, int(top))      # far beyond either bound: refused
    return amount * cost


def _within_range(net: Network, top: int) -> None:
    """OutOfRange unless a grid value of magnitude ``top`` can be written exactly."""
    limit = MAX_ANSWER_VALUE if net.cost_scale == 1 else FRACTIONAL_LIMIT * net.cost_scale
    if top >= limit:
        raise OutOfRange(f"a cost, potential or objective of this answer would reach "
                         f"{top / net.cost_scale:.10g}, beyond what JSON numbers hold exactly: "
                         f"answer numbers need {ANSWER_BOUND}; use smaller costs or quantities")


def _unmet_rows(net: Network, flow: Flow, short: np.ndarray, idle: np.ndarray,
                pi: np.ndarray, within: Network | None) -> list[dict[str, Any]]:
    """One row per sink left short: amount, hard or soft, and why it waits."""
    short_at = np.flatnonzero(short)
    reasons, reduced = waiting_reasons(net, flow, short, idle, pi, within=within)
    prices = _values(net, reduced) if PENALTY in reasons else []
    rows = []
    for k, (i, hard, why) in enumerate(zip(short_at.tolist(), (~net.soft[short_at]).tolist(),
                                           reasons, strict=True)):
        row = {"id": net.ids[net.sink_offset + i], "amount": int(short[i]), "hard": hard,
               "reason": why}
        if why == PENALTY:
            row["reduced_cost"] = prices[k]
        rows.append(row)
    return rows


def build_answer(net: Network, solution: Solution, cert: Certificate, *,
                 within: Network | None = None) -> dict[str, Any]:
    """The answer document (plain dicts and lists, ready for JSON).

    ``within``: the network the last stage optimised when it is not ``net`` itself (the
    pairs at or below a bottleneck threshold); the reasons' residual graph is its.
    """
    ext, xv, pi = cert.ext, cert.virtual_flow, cert.potential
    ids = net.ids
    flow = solution.flow
    tail, head = net.endpoints(flow.arc)
    order = np.lexsort((flow.arc, head, tail))
    arc, tail, head, amount = flow.arc[order], tail[order], head[order], flow.amount[order]
    froms = [ids[i] for i in tail.tolist()]
    tos = [ids[i] for i in head.tolist()]
    flows = amount.tolist()
    costs = _values(net, _products(net, amount, net.arc_cost(arc) * net.sign))
    if net.from_matrix:
        allocation = [{"from": f, "to": t, "flow": q, "cost": c}
                      for f, t, q, c in zip(froms, tos, flows, costs, strict=True)]
    else:
        allocation = [{"from": f, "to": t, "flow": q, "cost": c, "arc": a}
                      for f, t, q, c, a in zip(froms, tos, flows, costs, arc.tolist(),
                                               strict=True)]
    off = net.sink_offset
    short = np.zeros(net.n_sinks, np.int64)
    short[ext.soft_sinks] = xv[ext.blocks["soft"]]
    short[ext.hard_sinks] = xv[ext.blocks["hard"]]
    sent = xv[ext.blocks["supply"]].copy()
    if net.load is not None:
        np.add.at(sent, ext.head[ext.blocks["load"]], xv[ext.blocks["load"]])
    idle = net.supply - sent
    sign = net.sign
    side = solution.shortfall.sink_side
    cut_sinks = np.flatnonzero(side[off:] & ~net.soft)
    potentials = _values(net, pi)
    answer: dict[str, Any] = {
        "status": "optimal",
        "shape": solution.shape,
        "solver": solution.solver,
        "objective": _value(net, sign * cert.primal),
        "flow_value": int(sent.sum()),
        "allocation": allocation,
        "unmet": _unmet_rows(net, flow, short, idle, pi, within),
        "unused": [{"id": ids[i], "amount": int(idle[i])}
                   for i in np.flatnonzero(idle).tolist()],
        "certificate": {
            "negated": net.maximize,
            "potentials": dict(zip(ids, potentials[: net.n_user], strict=True)),
            "virtual_potentials": {"super_source": potentials[ext.S],
                                   "super_sink": potentials[ext.T],
                                   "hard_pool": potentials[ext.P]},
            "hard_shortfall": solution.shortfall.amount,
            "cut": {
                "sink_side": [ids[i] for i in np.flatnonzero(side).tolist()],
                "sinks": [ids[off + i] for i in cut_sinks.tolist()],
                "demand": int(net.demand[cut_sinks].sum()),
                "capacity": cut_capacity(net, side),
            },
            "dual_objective": _value(net, sign * cert.dual),
        },
    }
    if net.data:
        answer["data"] = net.data
    if net.pins is not None:
        pinned = np.isin(arc, net.pins.arc)
        for row, fixed in zip(allocation, pinned.tolist(), strict=True):
            if fixed:
                row["fixed"] = True
    if net.keep is not None:
        kept = int(xv[ext.blocks["keep"]].sum())
        moved = net.keep.total - kept
        answer["changes"] = {"kept": kept, "moved": moved,
                             "penalty": _value(net, net.keep.penalty * moved)}
    return answer
