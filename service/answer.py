"""The 200 answer of /v1/solve, built from the network, the flows and the certificate.

Numbers leave as exact integers when the request's costs were whole; otherwise costs,
potentials and objectives are divided back by the network's ``cost_scale``.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from service.certificate import Certificate
from service.dispatch import Solution
from service.errors import OutOfRange
from service.network import MAX_EXACT, Network


def _values(net: Network, scaled: np.ndarray) -> list:
    if net.cost_scale == 1:
        if len(scaled) and int(np.abs(scaled).max()) >= MAX_EXACT:
            raise OutOfRange("a cost, potential or objective of this problem reaches 2**53, "
                             "beyond exact JSON numbers; use smaller costs")
        return scaled.tolist()
    return (scaled / net.cost_scale).tolist()


def _value(net: Network, scaled: int) -> int | float:
    return _values(net, np.array([scaled], np.int64))[0]


def build_answer(net: Network, solution: Solution, cert: Certificate) -> dict[str, Any]:
    """The answer document (plain dicts and lists, ready for JSON)."""
    ext, x, pi = cert.ext, cert.flow, cert.potential
    ids = net.ids
    flow = solution.flow
    used = np.flatnonzero(flow > 0)
    used = used[np.lexsort((used, net.head[used], net.tail[used]))]
    froms = [ids[i] for i in net.tail[used].tolist()]
    tos = [ids[i] for i in net.head[used].tolist()]
    flows = flow[used].tolist()
    costs = _values(net, flow[used] * net.cost[used])
    if net.from_matrix:
        allocation = [{"from": f, "to": t, "flow": q, "cost": c}
                      for f, t, q, c in zip(froms, tos, flows, costs, strict=True)]
    else:
        allocation = [{"from": f, "to": t, "flow": q, "cost": c, "arc": a}
                      for f, t, q, c, a in zip(froms, tos, flows, costs, used.tolist(),
                                               strict=True)]
    off = net.sink_offset
    short = np.zeros(net.n_sinks, np.int64)
    short[ext.soft_sinks] = x[ext.blocks["soft"]]
    short[ext.hard_sinks] = x[ext.blocks["hard"]]
    idle = net.supply - x[ext.blocks["supply"]]
    sign = -1 if net.maximize else 1
    side = solution.shortfall.sink_side
    cut_sinks = np.flatnonzero(side[off:] & ~net.soft)
    cut_sources = side[: net.n_sources]
    crossing = ~side[net.tail] & side[net.head]
    potentials = _values(net, pi)
    return {
        "status": "optimal",
        "shape": solution.shape,
        "solver": solution.solver,
        "objective": _value(net, sign * cert.primal),
        "flow_value": int(x[ext.blocks["supply"]].sum()),
        "allocation": allocation,
        "unmet": [{"id": ids[off + i], "amount": int(short[i])}
                  for i in np.flatnonzero(short).tolist()],
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
                "capacity": int(net.supply[cut_sources].sum()
                                + net.capacity[crossing].sum()),
            },
            "dual_objective": _value(net, sign * cert.dual),
        },
    }
