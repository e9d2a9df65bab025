"""Pick an engine by the shape of the problem, run the two stages, return the flows.

* assignment (every supply and demand 1, no nodes, source->sink arcs, at most one arc per
  pair, no capacity but 1, no penalty): lapjv on a square dense matrix, scipy's
  linear_sum_assignment on a rectangular one, min_weight_full_bipartite_matching when
  sparse (arcs, or a matrix more than half null); when no matching covers the smaller
  side, min-cost flow instead.
* transportation (source->sink arcs only) and transshipment (anything else): stage 2
  (a min-cost flow) with every hard demand to be met; when that has no flow, stage 1
  (maximum flow into the hard sinks) for the least hard shortfall, then stage 2 again.
  Stage 2 is POT's network simplex for a transportation problem whose arcs have no
  binding capacity and whose costs float64 holds exactly, OR-Tools' cost scaling
  otherwise (README "How a problem is solved" has the measurements behind the choice).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Literal

import numpy as np

from service.errors import OutOfRange
from service.network.model import Arcs, Flow, Network
from service.solve import isolation
from service.solve.engines import (
    Run,
    dense_assignment,
    min_cost_flow,
    sparse_assignment,
    transportation,
)
from service.solve.feasibility import (
    Shortfall,
    check_bounded,
    least_shortfall,
    reject_if_short,
    shortfall_of_matching,
)
from service.solve.paths import order_by
from service.solve.pinned import check_pin_capacity, pinned_shortfall

#: A cost matrix with at least this share of allowed cells goes to the dense engine.
DENSE_SHARE = 0.5


@dataclass(frozen=True)
class Solution:
    """Flows on the user arcs, with the stage-1 shortfall and who produced them.

    ``duals``: the engine's candidate potentials on the extended network, when it has
    them; ``free_arcs``: without duals, whether the certificate should start from the
    free-arc forest of the flow (worth it for a min-cost-flow engine's flow, whose free
    arcs are many; not for a matching, whose arcs all sit at a bound).
    """

    shape: str
    solver: str
    flow: Flow
    shortfall: Shortfall
    duals: np.ndarray | None = None
    free_arcs: bool = False


def shape_of(net: Network) -> str:
    """'assignment', 'transportation' or 'transshipment' (see module docstring)."""
    unit = (bool(np.all(net.supply == 1)) and bool(np.all(net.demand == 1))
            and not net.soft.any())
    if net.arc_list is None:
        return "assignment" if unit else "transportation"
    arcs = net.arc_list
    bipartite = (net.n_nodes == 0 and bool(np.all(arcs.tail < net.n_sources))
                 and bool(np.all(arcs.head >= net.sink_offset)))
    if not bipartite:
        return "transshipment"
    if unit and bool(np.all(arcs.capacity[arcs.bounded] == 1)) and _pairs_unique(net, arcs):
        return "assignment"
    return "transportation"


def _pairs_unique(net: Network, arcs: Arcs) -> bool:
    keys = arcs.tail * net.n_sinks + (arcs.head - net.sink_offset)
    ordered = keys[order_by(keys, net.n_sources * net.n_sinks)]
    return not bool(np.any(ordered[1:] == ordered[:-1]))


def solve(net: Network) -> Solution:
    """Solve ``net``: raises Unbounded, or Infeasible when unmet hard demand is rejected."""
    check_bounded(net)
    shape = shape_of(net)
    if net.replans:
        check_pin_capacity(net)
        # bounds and parallel arcs: only the min-cost-flow engine takes them
        solved = _two_stages(net, min_cost_flow.solve)
        assert solved is not False
        shortfall, run = solved
        return Solution(shape, min_cost_flow.NAME, run.flow, shortfall, free_arcs=True)
    if shape == "assignment":
        matched = _assignment(net)
        if matched is not None:
            solver, run = matched
            shortfall = shortfall_of_matching(net, len(run.flow.arc))
            reject_if_short(net, shortfall)
            return Solution(shape, solver, run.flow, shortfall, run.duals)
    if shape == "transportation" and transportation.suits(net):
        solved = _two_stages(net, transportation.solve)
        if solved is not False:
            shortfall, run = solved
            return Solution(shape, transportation.NAME, run.flow, shortfall, run.duals)
    solved = _two_stages(net, min_cost_flow.solve)
    assert solved is not False
    shortfall, run = solved
    return Solution(shape, min_cost_flow.NAME, run.flow, shortfall, free_arcs=True)


def _assignment(net: Network) -> tuple[str, Run] | None:
    """The assignment engines' matching, or None when none covers the smaller side."""
    cells = net.n_sources * net.n_sinks
    if net.from_matrix and net.n_arcs >= DENSE_SHARE * cells:
        return dense_assignment.solve(net)
    run = sparse_assignment.solve(net)
    return None if run is None else (sparse_assignment.NAME, run)


def _two_stages(net: Network, engine: Callable[[Network, int], Run | None | bool]
                ) -> tuple[Shortfall, Run] | Literal[False]:
    """Stage 2 meeting every hard demand, else stage 1 and stage 2 within its shortfall.

    False when the engine declines the problem (see :func:`transportation.solve`).
    """
    # Stage 2 with no hard shortfall allowed first: when it finds a flow, every hard demand
    # is met and stage 1 has nothing to prove (saves a maximum flow in the common case).
    met = engine(net, 0)
    if met is False:
        return False
    if met is not None:
        assert isinstance(met, Run)
        return Shortfall.none(net), met
    shortfall = _stage_one(net)
    reject_if_short(net, shortfall)
    run = engine(net, shortfall.amount)
    if run is False:
        return False
    if run is None:
        raise RuntimeError("no flow within the least hard shortfall stage 1 found")
    assert isinstance(run, Run)
    return shortfall, run


def _stage_one(net: Network) -> Shortfall:
    """:func:`least_shortfall`, through the runner: OR-Tools' push-relabel maximum flow is
    O(n^2 sqrt(m)) (Cheriyan & Maheshwari 1989) and, like any compiled call, must not
    outlast the time limit."""
    n = net.n_user + 2
    if net.pins is not None:
        return pinned_shortfall(net)
    out = isolation.run(_least_shortfall_arrays, net,
                        work=n * n * max(1, math.isqrt(len(net.arcs) + n)))
    if "out_of_range" in out:
        raise OutOfRange(str(out["out_of_range"].item()))
    return Shortfall(int(out["amount"]), out["sink_side"].astype(bool))


def _least_shortfall_arrays(net: Network) -> isolation.Arrays:
    try:
        found = least_shortfall(net)
    except OutOfRange as e:
        return {"out_of_range": np.array(e.detail)}
    return {"amount": np.array(found.amount), "sink_side": found.sink_side}
