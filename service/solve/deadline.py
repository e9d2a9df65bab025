"""A per-request time limit that frees the worker when it runs out.

The limit is a real-time interval timer (SIGALRM) whose handler raises
:class:`~service.errors.TimeLimitExceeded` in the request's thread: the request is
abandoned whole, nothing of it is answered but the 503, and the worker takes the next
request. The exception can only be raised between Python bytecodes, so a single long
call into compiled code (one engine run) finishes before the request stops; the limit is
therefore exact to within the longest such call.

Signals reach only the main thread. gunicorn's sync workers, the Flask test client and
the command line all serve requests there; elsewhere (a threaded server) the limit is
not enforced, and :func:`deadline` says so by returning False.
"""

from __future__ import annotations

import math
import signal
import threading
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from service.errors import TimeLimitExceeded

__all__ = ["deadline"]


@contextmanager
def deadline(seconds: float, what: str) -> Iterator[bool]:
    """Run the body under a limit of ``seconds``; yields whether the limit is enforced."""
    if (seconds <= 0 or not hasattr(signal, "setitimer")
            or threading.current_thread() is not threading.main_thread()):
        yield False
        return

    armed = [True]

    def _expire(signum: int, frame: Any) -> None:
        if not armed[0]:
            return                          # fired while the block was already leaving
        raise TimeLimitExceeded(
            f"{what} took longer than {seconds:g} s; ask for a longer time_limit_s (up to the "
            "server's MAX_TIME_LIMIT_S) or send a smaller problem",
            headers={"Retry-After": str(max(1, math.ceil(seconds)))})

    # The alarm may fire at any bytecode, even inside these finally blocks: the handler is
    # installed and the timer armed inside the outer try, so the handler is always put back;
    # the timer is one-shot, so once it has fired nothing is left to disarm.
    previous = signal.signal(signal.SIGALRM, _expire)
    try:
        try:
            # a timer of less than a microsecond would round to 0, which disarms it
            signal.setitimer(signal.ITIMER_REAL, max(seconds, 1e-6))
            yield True
        finally:
            armed[0] = False
            signal.setitimer(signal.ITIMER_REAL, 0)
    finally:
        signal.signal(signal.SIGALRM, previous)
