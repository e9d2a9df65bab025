"""A per-request time limit that frees the worker when it runs out.

The limit is a real-time interval timer (SIGALRM) whose handler raises in the request's
thread: the request is abandoned whole, nothing of it is answered but the error, and the
worker takes the next request. The exception can only be raised between Python bytecodes,
so a single long call into compiled code (one engine run) finishes before the request
stops; the limit is therefore exact to within the longest such call.

When the limit runs out, the CPU time the process spent on the request tells why:

* it had the CPU (at least half of the limit in CPU seconds, or it lost less than
  ``BUSY_LOST_S`` to other work): the work needs more than the limit, and the same limit
  runs out again: :class:`~service.errors.TimeLimitExceeded` (4xx, no ``Retry-After``);
* it did not (less than half of the limit in CPU seconds, and at least ``BUSY_LOST_S``
  lost to other work on the machine): the same request may finish when the machine is
  less busy: :class:`~service.errors.ServerBusy` (503 with ``Retry-After``).

Signals reach only the main thread. gunicorn's sync workers, the Flask test client and
the command line all serve requests there; elsewhere (a threaded server) the limit is
not enforced, and :func:`deadline` says so by returning False.
"""

from __future__ import annotations

import math
import os
import resource
import signal
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from contextvars import ContextVar
from typing import Any

from service.errors import ServerBusy, ServiceError, TimeLimitExceeded

__all__ = ["BUSY_LOST_S", "BUSY_SHARE", "counted_from_arrival", "deadline", "time_limit_error"]

#: The request counts as starved of CPU when its CPU seconds are less than this share of
#: its limit...
BUSY_SHARE = 0.5
#: ...and it lost at least this many seconds to other work (less is scheduling noise).
BUSY_LOST_S = 0.1

class _WorkingChildren(dict[int, float]):
    """Child processes working for the request right now: pid -> the CPU seconds the
    child had already spent when it began (0 for a child forked for the call, the
    engine host's earlier work otherwise)."""

    def add(self, pid: int, already: float = 0.0) -> None:
        self[pid] = already

    def discard(self, pid: int) -> None:
        self.pop(pid, None)


#: Engine calls in child processes (:mod:`service.solve.isolation`, :mod:`.host`): the
#: CPU time they spend is the request's own.
working_children = _WorkingChildren()
#: CPU seconds of finished calls in children that live on (the engine host), less what a
#: reaped child's whole life adds to this process's children times (see child_reaped).
_settled = 0.0


def child_cpu(pid: int) -> float:
    """CPU seconds of a live (or not yet reaped) child so far (Linux /proc), 0 once gone."""
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii") as f:
            stat = f.read()
    except OSError:
        return 0.0
    fields = stat[stat.rindex(")") + 2:].split()   # utime, stime: fields 14 and 15
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


_child_cpu = child_cpu


def child_idle(pid: int) -> None:
    """A child that lives on finished its call: what the call spent stays counted."""
    global _settled
    already = working_children.pop(pid, None)
    if already is not None:
        _settled += child_cpu(pid) - already


def child_reaped(pid: int, spent: float) -> None:
    """A child was reaped after spending ``spent`` CPU seconds in its life (read just before
    the reaping): its whole life now shows in ``os.times()``'s children times, of which
    only what it spent while working for a request counts."""
    global _settled
    already = working_children.pop(pid, None)
    _settled -= spent if already is None else already


def _request_cpu() -> float:
    """CPU seconds of this process, of its reaped children and of the children at work."""
    # getrusage, not os.times(): the same figures, but os.times() took 0.1-9 ms a call on
    # this virtual machine (getrusage: under a microsecond), and this runs every request
    reaped = resource.getrusage(resource.RUSAGE_CHILDREN)
    return (time.process_time() + reaped.ru_utime + reaped.ru_stime + _settled
            + sum(child_cpu(pid) - already for pid, already in working_children.items()))


#: The clocks, looked up at call time so that tests can stand in for them.
_wall = time.monotonic
_cpu = _request_cpu


#: When the request being served arrived (real time, CPU time), if the caller said so.
_arrival: ContextVar[tuple[float, float] | None] = ContextVar("certimatch_arrival", default=None)


@contextmanager
def counted_from_arrival() -> Iterator[None]:
    """Count every :func:`deadline` opened inside from now, not from when it opens.

    The HTTP edge enters this before it reads the body: reading and parsing a large body
    (tens of megabytes take a good part of a second) are then part of the time limit, so a
    request is answered within its limit plus what follows the work (writing the answer).
    """
    token = _arrival.set((_wall(), _cpu()))
    try:
        yield
    finally:
        _arrival.reset(token)


def time_limit_error(seconds: float, what: str, cpu_s: float, elapsed_s: float
                     ) -> ServiceError:
    """The error for a limit of ``seconds`` that ran out after ``elapsed_s`` seconds, of
    which the process spent ``cpu_s`` on the CPU (see the module docstring)."""
    if cpu_s < BUSY_SHARE * seconds and elapsed_s - cpu_s >= BUSY_LOST_S:
        return ServerBusy(
            f"{what} ran out of its {seconds:g} s because the server was busy: it got "
            f"{cpu_s:.3g} s of CPU in {elapsed_s:.3g} s; the same request may finish later",
            headers={"Retry-After": str(max(1, math.ceil(seconds)))},
            time_limit_s=seconds, cpu_s=round(cpu_s, 3))
    return TimeLimitExceeded(
        f"{what} took longer than its time_limit_s of {seconds:g} s, with the CPU to itself "
        f"({cpu_s:.3g} s of CPU in {elapsed_s:.3g} s), so the same limit runs out again: ask "
        "for a longer time_limit_s (up to the server's MAX_TIME_LIMIT_S) or send a smaller "
        "problem", what=what, limit_s=seconds)


@contextmanager
def deadline(seconds: float, what: str) -> Iterator[bool]:
    """Run the body under a limit of ``seconds``; yields whether the limit is enforced."""
    if (seconds <= 0 or not hasattr(signal, "setitimer")
            or threading.current_thread() is not threading.main_thread()):
        yield False
        return

    armed = [True]
    started = _arrival.get() or (_wall(), _cpu())
    left = seconds - (_wall() - started[0])

    def _expire(signum: int, frame: Any) -> None:
        if not armed[0]:
            return                          # fired while the block was already leaving
        raise time_limit_error(seconds, what, _cpu() - started[1], _wall() - started[0])

    # The alarm may fire at any bytecode, even inside these finally blocks: the handler is
    # installed and the timer armed inside the outer try, so the handler is always put back;
    # the timer is one-shot, so once it has fired nothing is left to disarm.
    previous = signal.signal(signal.SIGALRM, _expire)
    try:
        try:
            # a timer of less than a microsecond would round to 0, which disarms it
            signal.setitimer(signal.ITIMER_REAL, max(left, 1e-6))
            yield True
        finally:
            armed[0] = False
            signal.setitimer(signal.ITIMER_REAL, 0)
    finally:
        signal.signal(signal.SIGALRM, previous)
