"""Engines: each takes a :class:`~service.network.model.Network` and returns flows on its arcs.

One module per engine, one entry point ``solve``; engines know nothing of HTTP, of the
certificate or of each other. The dispatcher (:mod:`service.solve.dispatch`) picks one by shape.
Each runs its library call through :func:`service.solve.isolation.run`, so that the
request's time limit can stop it, and says how large that call may be (``work``: the
number of elementary steps of the method's published worst-case bound).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from service.network.model import Flow


@dataclass(frozen=True)
class Run:
    """An engine's answer: the flow, and its duals when the engine has them.

    ``duals`` are candidate potentials per node of the extended network
    (:mod:`service.solve.extended`), in the certificate's convention (a residual arc is
    fine when ``c - pi(tail) + pi(head) >= 0``); floats of any accuracy. The certificate
    makes them exact (:mod:`service.solve.potentials`) instead of computing potentials
    from scratch.
    """

    flow: Flow
    duals: np.ndarray | None = None


def log2_ceil(x: int) -> int:
    """Bits of a positive integer: the number of scaling phases of a cost-scaling method."""
    return max(1, int(x).bit_length())
