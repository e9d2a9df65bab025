"""The optimality certificate: potentials from the residual graph, and the dual objective.

Given any flow, the potentials are minus the shortest distances in its residual graph
from a virtual root joined to every node (Ahuja, Magnanti & Orlin, *Network Flows*, 1993,
§9.3-9.4). The flow is optimal exactly when that graph has no negative cycle; then every
residual arc has a non-negative reduced cost ``c - pi(i) + pi(j)``, which is complementary
slackness, and the dual objective equals the flow's cost.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from service.dispatch import Solution
from service.errors import CertificateFailure, OutOfRange
from service.network import Extended, Network, complete_flows, extend
from service.paths import bellman_ford

__all__ = ["Certificate", "certify", "exact_dot"]

_INT64_SAFE = 2.0**62


def exact_dot(a: np.ndarray, b: np.ndarray) -> int:
    """Exact integer sum of products; OutOfRange when it could leave 64-bit range."""
    if len(a) == 0:
        return 0
    bound = float(np.abs(a).astype(np.float64) @ np.abs(b).astype(np.float64))
    if bound >= _INT64_SAFE:
        raise OutOfRange("a sum of cost x flow products could exceed 2**62; "
                         "use smaller costs or capacities")
    return int(np.asarray(a, np.int64) @ np.asarray(b, np.int64))


@dataclass(frozen=True)
class Certificate:
    """Everything the answer needs, in exact scaled integers of the min form."""

    ext: Extended
    flow: np.ndarray          # per extended arc
    potential: np.ndarray     # per extended node
    primal: int               # min-form cost of the flow
    dual: int                 # dual objective of the potentials


def certify(net: Network, solution: Solution) -> Certificate:
    """Potentials proving ``solution`` optimal in the extended network.

    Parameters
    ----------
    net : the network.
    solution : flows on the user arcs and the stage-1 shortfall.

    Returns
    -------
    The certificate; raises CertificateFailure when the flow is not optimal (a negative
    cycle in the residual graph) or when the dual objective differs from the cost.

    Notes
    -----
    Dual objective of min-cost flow with capacities (AMO §9.4):
    ``sum_i b(i) pi(i) - sum_a u_a max(0, -c^pi_a)`` with ``b(S) = D``, ``b(T) = -D``.
    """
    ext = extend(net, solution.shortfall.amount)
    x = complete_flows(net, ext, solution.flow)
    fwd = x < ext.capacity
    bwd = x > 0
    r_tail = np.concatenate([ext.tail[fwd], ext.head[bwd]])
    r_head = np.concatenate([ext.head[fwd], ext.tail[bwd]])
    r_cost = np.concatenate([ext.cost[fwd], -ext.cost[bwd]])
    paths = bellman_ford(ext.n_nodes, r_tail, r_head, r_cost)
    if not paths.converged:
        raise CertificateFailure("the residual graph has a negative cycle: the engine's flow "
                                 "is not optimal")
    pi = -paths.dist
    reduced = ext.cost - pi[ext.tail] + pi[ext.head]
    demand = net.total_demand
    primal = exact_dot(ext.cost, x)
    dual = demand * int(pi[ext.S] - pi[ext.T]) - exact_dot(ext.capacity,
                                                          np.maximum(0, -reduced))
    if dual != primal:
        raise CertificateFailure(f"dual objective {dual} differs from the cost {primal}")
    return Certificate(ext=ext, flow=x, potential=pi, primal=primal, dual=dual)
