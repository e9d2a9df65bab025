"""Engine calls the time limit can stop: in a child process, killed at the deadline.

The per-request limit (:mod:`service.solve.deadline`) is a SIGALRM whose handler raises
between Python bytecodes, so it cannot stop one long call into compiled code (OR-Tools'
cost scaling is quadratic on a long path: 15 s for a 12,000-node chain). :func:`run` makes
such a call in a child process instead:

* the worker's persistent engine host (:mod:`service.solve.host`), which takes arrays and
  numbers over a socket and is replaced only after a kill;
* a child forked for the call, when the call has other arguments (stage 1's whole
  network) or no host can be started. It inherits the input arrays copy-on-write
  (nothing is serialised on the way in), runs the call and sends back a dict of numpy
  arrays through a pipe, each in numpy's ``.npy`` format, read with
  ``allow_pickle=False`` (no pickle crosses the pipe). It always leaves with
  ``os._exit``, so no exit handler, log flush or gunicorn hook of the worker runs in it,
  and it touches no metric.

The worker waits on the socket or pipe; when the deadline fires, its handler raises
:class:`~service.errors.TimeLimitExceeded` out of the wait, exactly as anywhere else in
the request, and the ``finally`` kills the child (the host or the forked one) with SIGKILL
and reaps it. So a killed child is the same ``time-limit`` answer as any other late
request, the worker is free at once, and all the engine's memory goes with the child.

Small calls run in the process (:data:`IN_PROCESS_WORK`): even the host's round trip is
more than a small problem's call. Both children are asked to die with their parent
(Linux ``PR_SET_PDEATHSIG``), so a worker killed by gunicorn's timeout or by ``kill -9``
takes its engine run with it.
"""

from __future__ import annotations

import ctypes
import fcntl
import io
import os
import select
import signal
import threading
from collections.abc import Callable
from typing import Any

import numpy as np

from service.solve import deadline, host

__all__ = ["IN_PROCESS_WORK", "Arrays", "run"]

Arrays = dict[str, np.ndarray]

#: Calls whose work bound is at most this many elementary steps run in the process. The
#: bound is the engine method's published worst case (n^3 for Jonker-Volgenant,
#: n^2 m log(nC) for cost scaling, ...), so even its worst case takes a fraction of a
#: second here, well inside the second the time limit promises; the slowest adversarial
#: shape measured at this bound (a chain, for cost scaling) took about 5 ms, a fork's cost.
IN_PROCESS_WORK = 10**8

#: Key of the one array a child sends when its call raised instead of returning.
_ERROR = "__error__"
_PR_SET_PDEATHSIG = 1


def run(call: Callable[..., Arrays], *args: Any, work: int) -> Arrays:
    """``call(*args)``, in a forked child that the request's time limit can kill.

    Parameters
    ----------
    call : a function of numpy arrays and numbers returning a dict of numpy arrays (no
        object arrays); it must not raise a service error (return a status instead).
    work : the size of the call in the engine's own measure (arcs, cells, ...); at most
        :data:`IN_PROCESS_WORK` runs in the process.

    Notes
    -----
    A child is forked only on the main thread, with a real-time timer armed (the deadline
    of the request): there the deadline bounds the wait. Elsewhere (no limit, or a thread
    that signals do not reach) the call runs in the process, as it always did.
    """
    if work <= IN_PROCESS_WORK or host.in_host() or not _can_fork():
        return call(*args)
    mask = signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGALRM})
    try:
        return host.call(call, args)
    except host.Refused:
        pass
    except (EOFError, OSError):         # the host died or broke the stream: killed, reaped
        raise RuntimeError("the engine process ended without an answer") from None
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, mask)
    return _forked(call, args)


def _can_fork() -> bool:
    return (hasattr(os, "fork") and threading.current_thread() is threading.main_thread()
            and signal.getitimer(signal.ITIMER_REAL)[0] > 0)


