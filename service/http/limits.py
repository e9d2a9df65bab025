"""Which time limit ran out: the request's own or the server's, told apart at the edge.

``service.solve.deadline`` knows the limit and the CPU time, not where the limit came
from. A client must know, because what it can do differs: a request that ran out of its
own ``time_limit_s`` may ask for more, up to the server's ``MAX_TIME_LIMIT_S``; one that
ran out of the server's limit cannot, and only a smaller problem (or an operator) helps.
Neither is helped by waiting, so neither answer carries ``Retry-After``; only
``server-busy`` does (the request did not get the CPU, see the deadline module).
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from service.errors import ServerTimeLimit, TimeLimitExceeded
from service.settings import Settings
from service.solve.pipeline import time_limit


@contextmanager
def time_limits_told_apart(body: Any, settings: Settings) -> Iterator[None]:
    """Re-raise a ``time-limit`` as ``server-time-limit`` when the server's cap was the
    limit, and add ``max_time_limit_s`` (how far a request may raise its own) to both."""
    try:
        yield
    except ServerTimeLimit:
        raise
    except TimeLimitExceeded as e:
        cap = float(settings.max_time_limit_s)
        if time_limit(body, settings) < cap:
            e.extra["max_time_limit_s"] = cap
            raise
        asked = body.get("time_limit_s") if isinstance(body, dict) else None
        told = e.for_server(asked if _number(asked) else None)
        told.extra["max_time_limit_s"] = cap
        raise told from None


def _number(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)
