"""The override prices as the answer writes them: one row per allowed pair, and the proof.

Rows follow the pairs' order (a matrix's allowed cells row by row, or the request's arcs);
numbers leave as the answer's other costs do (README, "Numbers"), nulls where no plan
serving the same hard demand exists. The proof names nodes by their index in the extended
network: sources, nodes and sinks in request order, then super-source, super-sink and hard
pool; residual arcs by the pair's arc id (README, "The certificate").
"""

from __future__ import annotations

from typing import Any

import numpy as np

from service.network.model import Network
from service.solve.answer import _values
from service.solve.certificate import Certificate
from service.solve.dispatch import Solution
from service.solve.prices import NONE, Prices, override_prices

__all__ = ["add_prices", "price_proof", "price_rows"]


def _nullable(net: Network, values: np.ndarray) -> list:
    """Answer numbers with None where ``values`` is NONE."""
    missing = values == NONE
    out = _values(net, np.where(missing, 0, values))
    if missing.any():
        for k in np.flatnonzero(missing).tolist():
            out[k] = None
    return out


def price_rows(net: Network, prices: Prices) -> list[dict[str, Any]]:
    """``{"from", "to", "flow", "force_delta", "forbid_delta"}`` (and ``arc`` for arc
    lists) for every allowed pair; deltas are losses, never negative, in the caller's
    units."""
    arcs, ids = net.arcs, net.ids
    froms = [ids[i] for i in arcs.tail.tolist()]
    tos = [ids[i] for i in arcs.head.tolist()]
    force, forbid = _nullable(net, prices.force), _nullable(net, prices.forbid)
    flows = prices.flow.tolist()
    if net.from_matrix:
        return [{"from": f, "to": t, "flow": q, "force_delta": a, "forbid_delta": b}
                for f, t, q, a, b in zip(froms, tos, flows, force, forbid, strict=True)]
    return [{"from": f, "to": t, "flow": q, "force_delta": a, "forbid_delta": b, "arc": k}
            for f, t, q, a, b, k in zip(froms, tos, flows, force, forbid,
                                        arcs.id.tolist(), strict=True)]


def _flow_rows(prices: Prices, steps: np.ndarray, amount: np.ndarray | None) -> list[list[int]]:
    """``[from, to, amount, arc]`` per step; arc -1 for a virtual arc."""
    res = prices.residual
    arc = res.arc[steps[:, -1]]
    amounts = np.ones(len(steps), np.int64) if amount is None else amount
    return np.stack([steps[:, 0], steps[:, 1], amounts, np.where(arc >= 0, arc, -1)],
                    axis=1).tolist()


def price_proof(net: Network, prices: Prices) -> dict[str, Any]:
    """Distance rows and trees to the roots, and how each used pair's units go around it."""
    reroutes: list[dict[str, Any]] = []
    units = sorted(prices.unit.items())
    if units:
        # all one-unit paths in one pass: a numpy call per pair would cost more than its data
        steps = np.concatenate([s for _, s in units])
        rows = _flow_rows(prices, steps, None) if len(steps) else []
        ends = np.cumsum([len(s) for _, s in units]).tolist()
        for (p, _), start, stop in zip(units, [0, *ends[:-1]], ends, strict=True):
            reroutes.append({"pair": p, "flow": rows[start:stop]})
    for p, found in sorted(prices.reroutes.items()):
        labels = np.where(found.reached, found.labels, NONE)
        flow = found.steps
        reroutes.append({"pair": p, "flow": _flow_rows(prices, flow[:, [0, 1, 3]], flow[:, 2]),
                         "labels": _nullable(net, labels)})
    reroutes.sort(key=lambda r: int(r["pair"]))
    return {
        "roots": prices.roots.tolist(),
        "distances": [_nullable(net, d) for d in prices.dist],
        "next": prices.succ.tolist(),
        "reroutes": reroutes,
    }


def add_prices(net: Network, solution: Solution, cert: Certificate, answer: dict[str, Any],
               max_work: int) -> None:
    """Put the prices and their proof into ``answer`` (the request asked for them)."""
    prices = override_prices(net, solution.flow, cert, max_work)
    answer["prices"] = price_rows(net, prices)
    answer["certificate"]["prices"] = price_proof(net, prices)