def _forked(call: Callable[..., Arrays], args: tuple[Any, ...]) -> Arrays:
    """Run ``call`` in a child; the deadline's exception leaves with the child killed."""
    alarm = {signal.SIGALRM}
    # The alarm is held back while the child does not exist yet or is being reaped: raised
    # in between, it would leave a child running that nothing waits for, or open pipes.
    mask = signal.pthread_sigmask(signal.SIG_BLOCK, alarm)
    try:
        read_end, write_end = os.pipe()
        try:
            _widen(write_end)
            try:
                pid = os.fork()
            except OSError:         # no memory or process slot for a child: do it here
                signal.pthread_sigmask(signal.SIG_SETMASK, mask)
                return call(*args)
            if pid == 0:
                _child(call, args, read_end, write_end)
            os.close(write_end)
            write_end = -1
            # its CPU time is the request's: a limit that runs out while the child works
            # is the work's, not a busy server's (service.solve.deadline)
            deadline.working_children.add(pid)
            try:
                signal.pthread_sigmask(signal.SIG_SETMASK, mask)
                data = _read_all(read_end)
            finally:
                signal.pthread_sigmask(signal.SIG_BLOCK, alarm)
                _reap(pid)
                deadline.working_children.discard(pid)
        finally:
            os.close(read_end)
            if write_end >= 0:
                os.close(write_end)
    finally:
        # a deadline that passed during the reaping raises here, once the child is gone
        signal.pthread_sigmask(signal.SIG_SETMASK, mask)
    return _decode(data)


def _child(call: Callable[..., Arrays], args: tuple[Any, ...], read_end: int,
           write_end: int) -> None:
    """The child's whole life: call, write the arrays, leave without any clean-up."""
    code = 1
    try:
        os.close(read_end)
        host.forget()
        _die_with_parent()
        try:
            out = call(*args)
        except Exception as e:          # reported to the parent, which raises it again
            out = {_ERROR: np.array(f"{type(e).__name__}: {e}")}
        buffer = io.BytesIO()
        np.lib.format.write_array(buffer, np.array(list(out)), allow_pickle=False)
        for value in out.values():
            np.lib.format.write_array(buffer, np.asarray(value), allow_pickle=False)
        view = buffer.getbuffer()
        while len(view):
            view = view[os.write(write_end, view):]
        code = 0
    finally:
        os._exit(code)


def _die_with_parent() -> None:
    """End with the parent: SIGKILL when it dies (Linux), and the default action for the
    signals a worker handles itself (a child has nothing to finish or clean up)."""
    for name in ("SIGTERM", "SIGINT", "SIGQUIT", "SIGHUP", "SIGUSR1", "SIGUSR2"):
        signal.signal(getattr(signal, name), signal.SIG_DFL)
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(_PR_SET_PDEATHSIG, signal.SIGKILL)
    except (OSError, AttributeError):
        return
    if os.getppid() == 1:               # the parent died before the request was made
        os._exit(1)


def _widen(fd: int) -> None:
    """A 1 MiB pipe instead of 64 KiB: a million-arc answer crosses in fewer switches."""
    try:
        fcntl.fcntl(fd, getattr(fcntl, "F_SETPIPE_SZ", 1031), 1 << 20)
    except OSError:
        pass            # a lower system maximum: the default size works, a little slower


def _read_all(fd: int) -> bytes:
    """Everything the child writes, until it closes the pipe."""
    chunks: list[bytes] = []
    while True:
        # select returns when data comes or the child exits; the deadline's handler raises
        # out of it (PEP 475 retries the wait only when a handler returns)
        select.select([fd], [], [])
        chunk = os.read(fd, 1 << 20)
        if not chunk:
            return b"".join(chunks)
        chunks.append(chunk)


def _reap(pid: int) -> None:
    """Kill the child if it still runs, and wait for it so no zombie is left."""
    try:
        os.kill(pid, signal.SIGKILL)
    except ProcessLookupError:
        pass
    os.waitpid(pid, 0)


def _decode(data: bytes) -> Arrays:
    """The child's arrays; RuntimeError when it failed or died before finishing."""
    stream = io.BytesIO(data)
    try:
        names = np.lib.format.read_array(stream, allow_pickle=False)
        out = {str(k): np.lib.format.read_array(stream, allow_pickle=False) for k in names}
    except ValueError:     # nothing, or a cut-off stream: the child was killed or crashed
        raise RuntimeError("the engine process ended without an answer") from None
    if _ERROR in out:
        raise RuntimeError(f"the engine failed: {out[_ERROR].item()}")
    return out
