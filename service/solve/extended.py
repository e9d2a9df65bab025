"""The extended network of the certificate: the user network plus its virtual part.

Super-source, super-sink and hard-shortfall pool with their arcs (README, "The
certificate"); the min-cost-flow engine solves on it and the certifier proves on it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from service.network.model import Flow, Network


@dataclass(frozen=True)
class Extended:
    """The virtual arcs of the extended network, in fixed blocks.

    Nodes: user nodes ``0..n_user-1``, then super-source ``S``, super-sink ``T``, hard
    pool ``P``. Arc blocks (slices into the arrays): ``supply`` (S->source), ``demand``
    (sink->T), ``soft`` (S->soft sink, cost = penalty), ``pool`` (S->P, one arc of capacity
    ``hard_shortfall``) and ``hard`` (P->hard sink). All have finite capacities.
    """

    n_nodes: int
    S: int
    T: int
    P: int
    tail: np.ndarray
    head: np.ndarray
    cost: np.ndarray
    capacity: np.ndarray
    blocks: dict[str, slice]
    soft_sinks: np.ndarray    # sink positions (0..n_sinks-1) of the soft block, in order
    hard_sinks: np.ndarray    # sink positions of the hard block, in order


def extend(net: Network, hard_shortfall: int) -> Extended:
    """The virtual arcs around ``net`` with the hard pool capped at ``hard_shortfall``."""
    n = net.n_user
    S, T, P = n, n + 1, n + 2
    src = np.arange(net.n_sources, dtype=np.int64)
    snk = np.arange(net.n_sinks, dtype=np.int64)
    soft, hard = snk[net.soft], snk[~net.soft]
    off = net.sink_offset
    parts = [
        ("supply", np.full(len(src), S), src, np.zeros(len(src), np.int64), net.supply),
        ("demand", snk + off, np.full(len(snk), T), np.zeros(len(snk), np.int64), net.demand),
        ("soft", np.full(len(soft), S), soft + off, net.penalty[soft], net.demand[soft]),
        ("pool", np.array([S]), np.array([P]), np.zeros(1, np.int64),
         np.array([hard_shortfall])),
        ("hard", np.full(len(hard), P), hard + off, np.zeros(len(hard), np.int64),
         net.demand[hard]),
    ]
    blocks, start = {}, 0
    for name, t, *_ in parts:
        blocks[name] = slice(start, start + len(t))
        start += len(t)

    def cat(k: int) -> np.ndarray:
        return np.concatenate([np.asarray(p[k], dtype=np.int64) for p in parts])

    return Extended(n_nodes=n + 3, S=S, T=T, P=P, tail=cat(1), head=cat(2), cost=cat(3),
                    capacity=cat(4), blocks=blocks, soft_sinks=soft, hard_sinks=hard)


def virtual_flows(net: Network, ext: Extended, flow: Flow) -> np.ndarray:
    """Flows on the virtual arcs implied by a user flow (unique by conservation)."""
    tail, head = net.endpoints(flow.arc)
    net_out = np.zeros(net.n_user, np.int64)
    np.add.at(net_out, tail, flow.amount)
    np.subtract.at(net_out, head, flow.amount)
    short = net.demand + net_out[net.sink_offset:]
    x = np.zeros(len(ext.tail), np.int64)
    b = ext.blocks
    x[b["supply"]] = net_out[: net.n_sources]
    x[b["demand"]] = net.demand
    x[b["soft"]] = short[ext.soft_sinks]
    x[b["hard"]] = short[ext.hard_sinks]
    x[b["pool"]] = short[ext.hard_sinks].sum()
    return x
